"""Variants through either engine (kickback.studies.points) and same-topology cases as variations
(kickback.studies.many.as_variations).

Expected values are the detailed engine's own runs of the same variants (a consistency property
between the two engines, not a copied number) and the case values the helpers are given. Every
component value is an invented demo value.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from kickback import load_case
from kickback.case import Case, Clamp, Coil, Element, Supply, Switch
from kickback.errors import SolverError
from kickback.keypath import set_value
from kickback.studies.many import as_variations, batch_unsupported
from kickback.studies.onepoint import point_figures
from kickback.studies.points import evaluate, evaluate_cases, pick_engine


def _dz(vz=24.0, name="Z1", kind="zener", r_dyn=1.5):
    return Case("D+Z (demo)", Supply(24.0), Coil(0.08, 30.0, release_current=0.1),
                Switch("mosfet", on_resistance=0.1, rated_voltage=60.0),
                (Clamp("D+Z", "coil", (Element("diode", name="D1", model="constant-drop", forward_voltage=0.7),
                                       Element(kind, name=name, voltage=vz, dynamic_resistance=r_dyn))),))


def test_as_variations_collects_the_values_that_differ():
    cases = [_dz(12.0), _dz(18.0, r_dyn=2.0), _dz(24.0)]
    base, var = as_variations(cases)
    assert base is cases[0]
    assert set(var) == {"clamp[0].element[1].voltage", "clamp[0].element[1].dynamic_resistance"}
    assert list(var["clamp[0].element[1].voltage"]) == [12.0, 18.0, 24.0]
    assert list(var["clamp[0].element[1].dynamic_resistance"]) == [1.5, 2.0, 1.5]
    for k, c in enumerate(cases):  # the variations rebuild each case
        rebuilt = base
        for path, vals in var.items():
            rebuilt = set_value(rebuilt, path, vals[k])
        assert rebuilt == c
    assert as_variations([cases[0]]) == (cases[0], {})
    # the title is not simulated: it does not split the cases
    assert as_variations([cases[0], dataclasses.replace(cases[1], title="other")]) is not None


@pytest.mark.parametrize("other", [
    pytest.param(_dz(18.0, kind="tvs"), id="element-type"),
    pytest.param(_dz(18.0, name="Z2"), id="element-name"),
    pytest.param(dataclasses.replace(_dz(), clamps=()), id="no-clamp"),
    pytest.param(dataclasses.replace(_dz(), coil=dataclasses.replace(_dz().coil, release_current=None)),
                 id="value-given-in-one-only"),
    pytest.param(dataclasses.replace(_dz(), switch=dataclasses.replace(_dz().switch, gate_voltage=10.0)),
                 id="value-given-in-one-only-2"),
])
def test_as_variations_says_when_cases_differ_in_structure(other):
    assert as_variations([_dz(), other]) is None


def test_evaluate_agrees_with_point_figures_of_the_detailed_engine():
    """The same variants on both engines: the batch engine's exact piecewise-linear solution and
    the detailed engine at its default rtol 1e-5 agree to 1e-6 on this first-order clamp (the
    detailed engine's error on a first-order decay at rtol 1e-5 is far below that; tests/test_batch.py
    holds the engines to 1e-6 at rtol 1e-9)."""
    case = _dz()
    var = {"clamp[0].element[1].voltage": np.array([12.0, 24.0, 40.0])}
    b = evaluate(case, var, engine="batch")
    d = evaluate(case, var, engine="detailed")
    assert (b.engine, d.engine) == ("batch", "detailed")
    assert [name for name, c in b.checks.items() if c.applies.any()] == list(d.checks), "same check rows"
    for k, vz in enumerate(var["clamp[0].element[1].voltage"]):
        ref = point_figures(set_value(case, "clamp[0].element[1].voltage", vz))
        for name in ("peak_voltage_V", "clamp_energy_J", "to_10_percent_s", "to_zero_s", "release_s"):
            assert b.figures[name][k] == pytest.approx(ref[name], rel=1e-6), name
            assert d.figures[name][k] == ref[name], name
        assert bool(b.passed[k]) == ref["pass"] and b.failing(k) == ref["failing_checks"]


def test_auto_falls_back_to_the_detailed_engine_and_says_why():
    case = dataclasses.replace(_dz(), switch=dataclasses.replace(_dz().switch, thermal_resistance=(1.0,),
                                                                 thermal_tau=(1e-3,)))
    assert "thermal network" in batch_unsupported(case)
    used, note = pick_engine(case, "auto")
    assert used == "detailed" and "batch engine does not cover" in note and "thermal network" in note
    pts = evaluate(case, {"supply.voltage": [20.0, 24.0]})
    assert pts.engine == "detailed" and "thermal network" in pts.note
    with pytest.raises(SolverError, match="batch engine"):
        evaluate(case, {"supply.voltage": [20.0, 24.0]}, engine="batch")
    assert pick_engine(_dz(), "auto") == ("batch", "")


def test_a_variant_the_batch_engine_fails_is_run_by_the_detailed_engine(monkeypatch):
    """A variant the batch engine reports as failed (forced here) is run again by the detailed
    engine; its row then holds the detailed engine's figures, the others stay as they were."""
    import kickback.studies.many as many

    real = many.simulate_many

    def failing_second(case, variations, **kw):
        r = real(case, variations, **kw)
        status, message, passed = r.status.copy(), r.message.copy(), r.passed.copy()
        status[1], message[1], passed[1] = "failed", "forced for the test", False
        figures = {k: v.copy() for k, v in r.figures.items()}
        for v in figures.values():
            v[1] = np.nan
        return dataclasses.replace(r, figures=figures, status=status, message=message, passed=passed)

    monkeypatch.setattr(many, "simulate_many", failing_second)
    case = _dz()
    var = {"clamp[0].element[1].voltage": np.array([12.0, 24.0, 40.0])}
    pts = evaluate(case, var, engine="batch")
    assert pts.retried == 1 and pts.errors[1] is None
    ref = point_figures(set_value(case, "clamp[0].element[1].voltage", 24.0))
    assert pts.figures["peak_voltage_V"][1] == ref["peak_voltage_V"]
    assert np.all(np.isfinite(pts.figures["peak_voltage_V"]))


def test_evaluate_cases_of_different_topologies_runs_them_one_by_one():
    cases = [_dz(12.0), _dz(30.0, kind="tvs")]
    pts = evaluate_cases(cases)
    assert pts.n == 2 and pts.engine == "batch"
    for k, c in enumerate(cases):
        one = evaluate(c)
        assert pts.figures["peak_voltage_V"][k] == one.figures["peak_voltage_V"][0]


def test_fitted_demo_case_states_its_fit(cases_dir):
    pts = evaluate(load_case(cases_dir / "irrigation_valve.toml"), {"coil.inductance": [0.1, 0.12]})
    assert pts.engine == "batch" and pts.fits and "Shockley" in pts.fits[0]
