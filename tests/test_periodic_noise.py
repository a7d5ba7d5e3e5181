"""The shooting's acceptance of a fixed point where the cycle integration's own noise, not the
iteration, sets how closely it can be resolved (wide-range cases 1805 and 9323 spent 100+ and 35
cycles past their fixed point), on synthetic cycle maps whose fixed point is known in closed form.

- A capacitor held behind a diode (:func:`kickback.engine.periodic_bracket.log_secant`): topped
  up by ``T(s) = A·exp(−s/a)`` (W. Shockley, Bell Syst. Tech. J. 28, 1949: the diode's forward
  current is exponential in its voltage) and drained by ``D`` per cycle, both ~1e-13 of its scale;
  fixed point ``s* = a·ln(A/D)``. Near it the residual ``F(s) = T(s) − D`` is a few ulps of ``s``
  — the computed state ``s + F`` rounds it — and no secant places the root closer than that noise
  over the slope ``|F'(s*)| = D/a`` (R. P. Brent, Algorithms for Minimization without
  Derivatives, 1973, §4.2): a distance of ``1e-12·|s|`` cannot be asked for.
- A full cycle (energies in the step-size control) whose residual misses the tolerance where the
  cheap integration of the same cycle met it (:func:`kickback.engine.periodic_bracket._closed`):
  the two integrations of one cycle from one state differ by the integration's noise alone.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest

from kickback.engine.periodic_bracket import NOISE_CAP, ROUNDING, TOPUP_MAX, _closed, log_secant
from kickback.engine.periodic_settle import full_at_noise

TOL = 1e-9
EPS = np.finfo(float).eps


@pytest.mark.parametrize("rng_seed", [0, 1, 2])
def test_held_capacitor_root_at_the_rounding(rng_seed):
    """A held capacitor at 0.38 of its scale, top-up e-fold 1e-3, drain 1e-13 per cycle: the
    state's rounding (~6e-17) over the slope D/a = 1e-10 leaves the root known to ~1e-6 of it only;
    the secant stops at a residual within a few dozen ulps of s, the root within that noise over
    the slope of the closed-form fixed point."""
    a, D = 1e-3, 1e-13  # [V] (scale 1 V; demo data)
    s_star = 0.38
    A = D * math.exp(s_star / a)  # so that s* = a·ln(A/D) exactly (module docstring)
    rng = np.random.default_rng(rng_seed)
    assert TOL * D / a < EPS * s_star  # the distance the old rule asked for is below the rounding
    at = []

    def evaluate(s, full):
        # the integration's noise: a few ulps of the end state, never nil
        noise = float(rng.choice([-1, 1]) * rng.integers(1, 9)) * math.ulp(s)
        x1 = (s + A * math.exp(-s / a) - D) + noise
        f = x1 - s
        at.append((s, f))
        return f, abs(f)

    lo, hi = s_star - 0.004, s_star + 0.02  # a topped-up cycle below, a drained one above
    pts = [(lo, evaluate(lo, False)[0]), (hi, evaluate(hi, False)[0])]
    assert pts[0][1] > 0 > pts[1][1]
    drain = -pts[1][1]
    # the distance asked by the held-capacitor bracket (periodic_bracket.held_root: 1e-3 of the
    # tolerance), the cycles allowed by the top-up bracket (TOPUP_MAX)
    assert log_secant(evaluate, pts, lo, hi, drain, 1e-3 * TOL, TOL, -1.0, TOPUP_MAX)
    s, f = at[-1]
    assert abs(f) <= ROUNDING * abs(s)
    # Brent §4.2: the root to within the residual's noise over the slope, no closer
    assert abs(s - s_star) <= 2.0 * ROUNDING * abs(s) / (D / a)


def test_held_root_far_from_the_rounding_still_wants_the_distance():
    """A residual a thousand times the state's rounding is not taken for zero: the bracket goes on
    to its distance (here met, D/a large: the ordinary case)."""
    a, D, s_star = 0.05, 2.5e-5, 0.7
    A = D * math.exp(s_star / a)
    at = []

    def evaluate(s, full):
        f = A * math.exp(-s / a) - D
        at.append((s, f))
        return f, abs(f)

    lo, hi = s_star - 0.3, s_star + 0.5
    pts = [(lo, evaluate(lo, False)[0]), (hi, evaluate(hi, False)[0])]
    assert log_secant(evaluate, pts, lo, hi, -pts[1][1], 1e-3 * TOL, TOL, -1.0, 100)
    assert abs(at[-1][0] - s_star) <= 1e-3 * TOL + 4 * EPS * s_star


def _cycle(residual_full, residual_cheap):
    """A cycle map (signature of :func:`kickback.engine.periodic.one_cycle`) whose full and cheap
    integrations from any state end off by the given residuals (state units); it counts them."""
    calls = []

    def one_cycle(c, x, duty, frequency, rtol, keep=False, energies=True):
        calls.append("full" if energies else "cheap")
        x1 = x + (residual_full if energies else residual_cheap)
        e = np.zeros(1) if energies else None
        return x1, e, e, ("kept" if keep else None)

    return one_cycle, calls


SCALE = np.array([2.0, 50.0])  # [A] coil current, [V] node (demo data)
X = np.array([0.6, 29.3])


def test_full_cycle_at_the_noise_is_accepted():
    """Cheap cycle at 1e-12, full cycle 3e-9 of the node's scale from every state (followed once,
    still 3e-9): the difference of the two integrations is the noise, the full cycle within the
    tolerance plus twice it."""
    one_cycle, calls = _cycle(np.array([1e-13, 3e-9]) * SCALE, np.array([1e-13, 1e-12]) * SCALE)
    got = _closed(one_cycle, SimpleNamespace(), X, 0.5, 1e3, 1e-8, SCALE, TOL, 7)
    assert got is not None
    x, e_on, e_off, runner, resid, solves = got
    assert runner == "kept"
    np.testing.assert_allclose(x, X + np.array([1e-13, 3e-9]) * SCALE, rtol=0, atol=1e-15)  # followed once
    assert resid == pytest.approx(3e-9, rel=1e-6)  # the reported residual is the full cycle's
    assert calls == ["full", "full", "cheap"] and solves == 10


def test_full_cycle_followed_once_settles():
    """A state the map forgets, set by the full integration to 2e-8 off the cheap one's value:
    the full cycle from the full cycle's own end state is the fixed point (residual nil), reported
    without any allowance."""
    p_full = np.array([0.6, 29.3 + 2e-8 * SCALE[1]])
    calls = []

    def one_cycle(c, x, duty, frequency, rtol, keep=False, energies=True):
        calls.append("full" if energies else "cheap")
        x1 = np.array([x[0], p_full[1] if energies else 29.3])
        e = np.zeros(1) if energies else None
        return x1, e, e, ("kept" if keep else None)

    got = _closed(one_cycle, SimpleNamespace(), X, 0.5, 1e3, 1e-8, SCALE, TOL, 0)
    assert got is not None
    assert np.array_equal(got[0], p_full) and got[4] == 0.0 and calls == ["full", "full"]


def test_full_cycle_off_in_both_integrations_is_refused():
    """Both integrations agree at 3e-9: a residual, not noise — refused."""
    one_cycle, calls = _cycle(np.array([0.0, 3e-9]) * SCALE, np.array([0.0, 3e-9]) * SCALE)
    assert _closed(one_cycle, SimpleNamespace(), X, 0.5, 1e3, 1e-8, SCALE, TOL, 0) is None
    assert calls == ["full", "full", "cheap"]


def test_full_cycle_past_the_noise_cap_is_refused_at_once():
    """A residual above NOISE_CAP is a state still moving: refused without a second cycle."""
    one_cycle, calls = _cycle(np.array([0.0, 3 * NOISE_CAP]) * SCALE, np.zeros(2))
    assert _closed(one_cycle, SimpleNamespace(), X, 0.5, 1e3, 1e-8, SCALE, TOL, 0) is None
    assert calls == ["full"]


def test_full_cycle_within_the_tolerance_needs_no_second_cycle():
    one_cycle, calls = _cycle(np.array([1e-10, 5e-10]) * SCALE, np.zeros(2))
    got = _closed(one_cycle, SimpleNamespace(), X, 0.5, 1e3, 1e-8, SCALE, TOL, 2)
    assert got is not None and got[5] == 3 and calls == ["full"]


def test_newton_full_cycle_at_the_noise():
    """steady_state's rule (periodic_settle.full_at_noise): the cheap cycle from x ends 1e-12 off,
    the full one 3e-9 off in the node — accepted at the noise; both 3e-9 off — refused; the
    distance by the Newton step of a map contracting 0.5 per cycle (twice the residual) counts."""
    jm = np.diag([0.5, 0.5])  # Φ's Jacobian (demo): Newton's step is 2·f
    x1_full = X + np.array([0.0, 3e-9]) * SCALE
    x1_cheap = X + np.array([0.0, 1e-12]) * SCALE
    assert full_at_noise(X, x1_full, x1_cheap, SCALE, jm, jm, 1e-8, TOL)
    assert not full_at_noise(X, x1_full, x1_full, SCALE, jm, jm, 1e-8, TOL)
    # a map contracting 0.999 per cycle: the fixed point 1000 residuals away, 3e-6 > the noise
    slow = np.diag([0.999, 0.999])
    assert not full_at_noise(X, x1_full, x1_cheap, SCALE, slow, slow, 1e-8, TOL)
