"""The audit (kickback.audit): each rule catches its kind of failure, on one result and on columns;
``run`` exits 2 without a verdict; the studies solve an audit-failed variant on the other engine
or count it as unsolved.

The results are made wrong on purpose (a figure replaced, an engine monkeypatched); the right
results they start from are checked against a closed form where a number matters: a coil of
inductance L and resistance R clamped by a constant-drop diode in series with an ideal Zener
(V_c = V_d + V_Z) decays as i(t) = (i0 + V_c/R)·e^(−tR/L) − V_c/R (first-order RL circuit,
e.g. Horowitz & Hill, The Art of Electronics, 3rd ed., §1.5).
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import replace

import numpy as np
import pytest
from click.testing import CliRunner

from kickback.audit import LEDGER_LIMIT, audit_columns, audit_many, case_getter, result_columns
from kickback.caseio import load_case
from kickback.cli import main
from kickback.simulation import simulate

CASE = """
title = "audit test: 24 V coil, diode + Zener (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "100 mH"
resistance = "48 Ω"
release_current = "100 mA"
[switch]
type = "ideal"
breakdown_voltage = "80 V"
rated_voltage = "60 V"
rated_avalanche_energy = "10 mJ"
[[clamp]]
name = "DZ"
across = "coil"
[[clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "0.7 V"
rated_reverse_voltage = "100 V"
[[clamp.element]]
type = "zener"
voltage = "18 V"
rated_pulse_energy = "50 mJ"
[checks]
max_release_time = "10 ms"
"""


@pytest.fixture(scope="module")
def case():
    return load_case(CASE, source="audit.toml")


@pytest.fixture(scope="module")
def good(case):
    return simulate(case)


def test_a_right_result_passes_its_audit(good):
    # closed form (module docstring): time to 10 % of i0 = 0.5 A
    L, R, i0, vc = 0.1, 48.0, 0.5, 18.7
    t10 = L / R * math.log((i0 + vc / R) / (0.1 * i0 + vc / R))
    assert good.figures.to_10_percent_s == pytest.approx(t10, rel=1e-4), "RL decay with a constant clamp"
    assert good.audit.passed, good.audit.findings
    assert good.passed is True
    assert good.to_dict()["audit"] == {"passed": True, "findings": []}


def _with(result, **figures):
    return replace(result, figures=replace(result.figures, **figures))


def test_ledger_residual_over_the_limit_is_caught(good):
    bad = _with(good, energy_balance_error=3 * LEDGER_LIMIT)
    assert any("energy ledger residual" in f for f in bad.audit.findings), bad.audit.findings
    assert bad.passed is None
    d = bad.to_dict()
    assert d["pass"] is None and d["audit"]["passed"] is False
    # just inside the limit is not a finding
    assert _with(good, energy_balance_error=0.9 * LEDGER_LIMIT).audit.passed


@pytest.mark.parametrize("field", ["avalanche_energy_J", "crossover_energy_J", "body_diode_energy_J",
                                   "resistance_energy_J"])
def test_negative_switch_or_coil_dissipation_is_caught(good, field):
    bad = _with(good, **{field: -1e-3 * good.figures.stored_energy_J})
    assert any(f.startswith("negative dissipation") for f in bad.audit.findings), bad.audit.findings
    assert bad.passed is None


def test_rounding_below_the_floor_is_not_a_finding(good):
    assert _with(good, crossover_energy_J=-1e-12 * good.figures.stored_energy_J).audit.passed


def test_negative_clamp_element_energy_is_caught(good):
    cl = good.figures.clamps[0]
    el = replace(cl.elements[1], energy_J=-0.01)
    bad = _with(good, clamps=(replace(cl, elements=(cl.elements[0], el)),))
    assert any("negative dissipation: DZ: zener 2" in f for f in bad.audit.findings), bad.audit.findings


def test_missing_check_is_caught(good):
    for drop in range(len(good.checks)):
        ck = good.checks[drop]
        bad = replace(good, checks=good.checks[:drop] + good.checks[drop + 1:])
        assert f"missing check: {ck.part}: {ck.quantity}" in bad.audit.findings, (ck, bad.audit.findings)
        assert bad.passed is None


def test_avalanche_calls_for_its_check_even_when_booked_negative(good):
    # the batch engine's defect of issue 14: a negative avalanche energy and no avalanche check
    # (the ratings now make the row by rule; a result without it, as the batch engine gave, is caught)
    bad = _with(good, avalanche_energy_J=-0.1, peak_voltage_V=85.0)
    bad = replace(bad, checks=tuple(c for c in bad.checks if c.quantity != "avalanche energy"))
    assert "missing check: switch: avalanche energy" in bad.audit.findings
    assert any(f.startswith("negative dissipation: switch avalanche") for f in bad.audit.findings)


@pytest.mark.parametrize("field", ["peak_voltage_V", "supply_energy_J", "left_in_capacitors_J"])
@pytest.mark.parametrize("bad_value", [math.nan, math.inf])
def test_non_finite_figure_is_caught(good, field, bad_value):
    bad = _with(good, **{field: bad_value})
    assert any("expected a finite number" in f for f in bad.audit.findings), bad.audit.findings


def test_a_time_that_does_not_occur_may_be_none_but_not_nan(good):
    assert _with(good, release_s=None).audit.passed
    assert not _with(good, release_s=math.nan).audit.passed


def test_columns_rules_flag_only_the_bad_variant(case, good):
    cols = {k: np.repeat(v, 3) for k, v in result_columns(good).items()}
    cols["switch.avalanche_energy_J"][1] = -0.5
    cols["energy_balance_error"][2] = 0.01
    present = {f"{c.part}: {c.quantity}": np.ones(3, bool) for c in good.checks}
    found = audit_columns(case, cols, present, case_getter(case, 3), 3)
    assert found[0] == ()
    assert any("negative dissipation: switch avalanche" in f for f in found[1])
    assert any("energy ledger" in f for f in found[2]) and len(found[2]) == 1


def test_audit_many_on_the_batch_engine(case):
    from kickback.studies.many import simulate_many

    many = simulate_many(case, {"supply.voltage": [20.0, 24.0, 28.0]}, workers=1)
    assert audit_many(many) == [(), (), ()]
    av = many.figures["switch.avalanche_energy_J"].copy()
    av[1] = -0.2
    bad = replace(many, figures=many.figures | {"switch.avalanche_energy_J": av})
    found = audit_many(bad)
    assert found[0] == () and found[2] == ()
    assert any(f.startswith("negative dissipation: switch avalanche") for f in found[1])


# --- run exits 2 --------------------------------------------------------------------------------

def _corrupt_figures(monkeypatch, **figures):
    import kickback.simulation as sim

    real = sim.compute_figures
    monkeypatch.setattr(sim, "compute_figures", lambda w: replace(real(w), **figures))


@pytest.fixture()
def case_file(tmp_path):
    p = tmp_path / "audit.toml"
    p.write_text(CASE)
    return p


@pytest.mark.parametrize("figures", [{"avalanche_energy_J": -0.05}, {"energy_balance_error": 0.02},
                                     {"peak_voltage_V": math.nan}], ids=["negative", "ledger", "nan"])
def test_run_exits_2_without_a_verdict(monkeypatch, case_file, figures):
    _corrupt_figures(monkeypatch, **figures)
    res = CliRunner().invoke(main, ["run", str(case_file)])
    assert res.exit_code == 2, res.output
    assert "failed its audit" in res.stderr and "PASS" not in res.stdout and "FAIL" not in res.stdout
    res = CliRunner().invoke(main, ["run", str(case_file), "--json"])
    assert res.exit_code == 2
    d = json.loads(res.stdout)
    assert d["pass"] is None and d["audit"]["passed"] is False and d["audit"]["findings"]


def test_run_exits_2_on_a_missing_check(monkeypatch, case_file):
    import kickback.simulation as sim

    real = sim.rating_checks
    monkeypatch.setattr(sim, "rating_checks", lambda c, f: [x for x in real(c, f) if x.quantity != "reverse voltage"])
    res = CliRunner().invoke(main, ["run", str(case_file)])
    assert res.exit_code == 2
    assert "missing check: DZ: diode 1: reverse voltage" in res.stderr


@pytest.mark.parametrize("command", ["report", "compare"])
def test_report_and_compare_exit_2_without_a_verdict(monkeypatch, case_file, tmp_path, command):
    _corrupt_figures(monkeypatch, avalanche_energy_J=-0.05)
    args = [command, str(case_file)] + (["-o", str(tmp_path / "r.html")] if command == "report" else [])
    res = CliRunner().invoke(main, args)
    assert res.exit_code == 2 and "failed its audit" in res.stderr
    assert not (tmp_path / "r.html").exists()


# --- the studies: solved again on the other engine, or unsolved -----------------------------------

VOLTS = [20.0, 24.0, 28.0]


def _corrupt_batch(monkeypatch, row):
    import kickback.figures_batch as fb

    real = fb.columns

    def columns(bc, st):
        out = real(bc, st)
        if bc.n > row and abs(bc.Vs[row] - VOLTS[row]) < 1e-12:
            out["switch.avalanche_energy_J"] = out["switch.avalanche_energy_J"].copy()
            out["switch.avalanche_energy_J"][row] = -0.3
        return out

    monkeypatch.setattr(fb, "columns", columns)


def test_batch_audit_failure_is_solved_on_the_detailed_engine(monkeypatch, case):
    from kickback.studies.points import evaluate

    _corrupt_batch(monkeypatch, 1)
    pts = evaluate(case, {"supply.voltage": VOLTS}, engine="batch")
    assert (pts.audit_failed, pts.audit_solved, pts.audit_engine) == (1, 1, "detailed")
    assert "solved again on the detailed engine" in pts.note
    assert all(e is None for e in pts.errors)
    ref = simulate(replace(case, supply=replace(case.supply, voltage=24.0)))
    assert pts.figures["avalanche_energy_J"][1] == ref.figures.avalanche_energy_J
    assert pts.passed[1] == ref.passed


def test_a_sweep_says_which_engine_ran_each_point(monkeypatch, case):
    """Issue 20: a point solved again on the detailed engine is counted and marked as such: the
    JSON says the --engine given ("batch"), the points per engine and each point's engine; the
    CSV's engine column and the table's words agree (never "mixed")."""
    from kickback.outputs.sweeps import engine_words, sweep_csv, sweep_table
    from kickback.studies.sweep import Axis, run_sweep

    _corrupt_batch(monkeypatch, 1)
    sw = run_sweep(case, (Axis("supply.voltage", np.array(VOLTS), "V"),), engine="batch")
    d = sw.to_dict()
    assert d["engine"] == "batch" and d["engines"] == {"batch": 2, "detailed": 1}
    assert [p["engine"] for p in d["points"]] == ["batch", "detailed", "batch"]
    assert "solved again on the detailed engine" in d["engine_note"]
    rows = list(csv.reader(sweep_csv(sw).splitlines()[1:]))
    assert [r[rows[0].index("engine")] for r in rows[1:]] == ["batch", "detailed", "batch"]
    assert engine_words(sw) == "batch engine, 1 of 3 points on the detailed engine"
    assert "mixed" not in sweep_table(sw) + sweep_csv(sw)


def test_simulate_many_gives_no_verdict_to_an_audit_failed_variant(monkeypatch, case):
    from kickback.studies.many import simulate_many

    _corrupt_batch(monkeypatch, 1)
    many = simulate_many(case, {"supply.voltage": VOLTS}, workers=1)
    assert list(many.status) == ["ok", "audit failed", "ok"]
    assert not many.passed[1] and "negative dissipation: switch avalanche" in many.message[1]


def test_unsolved_on_both_engines_gets_no_verdict(monkeypatch, case):
    from kickback.studies.sweep import Axis, run_sweep

    _corrupt_batch(monkeypatch, 1)
    import kickback.simulation as sim

    real = sim.compute_figures
    monkeypatch.setattr(sim, "compute_figures",
                        lambda w: replace(real(w), energy_balance_error=0.5) if abs(w.circuit.Vs - 24.0) < 1e-12
                        else real(w))
    sw = run_sweep(case, (Axis("supply.voltage", np.array(VOLTS), "V"),), engine="batch")
    d = sw.to_dict()
    row = d["points"][1]
    assert row["pass"] is None and row["error"].startswith("no verdict: the result failed its audit")
    assert "batch engine" in row["error"] and "detailed engine" in row["error"]
    assert row["peak_voltage_V"] is None
    assert "1 unsolved" in d["engine_note"]
    assert d["points"][0]["pass"] is not None and d["points"][2]["pass"] is not None


def test_detailed_audit_failure_is_solved_on_the_batch_engine(monkeypatch, case):
    import kickback.simulation as sim
    from kickback.studies.points import evaluate

    real = sim.compute_figures
    monkeypatch.setattr(sim, "compute_figures",
                        lambda w: replace(real(w), avalanche_energy_J=-1.0) if abs(w.circuit.Vs - 28.0) < 1e-12
                        else real(w))
    pts = evaluate(case, {"supply.voltage": VOLTS}, engine="detailed")
    assert (pts.audit_failed, pts.audit_solved, pts.audit_engine) == (1, 1, "batch")
    assert "solved again on the batch engine" in pts.note
    assert pts.errors[2] is None and pts.figures["avalanche_energy_J"][2] >= 0.0
