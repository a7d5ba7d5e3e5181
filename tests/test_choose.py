"""Choosing a clamp: recommended choices pass when re-simulated; tighter limits change the ranking."""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np
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


def test_every_recommended_choice_passes_with_the_detailed_engine(valve_choice):
    """The candidates are screened by the batch engine (a Shockley-diode fit, its effect within
    2 %); those within 2 % of a limit are judged on the detailed engine's figures, so every
    feasible choice passes every check when simulated again with the detailed engine."""
    case = valve_choice.case
    assert valve_choice.engine in ("batch", "mixed") and valve_choice.fits
    for cand in valve_choice.ranked:
        res = simulate(replace(case, clamps=cand.option.clamps, options=()))
        assert res.passed, (cand.option.name, cand.engine, [c for c in res.checks if not c.passed])


def test_zener_trade_off_on_the_batch_path(valve_choice):
    # higher Zener voltage → higher peak and shorter release (first-order RL against the clamp
    # voltage, di/dt = −(V_clamp + R·i)/L; any circuits textbook), on the batch engine's figures
    zs = sorted((c for c in list(valve_choice.ranked) + list(valve_choice.rejected)
                 if c.family == "diode + Zener" and c.engine == "batch"), key=lambda c: c.value)
    assert len(zs) > 10
    peak = np.array([c.figures["peak_voltage_V"] for c in zs])
    release = np.array([c.release for c in zs])
    assert np.all(np.diff(peak) > 0) and np.all(np.diff(release) < 0)


def test_choice_names_its_engine(valve_choice, tmp_path):
    from kickback.outputs.choice import choice_table

    text = choice_table(valve_choice)
    assert "candidates screened by the" in text and "fit: D+Z: Shockley diode" in text
    d = valve_choice.to_dict()
    assert d["engine"] == valve_choice.engine and d["fits"]
    assert all(c["engine"] in ("batch", "detailed") for c in d["ranked"])


def test_choose_with_the_detailed_engine_ranks_alike(valve_choice):
    detailed = choose(valve_choice.case, workers=2, engine="detailed")
    assert detailed.engine == "detailed" and not detailed.fits
    assert [c.option.name for c in detailed.ranked[:5]] == [c.option.name for c in valve_choice.ranked[:5]]
    assert {c.option.name for c in detailed.ranked} == {c.option.name for c in valve_choice.ranked}
