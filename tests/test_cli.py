"""The command line: table, JSON contract, files, exit codes, bad input, lazy imports."""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from kickback.cli import main

CASES = Path(__file__).resolve().parent.parent / "cases"

# DESIGN.md §6, plus "audit" (issue 14: what the result was checked for before its verdict)
CONTRACT_TOP = {"version", "title", "coil", "switch", "supply", "clamps", "left_in_capacitors_J",
                "energy_balance_error", "checks", "pass"}
#: keys added to DESIGN §6 (issue 20): the models list, element names, check units
ADDED_TOP = {"models", "audit"}


def run(*args):
    return CliRunner().invoke(main, list(map(str, args)), catch_exceptions=False)


def test_run_table_has_figures_verdict_and_cautions():
    res = run("run", CASES / "irrigation_valve.toml")
    assert res.exit_code == 0, res.output
    out = res.stdout
    for word in ("peak", "to zero", "release", "energy ledger", "checks", "verdict: PASS", "Cautions"):
        assert word in out, f"table lacks {word!r}"
    assert " V " in out or " V\n" in out  # engineering units shown


def test_run_json_is_exactly_the_contract():
    res = run("run", CASES / "irrigation_valve.toml", "--json")
    assert res.exit_code == 0
    d = json.loads(res.stdout)
    assert set(d) == CONTRACT_TOP | ADDED_TOP
    assert set(d["coil"]) == {"initial_current_A", "stored_energy_J", "resistance_energy_J", "decay_s",
                              "release_s"}
    assert set(d["coil"]["decay_s"]) == {"to_10_percent", "to_1_percent", "to_zero"}
    assert set(d["switch"]) == {"peak_voltage_V", "peak_time_s", "crossover_energy_J", "avalanche_energy_J"}
    assert set(d["supply"]) == {"energy_J"}
    (clamp,) = d["clamps"]
    assert set(clamp) == {"name", "across", "energy_J", "peak_current_A", "conduction_s", "elements"}
    for el in clamp["elements"]:
        assert set(el) == {"type", "name", "energy_J", "peak_voltage_V", "peak_current_A", "standoff_voltage_V"}
    assert [el["name"] for el in clamp["elements"]] == ["D1", "Z1"]  # as the case file names them
    for ck in d["checks"]:
        assert set(ck) == {"part", "quantity", "value", "limit", "margin", "pass", "unit"}
    units = {(ck["part"], ck["quantity"]): ck["unit"] for ck in d["checks"]}
    assert units[("switch", "peak voltage")] == "V" and units[("case", "release time")] == "s"
    assert units[("D1+Z1: Z1", "pulse energy")] == "J"
    assert any("Zener" in m for m in d["models"]) and any("engine" in m for m in d["models"])
    assert d["pass"] is True
    # the stored energy follows from the reported current: ½·L·i0² with L = 120 mH (case file)
    i0 = d["coil"]["initial_current_A"]
    assert d["coil"]["stored_energy_J"] == pytest.approx(0.5 * 0.12 * i0 * i0, rel=1e-12)


@pytest.mark.parametrize("name, code", [("irrigation_valve", 0), ("unclamped_mosfet", 1)],
                         ids=["passing-case-exit-0", "failing-case-exit-1"])
def test_exit_status_follows_checks(name, code):
    res = run("run", CASES / f"{name}.toml", "--json")
    assert res.exit_code == code
    assert json.loads(res.stdout)["pass"] is (code == 0)


def test_avalanche_without_margin_fails_with_named_check():
    d = json.loads(run("run", CASES / "unclamped_mosfet.toml", "--json").stdout)
    failing = {(c["part"], c["quantity"]) for c in d["checks"] if not c["pass"]}
    assert ("switch", "avalanche energy") in failing


def test_out_dir_files(tmp_path):
    out = tmp_path / "o"
    res = run("run", CASES / "relay_board.toml", "--out", out)
    assert res.exit_code == 0
    names = sorted(p.name for p in out.iterdir())
    assert names == ["result.json", "waveforms.csv", "waveforms.png", "waveforms.svg"]
    assert json.loads((out / "result.json").read_text())["title"].startswith("Vending-machine relay")
    with open(out / "waveforms.csv", newline="") as fh:
        rows = list(csv.reader(fh))
    header = rows[0]
    assert header[:4] == ["time [s]", "coil current [A]", "switch node [V]", "switch current [A]"]
    assert "D1/D1 current [A]" in header and "D1/D1 voltage [V]" in header
    t = [float(r[0]) for r in rows[1:]]
    assert t == sorted(t) and t[0] == 0.0 and len(t) > 50
    assert (out / "waveforms.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert b"<svg" in (out / "waveforms.svg").read_bytes()[:400]
    assert not [p for p in out.iterdir() if p.name.startswith(".")], "temporary files left behind"


def test_no_plot_skips_pictures(tmp_path):
    res = run("run", CASES / "relay_board.toml", "--out", tmp_path, "--no-plot")
    assert res.exit_code == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["result.json", "waveforms.csv"]


def test_svg_is_deterministic(tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    run("run", CASES / "relay_board.toml", "--out", a)
    run("run", CASES / "relay_board.toml", "--out", b)
    assert (a / "waveforms.svg").read_bytes() == (b / "waveforms.svg").read_bytes()


BAD = [
    ("unknown-key", '[coil]\ninductance = "1 H"\nresistance = "1 Ω"\ncolour = 3\n', "coil.colour", 4),
    ("wrong-unit", '[coil]\ninductance = "1 mA"\nresistance = "1 Ω"\n', "coil.inductance", 2),
    ("negative-L", '[coil]\ninductance = "-1 H"\nresistance = "1 Ω"\n', "coil.inductance", 2),
    ("toml-syntax", '[coil\ninductance = "1 H"\n', "TOML syntax", 1),
]
HEAD = 'title = "bad (demo data)"\n[supply]\nvoltage = "12 V"\n[switch]\ntype = "ideal"\n'


@pytest.mark.parametrize("text, key, line", [(t, k, n) for _, t, k, n in BAD], ids=[b[0] for b in BAD])
def test_bad_input_one_line_exit_2(tmp_path, text, key, line):
    p = tmp_path / "bad.toml"
    p.write_text(HEAD + text)
    res = CliRunner().invoke(main, ["run", str(p), "--out", str(tmp_path / "o")])
    assert res.exit_code == 2
    msg = res.stderr.strip()
    assert len(msg.splitlines()) == 1, msg
    assert msg.startswith(f"{p}:{line + HEAD.count(chr(10))}:"), msg
    assert key in msg
    assert "Traceback" not in res.output
    assert not (tmp_path / "o").exists(), "nothing may be written on bad input"


def test_missing_file_exit_2(tmp_path):
    res = CliRunner().invoke(main, ["run", str(tmp_path / "nope.toml")])
    assert res.exit_code == 2
    assert "not found" in res.stderr


def test_unbounded_node_is_reported_not_nan(tmp_path):
    # no clamp, no breakdown, no capacitance: nothing can take the coil current
    p = tmp_path / "open.toml"
    p.write_text('title = "open (demo data)"\n[supply]\nvoltage = "12 V"\n[coil]\ninductance = "10 mH"\n'
                 'resistance = "10 Ω"\n[switch]\ntype = "ideal"\n')
    res = CliRunner().invoke(main, ["run", str(p)])
    assert res.exit_code == 2
    assert "no conducting path" in res.stderr


@pytest.mark.parametrize("kind", ["relay", "valve", "motor"])
def test_new_prints_a_loadable_case(kind, tmp_path):
    from kickback import load_case

    res = run("new", kind)
    assert res.exit_code == 0
    assert "(demo data)" in res.stdout
    p = tmp_path / f"{kind}.toml"
    p.write_text(res.stdout)
    assert load_case(p).title


def test_version():
    from kickback import __version__

    assert run("--version").stdout.strip().endswith(__version__)


def test_help_imports_no_numerics():
    # --help must answer at once: the CLI module may not import numpy, scipy or matplotlib
    code = ("import sys; import kickback.cli; "
            "bad = [m for m in ('numpy', 'scipy', 'matplotlib') if m in sys.modules]; print(bad)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip() == "[]"


def test_package_simulate_stays_a_function():
    # a submodule named like the public function would replace it on the package once imported
    import kickback
    import kickback.simulation  # noqa: F401

    assert callable(kickback.simulate) and kickback.simulate.__module__ == "kickback"
