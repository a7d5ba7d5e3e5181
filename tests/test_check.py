"""``kickback check PATH…``: finding cases, the verdicts and exit statuses, JSON lines, the JUnit
XML report and the per-case tolerance yield.

Figures are held to a closed form: with an ideal switch and a clamp across the coil of a
constant-drop diode (V_F) in series with a Zener (V_Z), the switch node sits at
V_supply + V_Z + V_F while the clamp conducts (the flyback clamp of any power-electronics
textbook, e.g. Mohan, Undeland, Robbins, "Power Electronics", ch. on snubbers/clamps)."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from coil_cases import PEAK, V_F, V_SUPPLY, ZENER_1V, diode_zener_case, tolerance

from kickback.cli import main

TOL = tolerance("coil.inductance", band="10 %") + ZENER_1V


def case_text(name, limit: float) -> str:
    """The shared diode + Zener case (coil_cases) named ``name``, limited to ``limit`` volts."""
    return diode_zener_case(f"check test {name}", limit)


def _board(tmp_path: Path, *, bad: bool = False) -> Path:
    d = tmp_path / "board"
    (d / "sub").mkdir(parents=True)
    (d / "ok.toml").write_text(case_text("ok", 47) + TOL, encoding="utf-8")
    (d / "sub" / "tight.toml").write_text(case_text("tight", 44), encoding="utf-8")
    (d / "pyproject.toml").write_text('[project]\nname = "not-a-case"\n', encoding="utf-8")
    if bad:
        (d / "broken.toml").write_text(case_text("broken", 47).replace('"30 Ω"', '"30 V"'),
                                       encoding="utf-8")
    return d


def _run(args):
    return CliRunner().invoke(main, ["check", *args])


def test_folder_table_and_exit_status(tmp_path):
    d = _board(tmp_path)
    res = _run([str(d), "--workers", "2"])
    assert res.exit_code == 1, res.output  # one check fails
    out = res.stdout
    assert "ok.toml" in out and "tight.toml" in out and "pyproject.toml" not in out.split("Skipped")[0]
    assert "not a case (no [coil] table)" in out.split("Skipped:")[1]
    assert "44.7 V" in out  # the closed-form peak in the table
    failing = out.split("Failing checks:")[1]
    assert "tight.toml" in failing and "ok.toml" not in failing
    # margin (limit − value)/limit = (44 − 44.7)/44 = −1.6 %
    assert f"{100 * (44 - PEAK) / 44:+.1f} %" in failing
    # the passing case alone: exit 0
    assert _run([str(d / "ok.toml")]).exit_code == 0


def test_invalid_case_is_named_and_exits_2(tmp_path):
    d = _board(tmp_path, bad=True)
    res = _run([str(d)])
    assert res.exit_code == 2
    assert "broken.toml" in res.stderr and "coil.resistance" in res.stderr
    assert "INVALID" in res.stdout


def test_missing_path_exits_2(tmp_path):
    res = _run([str(tmp_path / "nowhere")])
    assert res.exit_code == 2 and "no such file" in res.stderr and "Traceback" not in res.output


def test_json_lines(tmp_path):
    d = _board(tmp_path)
    res = _run([str(d / "ok.toml"), str(d / "sub" / "*.toml"), "--json"])
    rows = [json.loads(line) for line in res.stdout.splitlines()]
    assert [Path(r["case"]).name for r in rows] == ["ok.toml", "tight.toml"]
    assert [r["pass"] for r in rows] == [True, False]
    for r in rows:
        assert r["peak_voltage_V"] == pytest.approx(PEAK, rel=1e-6)
    low = rows[1]["smallest_margin"]
    assert low["margin"] == pytest.approx((44 - PEAK) / 44, rel=1e-6) and "peak" in low["check"]


def test_junit_report(tmp_path):
    d = _board(tmp_path, bad=True)
    report = tmp_path / "out" / "report.xml"
    res = _run([str(d), "--junit", str(report)])
    assert res.exit_code == 2
    root = ET.parse(report).getroot()
    # JUnit XML element and attribute names (from memory of the common format)
    assert root.tag == "testsuites"
    suites = root.findall("testsuite")
    assert {Path(s.get("name")).name for s in suites} == {"ok.toml", "tight.toml", "broken.toml"}
    total = {"tests": 0, "failures": 0, "errors": 0}
    for s in suites:
        cases = s.findall("testcase")
        assert int(s.get("tests")) == len(cases)
        assert int(s.get("failures")) == sum(len(c.findall("failure")) for c in cases)
        assert int(s.get("errors")) == sum(len(c.findall("error")) for c in cases)
        float(s.get("time"))
        for c in cases:
            assert c.get("classname") == s.get("name") and c.get("name") and float(c.get("time")) >= 0
        for k in total:
            total[k] += int(s.get(k))
    assert {k: int(root.get(k)) for k in total} == total
    assert total["failures"] == 1 and total["errors"] == 1
    failure = root.find(".//failure")
    assert "value 44.7 V" in failure.get("message") and "limit 44 V" in failure.get("message")
    assert "margin -1.59 %" in failure.get("message")
    error = root.find(".//error")
    assert error.get("type") == "invalid" and "coil.resistance" in error.get("message")


def test_tolerance_yield_per_case(tmp_path):
    d = _board(tmp_path)
    res = _run([str(d), "--tolerance", "200", "--json"])
    rows = {Path(r["case"]).name: r for r in map(json.loads, res.stdout.splitlines())}
    tol = rows["ok.toml"]["tolerance"]
    assert tol["samples"] == 200
    # peak = 24 + V_Z + 0.7 with V_Z uniform in 19..21 V: every sample is below 47 V
    assert tol["yield"] == 1.0
    # Clopper–Pearson with k = n = 200: lower end (α/2)^(1/n) (Clopper and Pearson 1934)
    assert tol["yield_ci95"][0] == pytest.approx(0.025 ** (1 / 200), rel=1e-9) and tol["yield_ci95"][1] == 1.0
    assert "no [tolerance] section" in rows["tight.toml"]["tolerance"]["none"]
    table = _run([str(d), "--tolerance", "50"]).stdout
    assert "no [tolerance]" in table and "100.0 %" in table


def test_tolerance_yield_below_one_with_its_interval(tmp_path):
    """A limit inside the Zener band: the yield is the fraction of samples whose closed-form peak
    24 + V_Z + 0.7 V stays within it, with the exact binomial (Clopper–Pearson) interval."""
    from scipy.stats import binomtest

    from kickback import load_case
    from kickback.studies.tolerance import draw

    p = tmp_path / "edge.toml"
    p.write_text(case_text("edge", 45.5) + TOL, encoding="utf-8")
    n, seed = 300, 5
    res = _run([str(p), "--tolerance", str(n), "--seed", str(seed), "--json", "--workers", "1"])
    assert res.exit_code == 0, res.output  # the nominal design passes: 44.7 V ≤ 45.5 V
    tol = json.loads(res.stdout)["tolerance"]
    # the samples the study draws (its own seeded inputs); which of them pass comes from the closed form
    v_z = draw(load_case(p.read_text(encoding="utf-8")), n, seed)[:, 1]
    k = int(np.sum(V_SUPPLY + v_z + V_F <= 45.5))
    assert 0 < k < n and tol["samples"] == n and tol["failed_samples"] == n - k
    assert tol["yield"] == pytest.approx(k / n, rel=1e-12)
    # scipy's exact binomial interval (Clopper and Pearson 1934)
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    assert tol["yield_ci95"] == pytest.approx([ci.low, ci.high], rel=1e-9)
    table = _run([str(p), "--tolerance", str(n), "--seed", str(seed), "--workers", "1"]).stdout
    assert f"{100 * k / n:.1f} % ({100 * ci.low:.1f}–{100 * ci.high:.1f} %)" in table


def test_unsolved_case_is_named_and_exits_2(tmp_path, monkeypatch):
    # a solver that cannot finish is forced in this process (--workers 1): check names the case,
    # says why, gives no verdict and exits 2 (the other case still passes)
    import kickback.simulation as simulation
    from kickback.errors import SolverError

    d = _board(tmp_path)
    real = simulation.simulate

    def fails_on_tight(case, *args, **kwargs):
        if "tight" in case.title:
            raise SolverError("step size fell below the spacing of doubles (forced)")
        return real(case, *args, **kwargs)

    monkeypatch.setattr(simulation, "simulate", fails_on_tight)
    res = _run([str(d), "--workers", "1", "--json"])
    assert res.exit_code == 2, res.output
    rows = {Path(r["case"]).name: r for r in map(json.loads, res.stdout.splitlines())}
    assert rows["tight.toml"]["status"] == "unsolved" and rows["tight.toml"]["pass"] is None
    assert "forced" in rows["tight.toml"]["message"] and rows["ok.toml"]["pass"] is True
    lines = res.stderr.strip().splitlines()
    assert any("tight.toml" in line and "forced" in line for line in lines) and "Traceback" not in res.output


def test_progress_on_stderr(tmp_path):
    d = tmp_path / "many"
    d.mkdir()
    for k in range(10):
        (d / f"c{k}.toml").write_text(case_text(k, 47), encoding="utf-8")
    res = _run([str(d)])
    assert res.exit_code == 0
    assert "cases: 10 of 10" in res.stderr and "cases:" not in res.stdout


def test_demo_board_folder(tmp_path):
    """examples/board (demo data): every channel checked, board.toml skipped, a JUnit report."""
    board = Path(__file__).resolve().parent.parent / "examples" / "board"
    report = tmp_path / "report.xml"
    res = _run([str(board), "--junit", str(report), "--json"])
    assert res.exit_code == 0, res.output
    rows = {Path(r["case"]).name: r for r in map(json.loads, res.stdout.splitlines())}
    assert sorted(rows) == ["ch1_irrigation_valve.toml", "ch2_vent_relay.toml", "ch3_roof_vent_motor.toml",
                            "ch4_shade_brake.toml"]
    assert "board.toml: skipped" in res.stderr
    # ch4: a TVS from drain to ground holds the drain at V_BR + I0·R_d, I0 = V/(R_coil + R_on)
    # (Ohm's law for the on-state current; the TVS as a breakdown voltage with a dynamic resistance)
    i0 = 24.0 / (16.0 + 0.030)
    assert rows["ch4_shade_brake.toml"]["peak_voltage_V"] == pytest.approx(56.0 + i0 * 0.6, rel=1e-3)
    root = ET.parse(report).getroot()
    assert root.tag == "testsuites" and len(root.findall("testsuite")) == 4
    assert root.get("failures") == "0" and root.get("errors") == "0"
    assert int(root.get("tests")) == sum(len(r["checks"]) for r in rows.values())


def test_a_result_failing_its_audit_gets_no_verdict(tmp_path, monkeypatch):
    # the audit itself is tested in tests/test_audit.py; here a failing audit is forced in this
    # process (--workers 1) to see that check names the case, gives no verdict and exits 2
    import kickback.audit as audit

    monkeypatch.setattr(audit, "audit_result", lambda result: audit.Audit(("energy ledger residual (forced)",)))
    d = _board(tmp_path)
    report = tmp_path / "r.xml"
    res = _run([str(d / "ok.toml"), "--workers", "1", "--junit", str(report)])
    assert res.exit_code == 2
    assert "NO VERDICT" in res.stdout and "PASS" not in res.stdout
    assert "ok.toml" in res.stderr and "failed its audit" in res.stderr
    error = ET.parse(report).getroot().find(".//error")
    assert error is not None and error.get("type") == "audit"


def _mosfet_case(d: Path, name: str, breakdown: float) -> Path:
    """The closed-form case on a MOSFET with a breakdown voltage and no avalanche rating: the
    switch's avalanche-energy row exists by rule and has no margin."""
    text = diode_zener_case(f"check test {name}", 47, switch=(
        f'type = "mosfet"\non_resistance = "0.1 Ω"\nbreakdown_voltage = "{breakdown:g} V"'))
    path = d / f"{name}.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_smallest_margin_skips_rows_without_a_margin(tmp_path):
    """Issue 20: a passing row without a margin (avalanche energy 0 J, no rating) is not the
    "smallest margin"; the check that has the smallest margin is. The clamp holds the switch at
    V_supply + V_Z + V_F = 44.7 V (closed form, see the module docstring; the 0.1 Ω on-resistance
    only sets the on-state current), below the 60 V breakdown, so the margin is (47 − 44.7)/47."""
    path = _mosfet_case(tmp_path, "avalanche_row", 60.0)
    res = _run([str(path), "--json"])
    row = json.loads(res.stdout)
    assert any(c["quantity"] == "avalanche energy" and c["margin"] is None for c in row["checks"])
    low = row["smallest_margin"]
    assert low["check"] == "case peak switch voltage"
    assert low["margin"] == pytest.approx((47 - PEAK) / 47, rel=1e-6)
    table = _run([str(path)]).stdout
    line = next(x for x in table.splitlines() if "avalanche_row.toml" in x)
    assert "+4.9 %" in line and "case peak switch voltage" in line and "—" not in line.split("PASS")[1][:20]


def test_smallest_margin_names_a_failing_row_without_a_margin(tmp_path):
    """A failing row without a margin (the switch avalanches at 40 V < 44.7 V and has no avalanche
    rating) is what the summary names, as "fails" — not a passing margin elsewhere."""
    path = _mosfet_case(tmp_path, "avalanches", 40.0)
    res = _run([str(path), "--json"])
    row = json.loads(res.stdout)
    assert row["pass"] is False
    assert row["smallest_margin"] == {"check": "switch avalanche energy", "margin": None}
    line = next(x for x in _run([str(path)]).stdout.splitlines() if "avalanches.toml" in x)
    assert "fails" in line and "switch avalanche energy" in line


def test_smallest_margin_dash_only_when_no_check_has_one():
    """"—" (None) only when no check has a margin."""
    from kickback.studies.check import CaseCheck

    row = {"part": "switch", "quantity": "avalanche energy", "value": 0.0, "limit": None, "margin": None,
           "pass": True, "unit": "J", "note": ""}
    assert CaseCheck("x.toml", "pass", checks=(row,)).smallest() is None
    other = row | {"quantity": "peak voltage", "value": 30.0, "limit": 40.0, "margin": 0.25, "unit": "V"}
    assert CaseCheck("x.toml", "pass", checks=(row, other)).smallest() is other
