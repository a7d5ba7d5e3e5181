"""Clamp comparison: built-in sizing, physics ordering, [[option]] sets, CLI output and exit codes."""

from __future__ import annotations

import json
from pathlib import Path

from click.testing import CliRunner

from kickback import load_case
from kickback.cli import main
from kickback.studies.compare import compare
from kickback.studies.designs import DIODE_DROP, allowed_voltage, builtin_options, on_current
from kickback.studies.eseries import E12, E24

CASES = Path(__file__).resolve().parent.parent / "cases"
VALVE = CASES / "irrigation_valve.toml"


def _mantissa(x: float) -> float:
    from math import floor, log10

    return round(x / 10 ** floor(log10(x)), 6)


def test_builtin_options_are_sized_to_the_derated_switch():
    case = load_case(VALVE)
    v_allow, vs, i0 = allowed_voltage(case), case.supply.voltage, on_current(case)
    assert v_allow == 0.8 * 60.0
    z = next(o for o in builtin_options(case) if "Zener" in o.name).clamps[0].elements[1]
    assert _mantissa(z.voltage) in E24 and z.voltage <= v_allow - vs - DIODE_DROP
    r = next(o for o in builtin_options(case) if o.name.startswith("diode +") and "Ω" in o.name)
    res = r.clamps[0].elements[1].resistance
    assert _mantissa(res) in E12 and res * i0 <= v_allow - vs - DIODE_DROP
    rc = next(o for o in builtin_options(case) if o.name.startswith("RC")).clamps[0]
    c = rc.elements[1].capacitance
    # energy rule for the snubber capacitor (Mohan, Undeland & Robbins, ch. 27): ½·L·i0² ≤ ½·C·ΔV²
    assert c >= case.coil.inductance * i0 ** 2 / (v_allow - vs) ** 2
    assert _mantissa(c) in E12
    assert "no clamp" in {o.name for o in builtin_options(case)}


def test_ordering_of_families():
    # a plain diode holds the node nearest the supply and decays slowest; a Zener or TVS
    # clamp at a higher voltage decays faster (the coil sees a larger reverse voltage)
    cmp = compare(load_case(VALVE))
    rows = {r.name: r.result.figures for r in cmp.rows if r.result is not None}
    diode = rows["plain diode"]
    zener = next(f for n, f in rows.items() if "Zener" in n)
    tvs = next(f for n, f in rows.items() if n.startswith("TVS"))
    assert diode.peak_voltage_V < zener.peak_voltage_V and diode.peak_voltage_V < tvs.peak_voltage_V
    assert diode.to_zero_s > 2 * zener.to_zero_s and diode.to_zero_s > 2 * tvs.to_zero_s
    # sized to the derated rating, the Zener and TVS options pass the switch voltage check
    for name, row in ((n, r) for r in cmp.rows for n in [r.name] if "Zener" in n or n.startswith("TVS")):
        failing = row.failing
        assert not any("peak voltage" in f for f in failing), (name, failing)
    assert not next(r for r in cmp.rows if r.name == "no clamp").result.passed


OPTION_CASE = VALVE.read_text() + '''
[[option]]
name = "bare diode"
[[option.clamp]]
name = "D9"
across = "coil"
[[option.clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "0.8 V"
'''


def test_case_options_replace_builtin(tmp_path):
    p = tmp_path / "opt.toml"
    p.write_text(OPTION_CASE)
    cmp = compare(load_case(p))
    assert [r.name for r in cmp.rows] == ["case: D1+Z1", "bare diode"]
    assert not cmp.builtin
    # constant 0.8 V drop: the node sits exactly 0.8 V above the supply
    assert cmp.rows[1].result.figures.peak_voltage_V == 24.8


def test_cli_compare_json_files_and_exit(tmp_path):
    res = CliRunner().invoke(main, ["compare", str(VALVE), "--json", "--out", str(tmp_path)])
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    assert d["pass"] is True and d["builtin_options"] is True
    assert d["options"][0]["own"] is True
    assert {"peak_voltage_V", "clamp_energy_J", "to_zero_s", "release_s", "failing_checks"} <= set(d["options"][1])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["compare.json", "compare.png", "compare.svg"]
    failing = CliRunner().invoke(main, ["compare", str(CASES / "unclamped_mosfet.toml")])
    assert failing.exit_code == 1
    assert "FAIL" in failing.stdout and "avalanche" in failing.stdout
