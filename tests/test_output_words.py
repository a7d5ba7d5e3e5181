"""What kickback shows, read as an engineer reads it (issue 20): units in every file, the words of
the command line, and findings that explain a figure. All case values are demo data.

References written here: the kelvin–Celsius relation t/°C = T/K − 273.15 (BIPM SI Brochure, 9th
ed., 2.3.1); the unclamped LC ring of an ideal switch, V_peak = V_s + i0·√(L/C) for a lossless
coil (series LC closed form; the coil resistance only lowers it).
"""

from __future__ import annotations

import csv
import math
import re
import tomllib
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from click.testing import CliRunner

import kickback
from kickback import load_case, simulate
from kickback.cli import main
from kickback.errors import CaseError

ROOT = Path(__file__).resolve().parents[1]
VALVE = ROOT / "cases" / "irrigation_valve.toml"
UNIT = re.compile(r".+ \[(.+)\]$")


# ------------------------------------------------------------------------------------------ files
def test_samples_csv_gives_temperatures_in_celsius_and_every_unit():
    from kickback.outputs.tolerances import samples_csv

    tr = SimpleNamespace(names=("coil.inductance", "coil_temperature", "checks.derating"),
                         samples=np.array([[0.12, 358.15, 0.8]]),
                         figure_list=(("peak_voltage_V", "V", True), ("release_s", "s", True)),
                         figures={"peak_voltage_V": np.array([45.0]), "release_s": np.array([np.nan])},
                         passed=np.array([True]), errors=[None])
    head, row = list(csv.reader(samples_csv(tr).splitlines()))
    assert head[:5] == ["coil.inductance [H]", "coil_temperature [°C]", "checks.derating [1]", "peak_voltage [V]",
                        "release [s]"]
    assert float(row[1]) == pytest.approx(358.15 - 273.15, abs=1e-9)  # BIPM: t/°C = T/K − 273.15
    assert row[4] == ""  # a time that does not occur stays empty, never a made-up number


def test_sweep_csv_says_the_fit_once_and_every_unit():
    from kickback.outputs.sweeps import sweep_csv
    from kickback.studies.sweep import COLUMNS

    n = 4
    sw = SimpleNamespace(axes=(SimpleNamespace(path="checks.ambient_temperature", unit="K"),),
                         points=np.array([[273.15 + 10 * k] for k in range(n)]),
                         figures={c: [1.0] * n for c, _ in COLUMNS}, errors=[None] * n, failing=[[]] * n,
                         passed=[True] * n, engine="batch", fits=("a long sentence about the diode fit",),
                         engine_note=None, engine_of=lambda k: "batch")
    text = sweep_csv(sw)
    assert text.count("a long sentence about the diode fit") == 1 and text.startswith("# batch engine")
    rows = list(csv.reader(text.splitlines()[1:]))
    head = rows[0]
    numeric = head[:1 + len(COLUMNS)]
    assert all(UNIT.fullmatch(h) for h in numeric), numeric
    assert head[0] == "checks.ambient_temperature [°C]" and [float(r[0]) for r in rows[1:]] == [0, 10, 20, 30]


def test_waveforms_csv_header_has_a_unit_per_column():
    from kickback.outputs.csvout import waveforms_csv

    res = simulate(load_case(VALVE))
    head = waveforms_csv(res).splitlines()[0].split(",")
    assert all(UNIT.fullmatch(h) for h in head), head


def test_unnamed_elements_are_named_by_type_and_place():
    text = VALVE.read_text().replace('name = "D1+Z1"\n', "").replace('name = "D1"\n', "")
    text = re.sub(r'\nname = "Z1"', "", text)
    d = simulate(load_case(text, source="t.toml")).to_dict()
    names = [[e["name"] for e in c["elements"]] for c in d["clamps"]]
    given = tomllib.loads(text)["clamp"][0]["element"]
    want = [e.get("name") or f"{e['type']} {j + 1}" for j, e in enumerate(given)]
    assert names == [want] and d["clamps"][0]["name"] == "clamp 1"


def test_engine_words_follow_the_engine_option():
    """Issue 20: the words of --engine (auto, batch, detailed), never "mixed": the engine picked,
    and how many variants ran on the other one."""
    from kickback.outputs.sweeps import engine_lines, engine_words

    both = SimpleNamespace(engine="batch", engines={"batch": 3, "detailed": 2}, ranked=(), rejected=(),
                           fits=(), engine_note="", asked="auto")
    assert engine_words(both) == "batch engine, 2 of 5 candidates on the detailed engine"
    lines = engine_lines(both)
    assert lines[0] == "--engine auto: batch engine, 2 of 5 candidates on the detailed engine"
    # the engine that ran most comes first, whichever was picked for the case (a thermal case's
    # candidates, generic parts without a thermal network, run on the batch engine)
    thermal = SimpleNamespace(engine="detailed", engines={"batch": 82, "detailed": 2}, ranked=())
    assert engine_words(thermal) == "batch engine, 2 of 84 candidates on the detailed engine"
    assert any(x.startswith("batch engine:") for x in lines) and any(x.startswith("detailed engine:") for x in lines)
    assert engine_words(SimpleNamespace(engine="batch")) == "batch engine"
    sweep = SimpleNamespace(engine="detailed", engines={"detailed": 4})
    assert engine_words(sweep) == "detailed engine"


# ------------------------------------------------------------------------------------------ words
def test_fit_supply_without_unit_gets_a_command_line_hint():
    res = CliRunner().invoke(main, ["fit", str(ROOT / "examples" / "valve_decay_trace.csv"), "--kind", "decay",
                                    "--supply", "24"])
    assert res.exit_code == 2
    assert "give a unit: --supply 24V" in res.stderr and "string" not in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


@pytest.mark.parametrize(("typo", "meant"), [
    ("coil.inductanse", "coil.inductance"),
    ("coli.inductance", "coil.inductance"),
    ("switch.fall_tim", "switch.fall_time"),
    ("clamp[0].element[1].voltag", "clamp[0].element[1].voltage"),
], ids=["leaf", "table", "switch", "element"])
def test_mistyped_sweep_key_gets_did_you_mean(typo, meant):
    res = CliRunner().invoke(main, ["sweep", str(VALVE), "--vary", f"{typo}=1:2"])
    assert res.exit_code == 2
    assert f"did you mean '{meant}'?" in res.stderr and len(res.stderr.strip().splitlines()) == 1


def test_mistyped_tolerance_key_gets_did_you_mean():
    text = VALVE.read_text() + '\n[tolerance."coil.resistanse"]\nband = "5 %"\n'
    with pytest.raises(CaseError, match=r"did you mean 'coil\.resistance'\?"):
        load_case(text, source="t.toml")


@pytest.mark.parametrize(("key", "text", "value"), [
    ("derating", '"80 %"', 0.8), ("derating", '"80%"', 0.8), ("derating", "0.8", 0.8),
    ("min_margin", '"5 %"', 0.05), ("min_margin", "0.05", 0.05), ("energy_derating", '"50 %"', 0.5),
])
def test_fractions_take_a_percentage_string(key, text, value):
    base = VALVE.read_text().replace("derating = 0.8\n", "")
    case = load_case(base.replace("[checks]\n", f"[checks]\n{key} = {text}\n"), source="t.toml")
    assert getattr(case.checks, key) == value


@pytest.mark.parametrize("text", ['"180 %"', '"80"', '"eighty %"'])
def test_bad_percentages_are_refused_on_one_line(text):
    base = VALVE.read_text().replace("derating = 0.8", f"derating = {text}")
    with pytest.raises(CaseError) as err:
        load_case(base, source="t.toml")
    assert "checks.derating" in str(err.value) and "'80 %'" in str(err.value) and "\n" not in str(err.value)


def test_motor_template_loads_and_shows_its_motor_section():
    text = (Path(kickback.__file__).parent / "templates" / "motor.toml").read_text(encoding="utf-8")
    assert "# [motor]" in text and "back-EMF" in text and "not modelled" not in text
    assert load_case(text, source="motor.toml").motor is None
    on = re.sub(r"^# (\[motor\]|back_emf_constant|speed)", r"\1", text, flags=re.M)
    case = load_case(on, source="motor.toml")
    assert case.motor is not None and case.motor.back_emf_constant == 0.02 and case.motor.speed == 600


NO_BREAKDOWN = """\
title = "switch with no breakdown voltage (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "10 mH"
resistance = "{r}"
[switch]
type = "ideal"
capacitance = "100 pF"
{rating}
"""


@pytest.mark.parametrize(("r", "rating", "threshold", "expect"), [
    ("24 Ω", 'rated_voltage = "60 V"', 1.5 * 60.0, True),   # 1.5 × the rating (common practice, from memory)
    ("24 Ω", "", 5 * 24.0, True),                            # no rating: 5 × the supply (common practice, no source)
    ("2.4 kΩ", 'rated_voltage = "60 V"', 1.5 * 60.0, True),  # i0 = 10 mA rings to about 124 V: still above
    ("24 kΩ", 'rated_voltage = "60 V"', 1.5 * 60.0, False),  # i0 = 1 mA rings to about 34 V: below, no finding
])
def test_a_switch_with_no_breakdown_that_rings_high_gets_a_finding(r, rating, threshold, expect):
    case = load_case(NO_BREAKDOWN.format(r=r, rating=rating), source="t.toml")
    i0 = 24.0 / case.coil.resistance
    ring = 24.0 + i0 * math.sqrt(0.01 / 100e-12)  # lossless LC bound (series LC closed form)
    f = simulate(case).figures
    assert f.peak_voltage_V <= ring * (1 + 1e-6)
    found = [x for x in f.findings if "breakdown_voltage" in x]
    assert bool(found) == (f.peak_voltage_V > threshold) == expect, (f.peak_voltage_V, f.findings)
    if found:
        assert "avalanches near its voltage rating" in found[0]


# ------------------------------------------------------------------------------------------ tables
def test_clamp_elements_have_their_own_columns_and_footnotes():
    from kickback.outputs.table import result_table

    text = result_table(simulate(load_case(VALVE)))
    head = next(ln for ln in text.splitlines() if "peak voltage ¹" in ln).split()
    assert head[:3] == ["clamp", "element", "type"] and "stand-off" in head
    d1 = next(ln for ln in text.splitlines() if ln.split()[:3] == ["D1+Z1", "D1", "diode"])
    assert "peak" not in d1 and "stand-off" not in d1  # values only under their own headers
    assert "¹ peak voltage:" in text and "² stand-off: the largest reverse voltage" in text


def test_junction_margin_says_its_basis():
    """conveyor_brake has a Foster network on its TVS: the margin is of the allowed rise,
    (T_max − T_j)/(T_max − T_amb), recomputed here from the row's own value and limit."""
    from kickback.outputs.table import result_table

    res = simulate(load_case(ROOT / "cases" / "conveyor_brake.toml"))
    (tj,) = [ck for ck in res.checks if ck.unit == "K"]
    amb = res.case.checks.ambient_temperature
    assert tj.margin == pytest.approx((tj.limit - tj.value) / (tj.limit - amb), rel=1e-12)
    text = result_table(res)
    assert f"{100 * tj.margin:+.1f} % ‡" in text and "(T_max − T_j)/(T_max − T_ambient) ‡" in text


# ------------------------------------------------------------------------------------------ python
def test_simulate_many_pairs_and_grid_crosses():
    """Paired lists give n variants; grid gives every combination in itertools.product's order
    (the Python standard library is the reference)."""
    import itertools

    from kickback.studies.many import grid, simulate_many

    ls, vz = [0.10, 0.12, 0.15], [15.0, 22.0]
    g = grid({"coil.inductance": ls, "clamp[0].element[1].voltage": vz})
    assert list(zip(g["coil.inductance"], g["clamp[0].element[1].voltage"], strict=True)) == \
        list(itertools.product(ls, vz))
    case = load_case(VALVE)
    crossed = simulate_many(case, g, workers=1)
    paired = simulate_many(case, {"coil.inductance": ls[:2], "clamp[0].element[1].voltage": vz}, workers=1)
    assert crossed.figures["switch.peak_voltage_V"].shape == (6,)
    assert paired.figures["switch.peak_voltage_V"].shape == (2,)
    # the paired variant (0.12 H, 22 V) is the crossed variant number 3
    assert crossed.figures["switch.peak_voltage_V"][3] == paired.figures["switch.peak_voltage_V"][1]
