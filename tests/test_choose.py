"""Choosing a clamp: recommended choices pass when re-simulated; tighter limits change the ranking."""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import pytest
from click.testing import CliRunner

from kickback import load_case, simulate
from kickback.cli import main
from kickback.studies.choose import choose
from kickback.studies.eseries import E12, E24

CASES = Path(__file__).resolve().parent.parent / "cases"
VALVE = CASES / "irrigation_valve.toml"


@pytest.fixture(scope="module")
def valve_choice():
    return choose(load_case(VALVE), workers=2)


def _mantissa(x):
    from math import floor, log10

    return round(x / 10 ** floor(log10(x)), 6)


def test_recommended_choices_pass_when_resimulated(valve_choice):
    case = valve_choice.case
    assert valve_choice.ranked, "the valve has feasible clamps"
    for cand in valve_choice.ranked[:5]:
        res = simulate(replace(case, clamps=cand.option.clamps, options=()))
        assert res.passed, (cand.option.name, [c for c in res.checks if not c.passed])
        assert res.figures.peak_voltage_V <= 0.8 * case.switch.rated_voltage
    assert all(r.passed for r in valve_choice.top)


def test_sizing_values_are_standard(valve_choice):
    for cand in list(valve_choice.ranked) + list(valve_choice.rejected):
        for el in (e for cl in cand.option.clamps for e in cl.elements):
            if el.type in ("zener", "tvs"):
                assert _mantissa(el.voltage) in E24, cand.option.name
            if el.type == "resistor":
                assert _mantissa(el.resistance) in E12, cand.option.name
            if el.type == "capacitor":
                assert _mantissa(el.capacitance) in E12, cand.option.name


def test_ranking_fastest_first_and_rejections_explained(valve_choice):
    rel = [c.release for c in valve_choice.ranked]
    assert rel == sorted(rel)
    assert all(c.why_not for c in valve_choice.rejected)
    assert any("switch peak voltage" in c.why_not for c in valve_choice.rejected)


def test_tighter_limits_change_the_ranking(valve_choice):
    case = valve_choice.case
    # a lower derating lowers the allowed switch voltage: the best choice must respect it
    tight = choose(replace(case, checks=replace(case.checks, derating=0.65)), workers=2)
    assert tight.ranked[0].figures["peak_voltage_V"] <= 0.65 * 60.0
    assert tight.ranked[0].release >= valve_choice.ranked[0].release
    assert len(tight.ranked) < len(valve_choice.ranked)
    # a tighter release limit removes the slow families (the plain diode releases after ~11 ms)
    fast = choose(replace(case, checks=replace(case.checks, max_release_time=0.008)), workers=2)
    assert "plain diode" not in {c.family for c in fast.ranked}
    assert all(c.release <= 0.008 for c in fast.ranked)


def test_cli_choose_json_and_plot(tmp_path):
    res = CliRunner().invoke(main, ["choose", str(VALVE), "--json", "--out", str(tmp_path)])
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    assert d["ranked"] and d["rejected"] and len(d["top"]) == 3
    assert sorted(p.name for p in tmp_path.iterdir()) == ["choose.json", "tradeoff.png", "tradeoff.svg"]
