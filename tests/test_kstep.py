"""The detailed engine's phases stepped by kickback's own Radau IIA (kickback/engine/kstep.py, opt-in
KICKBACK_KERNEL) against references outside it: the closed forms and state-space solutions of
tests/test_physics.py (scipy.signal.lsim, scipy.linalg.expm, brentq on the modal solution), run
with the opt-in on; and, where no closed form exists, the default path (scipy's Radau through
solve_ivp) on the same case at the same tolerance: same events, figures within a few rtol."""

from __future__ import annotations

import math

import numpy as np
import pytest
import test_physics as tp

from kickback.caseio import load_case
from kickback.circuit import Circuit
from kickback.engine import detailed, kstep
from kickback.simulation import simulate

try:
    from kickback.engine import kcircuit  # noqa: F401  (helper C's compiled kernel)
    WHICH = ["standin", "1"]
except ImportError:
    WHICH = ["standin"]


@pytest.fixture(params=WHICH)
def opt_in(request, monkeypatch):
    """The opt-in on (stand-ins or the compiled kernel); counts the phases kstep stepped."""
    monkeypatch.setenv(kstep.ENV, request.param)
    done = []
    orig = kstep.solve_phase

    def counted(*args):
        out = orig(*args)
        done.append(out is not None)
        return out

    monkeypatch.setattr(kstep, "solve_phase", counted)
    return done


@pytest.mark.parametrize(("L", "R", "C", "i0"), tp.LC_CASES)
def test_series_rlc_closed_form_with_opt_in(opt_in, L, R, C, i0):
    # scipy.signal.lsim and the exact modal peak (the test's own references, tests/test_physics.py)
    tp.test_coil_into_switch_capacitance_rings_as_series_rlc(L, R, C, i0)
    assert any(opt_in), "no phase was stepped by kstep"


@pytest.mark.parametrize(("kind", "tf", "cap"), tp.CROSSOVER_SMALL_C)
def test_crossover_with_small_capacitance_with_opt_in(opt_in, kind, tf, cap):
    tp.test_crossover_energy_small_capacitance(kind, tf, cap)
    assert any(opt_in)


DEMO = ["irrigation_valve", "relay_board", "contactor_varistor", "conveyor_brake", "motor_snubber",
        "unclamped_mosfet"]


def _figures(path, monkeypatch, which):
    if which is None:
        monkeypatch.delenv(kstep.ENV, raising=False)
    else:
        monkeypatch.setenv(kstep.ENV, which)
    return simulate(load_case(path))


@pytest.mark.parametrize("name", DEMO)
def test_demo_case_figures_match_the_default_path(opt_in, name, monkeypatch, request):
    # same method (Radau IIA, order 5), same tolerances (rtol 1e-5): the figures agree within a
    # few rtol — peak voltage and decay/release times 2e-5 relative, energies 2e-5 of the stored
    # energy, the balance within 1e-6 — and the same events occur (common practice, no source:
    # two integrators at rtol r differ by O(r))
    which = request.node.callspec.params["opt_in"]
    path = f"cases/{name}.toml"
    a = _figures(path, monkeypatch, None).figures
    b = _figures(path, monkeypatch, which).figures
    assert any(opt_in)
    assert b.peak_voltage_V == pytest.approx(a.peak_voltage_V, rel=2e-5)
    for key in ("to_10_percent_s", "to_1_percent_s", "to_zero_s", "release_s"):
        x, y = getattr(a, key), getattr(b, key)
        assert (x is None) == (y is None), key
        if x is not None:
            assert y == pytest.approx(x, rel=2e-5), key
    e0 = a.stored_energy_J + a.initial_capacitor_energy_J
    for key in ("resistance_energy_J", "crossover_energy_J", "avalanche_energy_J", "supply_energy_J",
                "left_in_capacitors_J"):
        assert abs(getattr(b, key) - getattr(a, key)) <= 2e-5 * e0, key
    for ca, cb in zip(a.clamps, b.clamps, strict=True):
        assert abs(ca.energy_J - cb.energy_J) <= 2e-5 * e0
    assert abs(b.energy_balance_error) < 1e-6  # the engine's own bound in tests/test_physics.py
    assert b.bound_hit == a.bound_hit and b.findings == a.findings


def test_tight_tolerance_converges_to_the_same_figures(monkeypatch):
    # at rtol 1e-9 the two paths agree far closer than at the default (both converge to the
    # solution of the same equations): relay board, a diode clamp's plateau
    a = simulate(load_case("cases/relay_board.toml"), rtol=1e-9).figures
    monkeypatch.setenv(kstep.ENV, "standin")
    b = simulate(load_case("cases/relay_board.toml"), rtol=1e-9).figures
    assert b.peak_voltage_V == pytest.approx(a.peak_voltage_V, rel=1e-9)
    assert b.to_zero_s == pytest.approx(a.to_zero_s, rel=1e-8)
    assert b.clamps[0].peak_current_A == pytest.approx(a.clamps[0].peak_current_A, rel=1e-7)


KERNELS = ["standin"] + (["compiled"] if len(WHICH) > 1 else [])


@pytest.mark.parametrize("which", KERNELS)
def test_event_specs_evaluate_like_the_event_functions(which):
    # the one event function of the specs against each closure the runner builds (its own
    # definition of the event), free and pinned, at states around the start
    c = Circuit(load_case("cases/irrigation_valve.toml"))
    runner = detailed.PhaseRunner(c, 1e-5, c.initial_state(), steep=True)
    runner.phase_name = "edge"
    k = kstep.Kernel(runner, which)
    rng = np.random.default_rng(18)
    pins = [None] + list(c.pin_points)
    assert len(pins) > 1, "the case needs a vertical law to pin at"
    for pin in pins:
        c.pin = pin
        evs = runner._pin_events() + ([runner.ev_peak] if pin is None else [])
        table = kstep.event_table(c, [g.spec for g in evs])
        k.set_mode(c)
        p = np.concatenate([k.p, table])
        for _ in range(5):
            y = runner.y * (1 + 0.1 * rng.standard_normal(runner.y.size))
            y[1] = c.Vs * rng.uniform(0.5, 3.0)
            t = float(rng.uniform(0, 1e-6))
            got = k.events(t, y, p)
            want = np.array([g(t, y) for g in evs])
            np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-12 * c.i0)
    c.pin = None


def test_unspecced_event_or_algebraic_node_stays_on_scipy(monkeypatch):
    monkeypatch.setenv(kstep.ENV, "standin")
    c = Circuit(load_case("cases/irrigation_valve.toml"))
    runner = detailed.PhaseRunner(c, 1e-5, c.initial_state(), steep=True)

    def g(t, y):
        return y[0] - 0.5 * c.i0
    assert kstep.solve_phase(runner, "edge", 1e-7, [g], {}, 10**6) is None
    g.spec = ("level", 0, 0.5 * c.i0)
    assert kstep.solve_phase(runner, "edge", 1e-7, [g], {}, 10**6) is not None
    assert kstep.solve_phase(runner, "edge", 1e-7, [g], {"method": "x"}, 10**6) is None
    monkeypatch.setenv(kstep.ENV, "0")
    assert kstep.solve_phase(runner, "edge", 1e-7, [g], {}, 10**6) is None
    assert not math.isnan(runner.t)


@pytest.mark.parametrize("which", KERNELS)
@pytest.mark.parametrize("ramp", [False, True])
def test_affine_model_defect_spec_evaluates_like_linear_event(ramp, which):
    # linphase.linear_event's closure (the model's own defect) against its spec evaluated by the
    # one event function, at states around the probe (inside and outside the model's reach)
    from kickback.engine.linphase import AffineModel, linear_event

    c = Circuit(load_case("cases/irrigation_valve.toml"))
    runner = detailed.PhaseRunner(c, 1e-5, c.initial_state())
    k = kstep.Kernel(runner, which)
    k.set_mode(c)
    y0 = c.initial_state()
    model = AffineModel(c, 0.0, y0, runner.scale[:c.ie], 1e-6, ramp=ramp)
    g = linear_event(model, 0.5)
    p = np.concatenate([k.p, kstep.event_table(c, [g.spec])])
    rng = np.random.default_rng(7)
    for rel in (0.0, 1e-12, 1e-6, 1e-2):
        y = y0 * (1 + rel * rng.standard_normal(y0.size))
        t = float(rng.uniform(0, 1e-6))
        assert k.events(t, y, p)[0] == pytest.approx(g(t, y), abs=1e-9)


@pytest.mark.parametrize("seed", [18, 32, 43])
def test_pin_switches_fire_at_the_same_times(opt_in, seed, monkeypatch, request):
    # wide-range draws whose node is pinned at vertical laws and released: the same sequence of
    # phases (each ends at an event: a pin, its release, the zero), each end within 1e-5 relative
    # of the default path's (same method, same rtol 1e-5; common practice, no source)
    from wide_range import draw

    which = request.node.callspec.params["opt_in"]
    ends = []
    for mode in (None, which):
        if mode is None:
            monkeypatch.delenv(kstep.ENV, raising=False)
        else:
            monkeypatch.setenv(kstep.ENV, mode)
        w = detailed.integrate(Circuit(load_case(draw(seed).text, source=str(seed))))
        ends.append(([(p.name, p.pin) for p in w.phases], np.array([p.t1 for p in w.phases])))
    assert any(opt_in)
    assert any(pin is not None for _, pin in ends[0][0]), "the draw should pin its node"  # (FLOAT: no capacitance)
    assert [n for n, _ in ends[1][0]] == [n for n, _ in ends[0][0]]
    assert [p is None for _, p in ends[1][0]] == [p is None for _, p in ends[0][0]]
    np.testing.assert_allclose(ends[1][1], ends[0][1], rtol=1e-5)
