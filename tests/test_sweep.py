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


def test_zener_sweep_gives_monotone_trade_off():
    # higher Zener voltage → higher peak on the switch and a shorter decay and release:
    # the coil sees a larger reverse voltage, di/dt = −(V_clamp + R·i)/L (first-order RL, any
    # circuits textbook)
    case = load_case(VALVE)
    sw = run_sweep(case, (parse_vary("clamp[0].element[1].voltage=8V:30V:12"),))
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
        rows = list(csv.reader(fh))
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
