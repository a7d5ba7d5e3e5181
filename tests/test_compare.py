"""Clamp comparison: built-in sizing, physics ordering, [[option]] sets, CLI output and exit codes."""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import pytest
from click.testing import CliRunner

from kickback import load_case
from kickback.cli import main
from kickback.studies.compare import compare
from kickback.studies.designs import allowed_voltage, builtin_options, diode_drop, on_current
from kickback.studies.eseries import E12, E24

CASES = Path(__file__).resolve().parent.parent / "cases"
VALVE = CASES / "irrigation_valve.toml"


def _mantissa(x: float) -> float:
    from math import floor, log10

    return round(x / 10 ** floor(log10(x)), 6)


def test_builtin_options_are_sized_to_the_derated_switch():
    """Sized to keep checks.min_margin (5 %) under derating × rated voltage (0.8 × 60 V)."""
    case = load_case(VALVE)
    v_allow, vs, i0 = allowed_voltage(case), case.supply.voltage, on_current(case)
    assert v_allow == 0.8 * 60.0
    v_allow *= 1.0 - case.checks.min_margin
    z = next(o for o in builtin_options(case) if "Zener" in o.name).clamps[0].elements[1]
    assert _mantissa(z.voltage) in E24 and z.voltage <= v_allow - vs - diode_drop(i0)
    r = next(o for o in builtin_options(case) if o.name.startswith("diode +") and "Ω" in o.name)
    res = r.clamps[0].elements[1].resistance
    assert _mantissa(res) in E12 and res * i0 <= v_allow - vs - diode_drop(i0)
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


_HIGH_CURRENT = """title = "3 A coil, Zener sized at its own current (invented)"
[supply]
voltage = "24 V"
[coil]
inductance = "20 mH"
resistance = "8 Ω"
[switch]
type = "ideal"
rated_voltage = "55 V"
[checks]
derating = 0.89
"""


def _generic_diode_drop(i):
    """The generic diode (0.9 V at 1 A, n = 1.8, R_s = 50 mΩ) by the Shockley law written here:
    v = n·V_T·ln(1 + i/I_s) + R_s·i, I_s from the terminal point, V_T = kT/q at 25 °C (CODATA
    constants from scipy)."""
    import math

    from scipy.constants import Boltzmann, elementary_charge

    vt = Boltzmann * 298.15 / elementary_charge
    i_s = 1.0 / math.expm1((0.9 - 0.05 * 1.0) / (1.8 * vt))
    return 1.8 * vt * math.log1p(i / i_s) + 0.05 * i


def test_builtin_zener_sized_at_the_coils_current():
    """At 3 A the generic diode drops about 1.05 V, not its 0.9 V at 1 A: v_allow − V_s − V_d =
    0.89·55 − 24 − 1.05 ≈ 23.9 V, so the E24 Zener (IEC 60063) is 22 V (24 V would put the node at
    49.05 V, over the 48.95 V limit). With an ideal switch and Zener the node sits at
    V_s + V_d(i0) + V_Z (DESIGN §3), checked against the simulated peak. With checks.min_margin 0,
    the options are sized to the derated rating itself."""
    case = load_case(_HIGH_CURRENT, source="hc.toml")
    case = replace(case, checks=replace(case.checks, min_margin=0.0))
    i0, v_allow = 3.0, 0.89 * 55.0
    vd = _generic_diode_drop(i0)
    head = v_allow - 24.0 - vd
    e24 = [m * 10.0 ** k for k in range(-1, 3) for m in E24]
    want = max(v for v in e24 if v <= head + 1e-12)
    assert want == 22.0 and 24.0 <= v_allow - 24.0 - 0.9, "the 1 A drop would have picked 24 V"
    opts = builtin_options(case)
    z = next(o for o in opts if "Zener" in o.name).clamps[0].elements[1]
    assert z.voltage == want
    r = next(o for o in opts if o.name.startswith("diode +") and "Ω" in o.name).clamps[0].elements[1]
    assert r.resistance * i0 <= head
    cmp = compare(case)
    row = next(x for x in cmp.rows if "Zener" in x.name)
    assert row.result.figures.peak_voltage_V == pytest.approx(24.0 + vd + want, rel=1e-6)
    assert row.result.figures.peak_voltage_V <= v_allow and not row.failing


def test_pass_below_min_margin_is_said_as_choose_rejects_it():
    """Sized with no minimum margin the Zener is the 22 V of the test above; as the case's own
    clamp its node, V_s + V_d(i0) + V_Z (DESIGN §3), keeps (v_allow − peak)/v_allow ≈ 3.9 % under
    the derated rating, below the default checks.min_margin of 5 %: compare says so (table and
    JSON) where choose would reject it. Every built-in option compare offers keeps the margin."""
    from kickback.outputs.comparison import comparison_table

    case = load_case(_HIGH_CURRENT, source="hc.toml")
    v_allow = 0.89 * 55.0
    margin = (v_allow - (24.0 + _generic_diode_drop(3.0) + 22.0)) / v_allow
    assert margin < case.checks.min_margin == 0.05
    bare = replace(case, checks=replace(case.checks, min_margin=0.0))
    z22 = next(o for o in builtin_options(bare) if "Zener" in o.name)
    assert z22.clamps[0].elements[1].voltage == 22.0
    cmp = compare(replace(case, clamps=z22.clamps))
    d = cmp.own.to_dict()
    assert d["pass"] and d["below_min_margin"] and d["margin"] == pytest.approx(margin, rel=1e-4)
    line = next(ln for ln in comparison_table(cmp).splitlines() if ln.startswith("  * "))
    assert "under checks.min_margin 5 %" in line
    offered = [r for r in cmp.rows if not r.own and r.result is not None and r.result.passed]
    assert offered and not any(r.thin for r in offered)
    assert all(r.margin >= 0.05 for r in offered)


def test_snubber_capacitor_no_board_carries_is_flagged():
    """½·L·i0² = ½·C·(v_allow − V_s)² (Mohan, Undeland & Robbins, ch. 27) asks for
    0.02·9/24.95² ≈ 290 µF here: above the 10 µF a snubber is built with (common practice), so
    compare does not offer it and choose rejects every such RC candidate with the reason."""
    from kickback.studies.choose import choose

    case = load_case(_HIGH_CURRENT, source="hc.toml")
    c_rule = 0.02 * 9.0 / (0.89 * 55.0 - 24.0) ** 2
    assert c_rule > 10e-6
    cmp = compare(case)
    rc = next(x for x in cmp.rows if x.name.startswith("RC"))
    assert rc.result is None and rc.flag and "snubber capacitor" in rc.flag
    assert rc.to_dict()["impractical"] == rc.flag
    ch = choose(case, workers=1)
    assert not [c for c in ch.ranked if c.family == "RC snubber"]
    big = [c for c in ch.rejected if c.family == "RC snubber" and c.value > 10e-6]
    assert big and all(c.why_not.startswith("not offered") for c in big)
    small = [c for c in ch.rejected + ch.ranked if c.family == "RC snubber" and c.value <= 10e-6]
    assert all(not c.why_not.startswith("not offered") for c in small if not c.ok)
