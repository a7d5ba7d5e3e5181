"""Sweeps: key paths, the Zener trade-off, CLI table/CSV/files and exit codes, bad --vary."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from kickback import load_case
from kickback.cli import main
from kickback.errors import CaseError
from kickback.keypath import get_value, set_value
from kickback.studies.sweep import parse_vary, run_sweep

CASES = Path(__file__).resolve().parent.parent / "cases"
VALVE = CASES / "irrigation_valve.toml"


def test_key_paths_round_trip():
    case = load_case(VALVE)
    c2 = set_value(case, "clamp[0].element[1].voltage", 15.0)
    assert get_value(c2, "clamp[0].element[1].voltage") == 15.0
    assert get_value(case, "clamp[0].element[1].voltage") == 20.0, "the original case is unchanged"
    assert set_value(case, "supply.voltage", 12.0).supply.voltage == 12.0


@pytest.mark.parametrize("path, words", [("clamp[5].element[0].voltage", "out of range"),
                                         ("coil.colour", "not a numeric"), ("clamp.voltage", "is a list"),
                                         ("coil..inductance", "cannot read")],
                         ids=["index", "unknown-key", "missing-index", "syntax"])
def test_bad_key_paths(path, words):
    with pytest.raises(CaseError, match=words):
        set_value(load_case(VALVE), path, 1.0)


def test_parse_vary_units_and_spacing():
    ax = parse_vary("coil.inductance=10mH:1H:3", log=True)
    assert ax.values == pytest.approx([0.01, 0.1, 1.0])
    ax = parse_vary("clamp[0].element[1].voltage=12V:36V:13")
    assert ax.values[1] - ax.values[0] == pytest.approx(2.0)
    with pytest.raises(CaseError, match="wrong unit"):
        parse_vary("coil.inductance=10V:20V")


@pytest.mark.parametrize("engine", ["batch", "detailed"])
def test_zener_sweep_gives_monotone_trade_off(engine):
    # higher Zener voltage → higher peak on the switch and a shorter decay and release:
    # the coil sees a larger reverse voltage, di/dt = −(V_clamp + R·i)/L (first-order RL, any
    # circuits textbook)
    case = load_case(VALVE)
    sw = run_sweep(case, (parse_vary("clamp[0].element[1].voltage=8V:30V:12"),), engine=engine)
    assert sw.engine == engine
    peak = np.array(sw.figures["peak_voltage_V"])
    release = np.array(sw.figures["release_s"])
    decay = np.array(sw.figures["to_zero_s"])
    assert np.all(np.diff(peak) > 0) and np.all(np.diff(release) < 0) and np.all(np.diff(decay) < 0)
    # the peak rises one for one with the Zener voltage (the diode and Zener carry the same current;
    # derived). Not exactly: the current at the peak (end of the fall) is a few ppm lower for a
    # higher Zener, so the diode and dynamic-resistance drops are too.
    assert np.diff(peak) == pytest.approx(np.diff(sw.points[:, 0]), rel=1e-5)


def test_cli_sweep_files_and_exit(tmp_path):
    args = ["sweep", str(VALVE), "--vary", "clamp[0].element[1].voltage=10V:30V:5", "--workers", "1",
            "--out", str(tmp_path)]
    res = CliRunner().invoke(main, args)
    assert res.exit_code == 1, "the 25 V and 30 V points exceed the derated switch rating"
    assert "FAIL: switch peak voltage" in res.stdout and "pass" in res.stdout
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sweep.csv", "sweep.json", "sweep.png", "sweep.svg"]
    with open(tmp_path / "sweep.csv", newline="") as fh:
        rows = [r for r in csv.reader(fh) if not r[0].startswith("#")]  # the engine line comes first, once
    assert rows[0][0] == "clamp[0].element[1].voltage [V]" and len(rows) == 6
    assert [r[-2] for r in rows[1:]] == ["true", "true", "true", "false", "false"]
    d = json.loads((tmp_path / "sweep.json").read_text())
    assert len(d["points"]) == 5 and d["axes"][0]["unit"] == "V"
    ok = CliRunner().invoke(main, ["sweep", str(VALVE), "--vary", "clamp[0].element[1].voltage=10V:20V:3",
                                   "--workers", "2", "--json"])
    assert ok.exit_code == 0 and json.loads(ok.stdout)["points"][0]["pass"] is True


@pytest.mark.parametrize("spec, words", [("coil.inductance=1V:2V", "wrong unit"), ("nonsense", "KEY=FROM:TO"),
                                         ("clamp[3].element[0].voltage=1V:2V", "out of range")],
                         ids=["unit", "syntax", "path"])
def test_cli_sweep_bad_vary_exit_2(spec, words):
    res = CliRunner().invoke(main, ["sweep", str(VALVE), "--vary", spec])
    assert res.exit_code == 2
    assert words in res.stderr and "Traceback" not in res.output


#: a diode + Zener clamp with piecewise-linear laws only (constant-drop diode, ideal Zener with a
#: dynamic resistance), no node capacitance (invented demo values)
LINEAR = """title = "piecewise-linear clamp (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "80 mH"
resistance = "30 Ω"
release_current = "0.1 A"
release_delay = "2 ms"
[switch]
type = "mosfet"
on_resistance = "0.1 Ω"
fall_time = "500 ns"
rated_voltage = "60 V"
[[clamp]]
across = "coil"
[[clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "0.7 V"
[[clamp.element]]
type = "zener"
voltage = "20 V"
dynamic_resistance = "1.5 Ω"
"""
SWEPT = ("peak_voltage_V", "clamp_energy_J", "to_10_percent_s", "to_zero_s", "release_s")


def test_batch_sweep_agrees_with_the_detailed_engine_on_piecewise_linear_laws():
    """Every law piecewise linear: the batch engine's solution is exact, so on a few points it
    agrees with the detailed engine run tightly (rtol 1e-9) to 1e-6 relative — the agreement
    tests/test_batch.py asks of the two engines on such laws."""
    from kickback import simulate

    case = load_case(LINEAR)
    ax = parse_vary("clamp[0].element[1].voltage=6V:40V:1000")
    sw = run_sweep(case, (ax,))
    assert sw.engine == "batch" and sw.fits == () and len(sw.points) == 1000
    for k in (0, 333, 999):
        ref = simulate(set_value(case, ax.path, ax.values[k]), rtol=1e-9).figures
        want = {"peak_voltage_V": ref.peak_voltage_V, "clamp_energy_J": sum(c.energy_J for c in ref.clamps),
                "to_10_percent_s": ref.to_10_percent_s, "to_zero_s": ref.to_zero_s, "release_s": ref.release_s}
        for col in SWEPT:
            assert sw.figures[col][k] == pytest.approx(want[col], rel=1e-6), (col, k)


def test_batch_sweep_of_a_shockley_diode_within_the_fits_stated_effect():
    """The valve's Shockley diode enters the batch engine as a stated piecewise-linear fit whose
    effect on every figure is bounded by 2 % (tests/test_batch.py::test_fitted_nonlinear_demo_cases_within_two_percent):
    the batch sweep and the detailed sweep agree to that on a few points, and the fit is stated."""
    case = load_case(VALVE)
    axes = (parse_vary("clamp[0].element[1].voltage=10V:30V:3"), parse_vary("coil.inductance=60mH:240mH:2"))
    b = run_sweep(case, axes, engine="batch")
    d = run_sweep(case, axes, engine="detailed", workers=2)
    assert b.engine == "batch" and d.engine == "detailed" and b.fits and not d.fits
    assert any("Shockley" in f and "fit" in f for f in b.fits)
    for col in SWEPT:
        for x, y in zip(b.figures[col], d.figures[col], strict=True):
            assert (x is None) == (y is None), col
            if y is not None:
                assert x == pytest.approx(y, rel=0.02), col
    assert list(b.passed) == list(d.passed) and b.failing == d.failing


def test_cli_sweep_names_the_engine_and_its_fits(tmp_path):
    res = CliRunner().invoke(main, ["sweep", str(VALVE), "--vary", "clamp[0].element[1].voltage=10V:20V:3",
                                    "--out", str(tmp_path)])
    assert res.exit_code == 0, res.output
    assert "batch engine, 3 points" in res.stdout and "fit: D1+Z1: Shockley diode" in res.stdout
    d = json.loads((tmp_path / "sweep.json").read_text())
    # the --engine given (issue 20: auto, batch or detailed, never "mixed") and what ran each point
    assert d["engine"] == "auto" and d["engines"] == {"batch": 3} and d["fits"] and d["engine_note"] is None
    assert [p["engine"] for p in d["points"]] == ["batch"] * 3
    text = (tmp_path / "sweep.csv").read_text()
    assert text.count("Shockley") == 1 and text.startswith("# --engine auto: batch engine; fits: D1+Z1: Shockley diode")
    rows = list(csv.reader(text.splitlines()[1:]))
    head = rows[0]
    assert rows[1][head.index("engine")] == "batch" and "fits" not in head
    detailed = CliRunner().invoke(main, ["sweep", str(VALVE), "--vary", "clamp[0].element[1].voltage=10V:20V:3",
                                         "--engine", "detailed", "--workers", "1", "--json"])
    assert detailed.exit_code == 0
    assert {k: json.loads(detailed.stdout)[k] for k in ("engine", "engines")} == {"engine": "detailed",
                                                                                  "engines": {"detailed": 3}}


def test_cli_sweep_falls_back_to_the_detailed_engine_and_says_why():
    # the conveyor brake's TVS has a thermal network, which the batch engine does not model
    brake = CASES / "conveyor_brake.toml"
    res = CliRunner().invoke(main, ["sweep", str(brake), "--vary", "clamp[0].element[0].voltage=50V:60V:2",
                                    "--workers", "1"])
    assert res.exit_code in (0, 1), res.output
    assert "detailed engine, 2 points" in res.stdout and "does not cover" in res.stdout
    assert "thermal network" in res.stdout
    forced = CliRunner().invoke(main, ["sweep", str(brake), "--vary", "clamp[0].element[0].voltage=50V:60V:2",
                                       "--engine", "batch"])
    assert forced.exit_code == 2 and "batch engine" in forced.stderr and "Traceback" not in forced.output
    assert len(forced.stderr.strip().splitlines()) == 1


def test_sweep_plot_marks_each_failure_on_the_curve_of_its_check():
    """The failure markers sit on the curve of the figure whose check fails: the peak-voltage panel
    marks exactly the points above rated_voltage × derating (DESIGN §5), the release curve exactly
    the points above max_release_time — found here from the figures and the rule, not from the
    sweep's verdicts."""
    import dataclasses

    from kickback.outputs.sweeps import sweep_figure

    case = load_case(VALVE)
    case = dataclasses.replace(case, checks=dataclasses.replace(case.checks, max_release_time=7e-3))
    sw = run_sweep(case, (parse_vary("clamp[0].element[1].voltage=2V:30V:8"),), engine="detailed")
    x = sw.points[:, 0]
    peak = np.array(sw.figures["peak_voltage_V"])
    release = np.array(sw.figures["release_s"], float)
    v_fail = x[peak > case.switch.rated_voltage * case.checks.derating]
    r_fail = x[release > 7e-3]
    assert v_fail.size and r_fail.size and not set(v_fail) & set(r_fail), "both kinds of failure, apart"
    fig = sweep_figure(sw)
    a1, a2, a3 = fig.axes[:3]

    def marked(ax, gid):
        lines = [ln for ln in ax.get_lines() if ln.get_gid() == gid]
        return np.sort(np.concatenate([ln.get_xdata() for ln in lines])) if lines else np.array([])

    np.testing.assert_array_equal(marked(a1, "fail:peak_voltage_V"), np.sort(v_fail))
    np.testing.assert_array_equal(marked(a2, "fail:release_s"), np.sort(r_fail))
    # and the markers sit on the curve's own values
    ln = next(ln for ln in a2.get_lines() if ln.get_gid() == "fail:release_s")
    np.testing.assert_allclose(ln.get_ydata(), release[np.isin(x, r_fail)])
    for ax in (a1, a2, a3):
        assert not marked(ax, "fail:clamp_energy_J").size and not marked(ax, "fail:to_zero_s").size
    assert not marked(a2, "fail:peak_voltage_V").size and not marked(a1, "fail:release_s").size
