"""The shipped demo cases: each runs, keeps its ledger, shows what it was built to show."""

from __future__ import annotations

from pathlib import Path

import pytest

from kickback import load_case, simulate

CASES = sorted((Path(__file__).resolve().parent.parent / "cases").glob("*.toml"))


@pytest.fixture(scope="module", params=CASES, ids=[p.stem for p in CASES])
def demo(request):
    case = load_case(request.param)
    return request.param.stem, case, simulate(case)


def test_marked_as_demo_data(demo):
    name, case, _ = demo
    assert "(demo data)" in case.title, f"{name}: title must say it is demo data"


def test_ledger_closes_and_nothing_is_nan(demo):
    name, _, res = demo
    f = res.figures
    assert abs(f.energy_balance_error) < 1e-6, f"{name}: balance {f.energy_balance_error:.2e}"
    assert not f.bound_hit, f"{name}: the run hit its time bound"
    assert f.to_zero_s is not None and f.to_zero_s > 0


def test_peak_at_least_supply(demo):
    # energy leaves the coil only while the node is above the supply (the coil voltage reverses)
    name, case, res = demo
    assert res.figures.peak_voltage_V > case.supply.voltage, name


EXPECTED_VERDICT = {"unclamped_mosfet": False}


def test_verdicts(demo):
    name, _, res = demo
    assert res.passed is EXPECTED_VERDICT.get(name, True), [c for c in res.checks if not c.passed]


def test_unclamped_fails_on_avalanche():
    res = simulate(load_case(CASES[0].parent / "unclamped_mosfet.toml"))
    failing = {(c.part, c.quantity) for c in res.checks if not c.passed}
    assert ("switch", "avalanche energy") in failing
    # nearly all the stored energy goes into the switch: no clamp, small coil resistance share
    f = res.figures
    assert f.avalanche_energy_J > 0.5 * f.stored_energy_J


def test_plain_diode_relay_releases_slower_than_zener_valve_would():
    # a plain diode's decay is ~L/R-limited; a Zener across the same coil cuts the decay time
    from dataclasses import replace

    from kickback.case import Element

    case = load_case(CASES[0].parent / "relay_board.toml")
    base = simulate(case).figures.to_zero_s
    clamp = case.clamps[0]
    zener = Element("zener", voltage=24.0, path="clamp[0].element[1]")
    faster = simulate(replace(case, clamps=(replace(clamp, elements=(*clamp.elements, zener)),))).figures
    assert faster.to_zero_s < 0.5 * base
    assert faster.peak_voltage_V > case.supply.voltage + 24.0
