"""The batch engine's study interface and its robustness at the edges.

Expected values come from closed forms derived here or from the engine's own single-variant path
compared with the many-variant path (a consistency property, not a copied number):

- LC ringing of the coil into the switch capacitance: the undamped peak from energy conservation,
  ½ C (v − Vs)² = ½ L i0² + ½ C Vs² at the first current zero (C. K. Alexander and M. N. O.
  Sadiku, Fundamentals of Electric Circuits, ch. 8), used to put a clamp exactly at the peak.
- First-order RL decay (same book, ch. 7) for the coincident release/10 % event.

Every component value is an invented demo value.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from kickback import load_case, simulate_many
from kickback.case import Case, Clamp, Coil, Element, Supply, Switch
from kickback.errors import CaseError, SolverError
from kickback.keypath import set_value
from kickback.ratings import rating_checks
from kickback.simulation import simulate


def _dz_case(**sw):
    clamp = Clamp("D+Z", "coil", (Element("diode", name="D1", model="constant-drop", forward_voltage=0.7,
                                          rated_reverse_voltage=100.0, rated_surge_current=5.0),
                                  Element("zener", name="Z1", voltage=24.0, dynamic_resistance=1.5,
                                          rated_pulse_energy=0.02)))
    return Case("valve (demo)", Supply(24.0), Coil(0.08, 30.0, release_current=0.1, release_delay=2e-3),
                Switch("mosfet", on_resistance=0.1, rated_voltage=60.0, **sw), (clamp,))


def test_many_variants_match_single_variant_runs():
    """Each variant of simulate_many equals simulate(engine='batch') on that variant's case, figure
    by figure and check by check (rows as kickback.ratings makes them)."""
    case = _dz_case(fall_time=200e-9)
    var = {"coil.inductance": [0.04, 0.08, 0.2], "clamp[0].element[1].voltage": [12.0, 24.0, 48.0]}
    many = simulate_many(case, var)
    assert many.n == 3 and bool(np.all(many.ok)), many.message
    for k in range(3):
        one = case
        for path, vals in var.items():
            one = set_value(one, path, vals[k])
        r = simulate(one, engine="batch")
        f = r.figures
        for name, want in (("switch.peak_voltage_V", f.peak_voltage_V), ("coil.decay_s.to_zero", f.to_zero_s),
                           ("clamps[0].elements[1].energy_J", f.clamps[0].elements[1].energy_J),
                           ("coil.release_s", f.release_s), ("energy_balance_error", f.energy_balance_error)):
            assert many.figures[name][k] == pytest.approx(want, rel=1e-12, abs=1e-18), name
        rows = rating_checks(one, f)
        assert len(rows) == sum(bool(c.applies[k]) for c in many.checks.values()), "same check rows"
        for ck in rows:
            col = many.checks[f"{ck.part}: {ck.quantity}"]
            assert col.applies[k]
            assert col.value[k] == pytest.approx(ck.value, rel=1e-12)
            assert col.limit[k] == pytest.approx(ck.limit, rel=1e-12)
            assert bool(col.passed[k]) == ck.passed
        assert bool(many.passed[k]) == r.passed


def test_chunks_do_not_change_results():
    """Processing in chunks of 2 or all at once gives identical columns (memory is bounded by the
    chunk, not by the number of variants)."""
    case = _dz_case(fall_time=100e-9, capacitance=200e-12)
    var = {"supply.voltage": np.linspace(12.0, 36.0, 5)}
    a = simulate_many(case, var, chunk=2)
    b = simulate_many(case, var)
    for name in a.figures:
        np.testing.assert_array_equal(a.figures[name], b.figures[name], err_msg=name)


def test_columns_are_flat_and_complete():
    case = _dz_case()
    many = simulate_many(case, {"coil.resistance": [20.0, 30.0]})
    cols = many.to_columns()
    assert all(len(v) == 2 for v in cols.values())
    for key in ("switch.peak_voltage_V", "coil.decay_s.to_zero", "clamps[0].energy_J",
                "clamps[0].elements[0].standoff_voltage_V", "vary.coil.resistance", "pass", "status"):
        assert key in cols, key
    row = many.row(1)
    assert row["status"] == "ok" and isinstance(row["switch.peak_voltage_V"], float)


@pytest.mark.parametrize(("variations", "message"), [
    pytest.param({"coil.inductanse": [0.1]}, "inductanse", id="unknown-key"),
    pytest.param({"clamp[3].element[0].voltage": [1.0]}, "out of range", id="no-such-clamp"),
    pytest.param({"coil.inductance": [0.1, 0.2], "coil.resistance": [1.0]}, "equal lengths", id="lengths"),
    pytest.param({"switch.type": [1.0]}, "not a numeric", id="not-numeric"),
])
def test_bad_variations_are_case_errors(variations, message):
    with pytest.raises(CaseError, match=message):
        simulate_many(_dz_case(), variations)


def test_a_failing_variant_says_why_and_the_rest_come_back():
    """No path conducts when a variant has neither capacitance nor clamp nor breakdown: that
    variant fails with a reason, the others are simulated. A negative inductance is not a coil:
    refused before anything runs, as the case file refuses it."""
    base = Case("bare (demo)", Supply(12.0), Coil(0.05, 8.0), Switch("ideal", capacitance=1e-9))
    many = simulate_many(base, {"switch.capacitance": [1e-9, 0.0, 2e-9]})
    assert list(many.status) == ["ok", "failed", "ok"]
    assert "no conducting path" in many.message[1]
    assert np.isfinite(many.figures["switch.peak_voltage_V"][0])
    assert np.isnan(many.figures["switch.peak_voltage_V"][1]) and not many.passed[1]
    with pytest.raises(CaseError, match="coil.inductance: must be > 0, got -1 H"):
        simulate_many(base, {"coil.inductance": [0.05, 0.05, -1.0]})


@pytest.mark.parametrize("change", [
    pytest.param(lambda c: dataclasses.replace(c, coil=dataclasses.replace(c.coil, saturation_current=1.0)),
                 id="saturating-coil"),
    pytest.param(lambda c: dataclasses.replace(c, switch=dataclasses.replace(
        c.switch, thermal_resistance=(1.0,), thermal_tau=(1e-3,))), id="thermal-network"),
])
def test_unsupported_features_are_reported(change):
    case = change(_dz_case())
    many = simulate_many(case)
    assert many.status[0] == "failed" and many.message[0]
    with pytest.raises(SolverError, match="batch engine"):
        simulate(case, engine="batch")


def _rlc_peak(vs, L, R, C, i0):
    """First peak of the coil ringing into the switch capacitance (series RLC, ch. 8): the node
    at the first zero of the coil current (scipy.linalg.expm, scipy.optimize.brentq)."""
    from scipy import linalg, optimize

    A = np.array([[-R / L, -1.0 / L], [1.0 / C, 0.0]])
    x0 = np.array([i0, -vs])

    def x(t):
        return linalg.expm(A * t) @ x0

    t_pk = optimize.brentq(lambda t: x(t)[0], 1e-12, math.pi * math.sqrt(L * C), xtol=1e-22, rtol=1e-15)
    return vs + x(t_pk)[1]


@pytest.mark.parametrize("below", [0.0, 1e-9, 1e-6], ids=["touching", "grazing-1e-9", "just-inside-1e-6"])
def test_grazing_clamp_threshold(below):
    """A bidirectional TVS whose threshold the first ringing peak just reaches (or exceeds by 1e-9,
    1e-6 of it): no stall, no NaN, the peak no higher than the closed form, the clamp energy
    vanishing with the overlap, the ledger closed."""
    vs, L, R, C, i0 = 24.0, 10e-3, 5.0, 1e-9, 0.5
    peak = _rlc_peak(vs, L, R, C, i0)
    tvs = Clamp("TVS", "switch", (Element("tvs", voltage=peak * (1 - below), dynamic_resistance=0.5,
                                          bidirectional=True),))
    case = Case("graze (demo)", Supply(vs), Coil(L, R, initial_current=i0), Switch("ideal", capacitance=C), (tvs,))
    f = simulate(case, engine="batch").figures
    e0 = 0.5 * L * i0**2
    assert f.peak_voltage_V <= peak * (1 + 1e-9)
    assert f.peak_voltage_V >= peak * (1 - below) * (1 - 1e-12)
    # derived: near the peak v ≈ V − ½|v''|t² with |v''| = (V − Vs)/(L C) (C dv/dt = i, L di/dt ≈
    # −(V − Vs)); the overlap ΔV lasts 2·sqrt(2ΔV/|v''|) with at most ΔV/r_d in the TVS
    dv = below * peak
    v2 = (peak - vs) / (L * C)
    bound = peak * (dv / 0.5) * 2 * math.sqrt(2 * dv / v2)
    assert f.clamps[0].energy_J <= bound + 1e-15 * e0, f"clamp energy {f.clamps[0].energy_J:.3g} J > {bound:.3g} J"
    assert abs(f.energy_balance_error) <= 1e-9
    assert all(math.isfinite(x) for x in (f.to_zero_s or 0.0, f.end_time_s, f.left_in_capacitors_J))


def test_critical_damping_is_continuous():
    """An RC snubber at critical damping and 1e-8 either side: the figures differ by no more than
    the parameter change moves them (no jump where the eigenvectors of the loop coincide)."""
    L, R, cs = 0.08, 30.0, 1e-6
    rs_crit = 2 * math.sqrt(L / cs) - R

    def run(rs):
        clamp = Clamp("RC", "coil", (Element("resistor", resistance=rs), Element("capacitor", capacitance=cs)))
        return simulate(Case("RC (demo)", Supply(24.0), Coil(L, R), Switch("ideal"), (clamp,)), engine="batch").figures

    mid, lo, hi = run(rs_crit), run(rs_crit * (1 - 1e-8)), run(rs_crit * (1 + 1e-8))
    for name in ("to_10_percent_s", "to_zero_s", "resistance_energy_J", "end_time_s"):
        a, b, c = getattr(lo, name), getattr(mid, name), getattr(hi, name)
        assert abs(a - b) <= 1e-6 * abs(b) and abs(c - b) <= 1e-6 * abs(b), name
        assert (a - b) * (c - b) <= 0 or abs(a - c) <= 1e-12 * abs(b), f"{name} not monotone through critical"
    assert abs(mid.energy_balance_error) <= 1e-9


def test_coincident_release_and_ten_percent():
    """Release current at exactly 10 % of i0: the release time is the 10 % time plus the delay
    (first-order decay, ch. 7; both events fire at once)."""
    vs, L, R = 24.0, 0.08, 30.0
    i0 = vs / R
    clamp = Clamp("D+Z", "coil", (Element("diode", model="constant-drop", forward_voltage=0.7),
                                  Element("zener", voltage=24.0)))
    case = Case("coincident (demo)", Supply(vs), Coil(L, R, release_current=0.1 * i0, release_delay=1e-3),
                Switch("ideal"), (clamp,))
    f = simulate(case, engine="batch").figures
    vc = 24.7
    t10 = L / R * math.log((i0 + vc / R) / (0.1 * i0 + vc / R))
    assert f.to_10_percent_s == pytest.approx(t10, rel=1e-9)
    assert f.release_s == pytest.approx(t10 + 1e-3, rel=1e-9)


@pytest.mark.parametrize("name", ["irrigation_valve", "relay_board", "contactor_varistor", "motor_snubber",
                                  "unclamped_mosfet", "conveyor_brake"])
def test_demo_case_sweeps_close_the_ledger(name, cases_dir):
    """Sweeps of the demo cases (thermal networks left out): every variant simulated, the ledger
    closed to 1e-9, the fits of nonlinear laws stated."""
    from tests.test_batch import _no_thermal

    case = _no_thermal(load_case(cases_dir / f"{name}.toml"))
    many = simulate_many(case, {"coil.inductance": case.coil.inductance * np.array([0.5, 1.0, 2.0])})
    assert bool(np.all(many.ok)), many.message
    assert float(np.max(np.abs(many.figures["energy_balance_error"]))) <= 1e-9
    nonlinear = any(el.type == "varistor" or (el.type == "diode" and el.model != "constant-drop")
                    for cl in case.clamps for el in cl.elements)
    assert bool(many.fits) == nonlinear


def test_result_contract_matches_the_detailed_engine(cases_dir):
    """simulate(engine='batch') returns the same contract (DESIGN §6) with the same keys."""
    case = load_case(cases_dir / "unclamped_mosfet.toml")

    def keys(d, prefix=""):
        out = set()
        for k, v in d.items():
            out.add(prefix + k)
            if isinstance(v, dict):
                out |= keys(v, prefix + k + ".")
        return out

    a, b = simulate(case).to_dict(), simulate(case, engine="batch").to_dict()
    assert keys(a) == keys(b)
    assert [c["part"] + c["quantity"] for c in a["checks"]] == [c["part"] + c["quantity"] for c in b["checks"]]
