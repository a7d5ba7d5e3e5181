"""The shooting's bracket for a capacitor topped up through a Shockley diode each cycle
(:func:`kickback.engine.periodic_bracket.topup_root`), on synthetic cycle maps whose fixed point
is known in closed form.

A capacitor held behind a diode loses a fixed charge per cycle (its drain ``D``: the diode's
reverse saturation current times the period) and is topped up by ``T(s) = A·exp(−s/a)`` where
it starts at ``s`` (the diode's forward current is exponential in its voltage, W. Shockley,
Bell Syst. Tech. J. 28, 1949). Its residual is ``F(s) = T(s) − D``; the fixed point
``s* = a·ln(A/D)`` (solve ``A·exp(−s/a) = D``). Far below its fixed point the top-up is limited
(the series resistance, the pulse's charge): ``T = E/(1 + E/T_max)`` with ``E = A·exp(−s/a)``,
whose fixed point is ``s* = a·ln(A·(1 − D/T_max)/D)`` (solve ``T(s) = D`` for ``E``).
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from kickback.engine.periodic_bracket import log_secant, topup_root, topup_state

TOL = 1e-9
SCALE = np.array([10.0, 1.0])  # [V] the held capacitor, [A] a state the map forgets


def _map(A, a, D, forgotten=0.25, t_max=math.inf):
    """A cycle map with the signature of :func:`kickback.engine.periodic.one_cycle`: state 0 the
    topped-up capacitor, state 1 a state the map forgets (set to ``forgotten`` every cycle)."""
    calls = []

    def one_cycle(c, x, duty, frequency, rtol, keep=False, energies=True):
        calls.append(bool(keep))
        s = float(x[0])
        e = A * math.exp(-s / a)
        x1 = np.array([s + e / (1.0 + e / t_max) - D, forgotten])
        e = np.zeros(1) if energies else None
        return x1, e, e, ("kept" if keep else None)

    return one_cycle, calls


def _newton_history(one_cycle, s0, a, steps=2, A_=None, t_max_=None):
    """Cycles of Newton's method on F with the exact slope F' = −T/a, from s0 (the shooting's
    steps before the bracket takes over)."""
    hist, s = [], s0
    for _ in range(steps):
        x = np.array([s, 0.25])
        x1 = one_cycle(None, x, 0.5, 1e3, 1e-8)[0]
        f = x1 - x
        hist.append((x, f))
        e = A_ * math.exp(-float(x[0]) / a) if t_max_ else f[0] + D_
        slope = -(e / a) / (1.0 + e / t_max_) ** 2 if t_max_ else -(f[0] + D_) / a
        s = s - f[0] / slope
    return hist


D_ = 2.5e-5  # [V] per cycle (demo data)


@pytest.mark.parametrize("A,a,t_max,start", [(3.0, 0.05, math.inf, 8), (40.0, 0.03, math.inf, 8),
                                             (0.5, 0.1, math.inf, 8), (3.0, 0.05, 3e-3, 5),
                                             (40.0, 0.03, 1e-2, 6.5)])
def test_topup_root_meets_the_closed_form_fixed_point(A, a, t_max, start):
    one_cycle, calls = _map(A, a, D_, t_max=t_max)
    s_star = a * math.log(A * (1.0 - D_ / t_max) / D_)  # closed form, module docstring
    hist = _newton_history(one_cycle, s_star - start * a, a, A_=A, t_max_=None if t_max == math.inf else t_max)
    assert topup_state(hist, SCALE) == 0
    c = SimpleNamespace(ie=2)
    n_hist = len(calls)
    got = topup_root(c, 0.5, 1e3, 1e-8, SCALE, hist, one_cycle, TOL)
    assert got is not None
    x, e_on, e_off, runner, resid, solves = got
    # the distance to the fixed point, not only the residual, within the shooting's tolerance
    assert abs(x[0] - s_star) <= TOL * SCALE[0]
    assert x[1] == 0.25
    assert resid <= TOL and runner == "kept" and calls[-1]
    # Newton creeping at a fixed fraction per step would need ~20 more cycles from here
    assert solves == len(calls) - n_hist <= 6


def test_no_drain_no_bracket_no_answer():
    """Without a drain there is no fixed point: the probe past it keeps the sign and the bracket
    declines (None) instead of returning a point."""
    a = 0.05
    one_cycle, _ = _map(3.0, a, 0.0)
    hist = _newton_history(one_cycle, 0.1, a)
    assert topup_state(hist, SCALE) == 0
    assert topup_root(SimpleNamespace(ie=2), 0.5, 1e3, 1e-8, SCALE, hist, one_cycle, TOL) is None


def test_topup_state_wants_a_steady_creep_in_one_state():
    x0, x1 = np.array([0.0, 0.25]), np.array([0.1, 0.25])
    # residual halves, state 0 alone: a creep
    assert topup_state([(x0, np.array([2e-3, 0.0])), (x1, np.array([1e-3, 0.0]))], SCALE) == 0
    # a quadratic Newton step (residual down 1e-4): no creep
    assert topup_state([(x0, np.array([2e-3, 0.0])), (x1, np.array([2e-7, 0.0]))], SCALE) is None
    # the residual changed sign: a bracket, not a creep
    assert topup_state([(x0, np.array([2e-3, 0.0])), (x1, np.array([-1e-3, 0.0]))], SCALE) is None
    # another state's residual is still there
    assert topup_state([(x0, np.array([2e-3, 1e-4])), (x1, np.array([1e-3, 1e-4]))], SCALE) is None


def test_an_unsettled_other_state_gets_no_answer():
    """A second state that drifts by 1e-9 of its scale per cycle (its own fixed point not
    reached) is not one the bracket may pass as settled: None, the shooting goes on."""
    A, a = 3.0, 0.05
    inner, _ = _map(A, a, D_)

    def one_cycle(c, x, *args, **kw):
        x1, e_on, e_off, runner = inner(c, x, *args, **kw)
        x1[1] = x[1] + 1e-9 * SCALE[1]
        return x1, e_on, e_off, runner

    s_star = a * math.log(A / D_)
    hist = []
    for s in (s_star - 8 * a, s_star - 7 * a):
        x = np.array([s, 0.25])
        hist.append((x, one_cycle(None, x, 0.5, 1e3, 1e-8)[0] - x))
    assert topup_state(hist, SCALE) == 0
    assert topup_root(SimpleNamespace(ie=2), 0.5, 1e3, 1e-8, SCALE, hist, one_cycle, TOL) is None


@pytest.mark.parametrize("w,D", [(4e-4, 1e-6), (1e-3, 2.5e-6), (0.02, 1e-4)])
def test_log_secant_meets_a_fill_to_level_knee(w, D):
    """A capacitor charged to a level ``L`` each cycle when it starts below it, with a smooth
    knee of width ``w`` (``T = w·ln(1 + exp((L − s)/w))``: linear ``L − s`` below, an exponential
    tail above), drained by ``D``: the held-state bracket of the shooting (wide-range case 718's
    shape). Fixed point in closed form: ``T(s*) = D`` ⇔ ``s* = L − w·ln(expm1(D/w))``."""
    L = 1.37
    s_star = L - w * math.log(math.expm1(D / w))
    n, at = [0], []

    def evaluate(s, full):
        n[0] += 1
        at.append(s)
        f = w * float(np.logaddexp(0.0, (L - s) / w)) - D  # ln(1 + e^u) without overflow
        return f, abs(f)

    lo, hi = -0.3, 8.6  # a cycle far below (topped up to L) and one far above (drained)
    pts = [(lo, evaluate(lo, False)[0]), (hi, evaluate(hi, False)[0])]
    n[0] = 0
    xtol = 1e-3 * TOL
    assert log_secant(evaluate, pts, lo, hi, -pts[1][1], xtol, TOL, -1.0, 100)
    # the last cycle evaluated is the root, to the bracket's tolerance (plus the rounding of s)
    assert abs(at[-1] - s_star) <= xtol + 4e-16 * L
    assert n[0] <= 15  # bisection alone: log2(8.9/1e-12) ≈ 43 cycles
