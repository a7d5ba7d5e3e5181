"""kickback's own Radau IIA integrator (kickback.engine.radau5) against references outside it:
the method's published coefficients, scipy.linalg.expm, scipy's solve_ivp(method="Radau") run
tight on the same equations, closed-form crossing times, and the classical order of the method."""

from __future__ import annotations

import numpy as np
import pytest
from radau5_problems import (
    M_LIN,
    clamp,
    clamp_jac,
    crossings,
    linear,
    linear_jac,
    rober,
    rober_jac,
    scipy_radau,
    vdp,
    vdp_jac,
)
from scipy.linalg import expm

from kickback.engine import radau5_tableau as tab
from kickback.engine.radau5 import njit_events, solve


# ---------------------------------------------------------------- the method's coefficients
def test_tableau_matches_published_radau_iia_coefficients():
    # Hairer & Wanner II, Table IV.5.6 (Radau IIA of order 5), entries from memory
    s6 = np.sqrt(6.0)
    expected = np.array([[(88 - 7 * s6) / 360, (296 - 169 * s6) / 1800, (-2 + 3 * s6) / 225],
                         [(296 + 169 * s6) / 1800, (88 + 7 * s6) / 360, (-2 - 3 * s6) / 225],
                         [(16 - s6) / 36, (16 + s6) / 36, 1 / 9]])
    np.testing.assert_allclose(tab.A, expected, rtol=1e-13, atol=1e-15)
    # T^-1 A^-1 T is the real block form of the eigenvalues, used by the Newton iteration
    np.testing.assert_allclose(tab.TI @ tab.A_INV @ tab.T, tab.LAMBDA, atol=1e-12)
    # eigenvalues of A^-1 (Hairer & Wanner II §IV.8, from memory): 3.6378, 2.6811 ± 3.0504i
    assert tab.GAMMA == pytest.approx(3.637834252744496, rel=1e-12)
    assert (tab.ALPHA, tab.BETA) == pytest.approx((2.681082873627752, 3.050430199247411), rel=1e-12)


# ---------------------------------------------------------------- exact references
def test_linear_stiff_system_matches_matrix_exponential():
    # y' = M y with eigenvalues -1, -1e3, -1e6 (stiffness ratio 1e6): y(t) = expm(M t) y0 (scipy.linalg.expm)
    y0 = np.array([1.0, 1.0, 1.0])
    r = solve(linear, linear_jac, (0.0, 2.0), y0, M_LIN.ravel(), rtol=1e-8, atol=1e-12)
    assert r.status == 0, r.message
    for k in range(0, r.t.size, 7):
        np.testing.assert_allclose(r.y[:, k], expm(M_LIN * r.t[k]) @ y0, rtol=1e-6, atol=1e-11,
                                   err_msg=f"state at t = {r.t[k]}")
    # dense output (collocation polynomial) between the steps
    for tq in (3e-7, 1e-4, 0.37, 1.5):
        np.testing.assert_allclose(r.sol(tq), expm(M_LIN * tq) @ y0, rtol=1e-5, atol=1e-10, err_msg=f"t = {tq}")


@pytest.mark.parametrize("h", [0.2, 0.1, 0.05])
def test_fixed_step_error_is_fifth_order(h):
    # harmonic oscillator y'' = -y, exact y = cos t (closed form). Radau IIA with s = 3 stages has
    # classical order 2s - 1 = 5 (Hairer & Wanner II, Theorem IV.5.3 / Table IV.5.x, from memory):
    # halving h divides the global error by about 2^5 = 32
    M = np.array([[0.0, 1.0], [-1.0, 0.0]])

    def err(step):
        r = solve(linear, linear_jac, (0.0, 2.0), [1.0, 0.0], M.ravel(), rtol=1e-14, atol=1e-14, fixed_step=step)
        assert r.status == 0, r.message
        return abs(r.y[0, -1] - np.cos(2.0))

    order = np.log2(err(h) / err(h / 2))
    assert 4.6 < order < 5.5, f"observed order {order:.2f} at h = {h}"


# ---------------------------------------------------------------- stiff test problems vs scipy
def test_robertson_matches_scipy_radau_and_published_values():
    # Robertson's chemical kinetics (Hairer & Wanner II §IV.1, §IV.10), t = 40
    y0 = [1.0, 0.0, 0.0]
    ref = scipy_radau(rober, rober_jac, (0.0, 40.0), y0, np.zeros(0), 1e-10, 1e-14)  # scipy, tight
    r = solve(rober, rober_jac, (0.0, 40.0), y0, rtol=1e-10, atol=1e-14)
    assert r.status == 0, r.message
    np.testing.assert_allclose(r.y[:, -1], ref.y[:, -1], rtol=1e-8, err_msg="vs scipy Radau")
    # reference values at t = 40 (Hairer & Wanner's test set, from memory)
    np.testing.assert_allclose(r.y[:, -1], [0.7158270687, 0.9185534764e-5, 0.2841637457], rtol=2e-9)
    assert r.y[:, -1].sum() == pytest.approx(1.0, abs=1e-12)  # mass conservation, exact for the ODE


def test_van_der_pol_matches_scipy_radau_and_published_values():
    # y1' = y2, eps y2' = (1 - y1^2) y2 - y1, y(0) = (2, 0), t = 2
    ref = scipy_radau(vdp, vdp_jac, (0.0, 2.0), [2.0, 0.0], np.array([1e-3]), 1e-10, 1e-10)  # scipy, tight
    r = solve(vdp, vdp_jac, (0.0, 2.0), [2.0, 0.0], [1e-3], rtol=1e-10, atol=1e-10)
    assert r.status == 0, r.message
    np.testing.assert_allclose(r.y[:, -1], ref.y[:, -1], rtol=1e-7, err_msg="eps = 1e-3 vs scipy Radau")
    # eps = 1e-6 (mu = 1/sqrt(eps) = 1e3 in y'' - mu (1 - y^2) y' + y = 0, time scaled by mu):
    # Hairer & Wanner II §IV.10 reference solution at t = 2, from memory:
    # y1 = 1.706167732170483, y2 = -0.8928097010248125
    r = solve(vdp, vdp_jac, (0.0, 2.0), [2.0, 0.0], [1e-6], rtol=1e-10, atol=1e-10)
    assert r.status == 0, r.message
    np.testing.assert_allclose(r.y[:, -1], [1.706167732170483, -0.8928097010248125], rtol=1e-7)


#: reference end states (from memory, checked against a tight scipy solve in the tests above)
_REFERENCE_END = {"robertson": np.array([0.7158270687, 0.9185534764e-5, 0.2841637457]),
                  "van_der_pol": np.array([1.706167732170483, -0.8928097010248125])}


@pytest.mark.parametrize("name", ["robertson", "van_der_pol"])
@pytest.mark.parametrize("rtol", [1e-4, 1e-6, 1e-8], ids=lambda v: f"rtol={v:g}")
def test_step_count_comparable_to_scipy_radau(name, rtol):
    # the same method with the same controller family: within 25 % of scipy's accepted steps
    # (measured: -10 % … +5 %), at the same accuracy (end-state error at most 10× scipy's, in
    # units of the tolerance, against the reference end states)
    f, jac, span, y0, p = {"robertson": (rober, rober_jac, (0.0, 40.0), [1.0, 0.0, 0.0], np.zeros(0)),
                           "van_der_pol": (vdp, vdp_jac, (0.0, 2.0), [2.0, 0.0], np.array([1e-6]))}[name]
    atol = rtol * 1e-3
    s = scipy_radau(f, jac, span, y0, p, rtol, atol)
    r = solve(f, jac, span, y0, p, rtol=rtol, atol=atol)
    assert r.status == 0, r.message
    ratio = r.counts["n_accepted"] / (len(s.t) - 1)
    assert 0.75 < ratio < 1.25, f"{r.counts['n_accepted']} steps vs scipy {len(s.t) - 1}"
    exact = _REFERENCE_END[name]
    sc = atol + rtol * np.abs(exact)
    e_ours, e_scipy = np.max(np.abs(r.y[:, -1] - exact) / sc), np.max(np.abs(s.y[:, -1] - exact) / sc)
    assert e_ours <= 10 * max(e_scipy, 0.1), f"error {e_ours:.3g} vs scipy {e_scipy:.3g} (tolerance units)"


# ---------------------------------------------------------------- events
def test_terminal_event_at_closed_form_crossing():
    # y' = -y / tau: y = exp(-t / tau) falls through 0.1 at t = tau ln 10 (closed form)
    tau = 2e-3
    M = np.array([[-1.0 / tau]])
    p = np.concatenate([M.ravel(), [0.1]])
    r = solve(linear, linear_jac, (0.0, 1.0), [1.0], p, rtol=1e-8, atol=1e-12, events=crossings,
              directions=[-1, 0], terminal=[1, 0])
    assert r.status == 1, r.message
    assert r.t_events[0] == pytest.approx([tau * np.log(10.0)], rel=1e-8)
    assert r.t[-1] == pytest.approx(tau * np.log(10.0), rel=1e-8)
    assert r.y[0, -1] == pytest.approx(0.1, rel=1e-7)
    assert r.t_events[1].size == 0  # y never reaches 0


def test_events_with_direction_on_an_oscillation():
    # y'' = -y, y = cos t: rising zeros at 3π/2 + 2kπ, falling at π/2 + 2kπ (closed form)
    M = np.array([[0.0, 1.0], [-1.0, 0.0]])
    p = np.concatenate([M.ravel(), [-2.0]])  # event 0: y0 + 2 never crosses
    r = solve(linear, linear_jac, (0.0, 20.0), [1.0, 0.0], p, rtol=1e-9, atol=1e-12, events=crossings,
              directions=[0, 1], terminal=[0, 0])
    assert r.status == 0, r.message
    expected = [1.5 * np.pi + 2 * k * np.pi for k in range(3)]
    np.testing.assert_allclose(r.t_events[1], expected, rtol=1e-8)
    np.testing.assert_allclose(r.y_events[1][:, 0], 0.0, atol=1e-9)
    assert r.t_events[0].size == 0


# ---------------------------------------------------------------- the residual check
def _clamp_reference(p, t):
    """Closed form of the piecewise-linear clamp problem: the matrix exponential on each side of
    the clamp threshold (mpmath at 40 digits while clamped — the clamped system is too stiff,
    ‖A·t‖ ~ 1e12, for a double-precision exponential — scipy.linalg.expm for the damped LC ring),
    the crossing time by brentq."""
    import mpmath
    from scipy.optimize import brentq

    L, C, Vc, g, Rp = p
    mpmath.mp.dps = 40
    a1 = mpmath.matrix([[0, -1 / mpmath.mpf(L), 0], [1 / mpmath.mpf(C), -(1 / mpmath.mpf(Rp) + g) / mpmath.mpf(C),
                                                      g * mpmath.mpf(Vc) / mpmath.mpf(C)], [0, 0, 0]])
    x0 = mpmath.matrix([1, Vc, 1])

    def on(tt):
        x = mpmath.expm(a1 * mpmath.mpf(tt)) * x0
        return np.array([float(x[0]), float(x[1])]), float(x[1] - Vc)

    t_off = brentq(lambda tt: on(tt)[1], 1e-3, 2.0, xtol=1e-15, rtol=1e-15)
    x_off = on(t_off)[0]
    a2 = np.array([[0.0, -1.0 / L], [1.0 / C, -1.0 / (Rp * C)]])
    return np.array([on(tt)[0] if tt <= t_off else expm(a2 * (tt - t_off)) @ x_off for tt in t]).T


def test_residual_check_rejects_unconverged_newton_at_a_clamp_switching_off():
    # a coil current charging a node held by a hard clamp (conductance g = 1e6 S, 1 µF): when the
    # current reverses the clamp lets go and the node rings. The Jacobian of the clamped state
    # (-g/C = -1e12 /s) damps every Newton correction, so an iteration with it "converges" on
    # the clamped trajectory after the clamp has let go. Reference: the closed form above.
    p = np.array([1.0, 1e-6, 1.0, 1e6, 1e4])
    kw = dict(rtol=1e-6, atol=1e-9)
    r = solve(clamp, clamp_jac, (0.0, 1.5), [1.0, 1.0], p, **kw)
    assert r.status == 0, r.message
    assert r.counts["n_residual_reject"] >= 1
    k = np.unique(np.linspace(0, r.t.size - 1, 40).astype(int))  # 40 of the steps (mpmath is slow)
    err = np.max(np.abs(r.y[:, k] - _clamp_reference(p, r.t[k])), axis=1)
    assert err[0] < 1e-5 and err[1] < 1e-4, f"max error (i, v) = {err}"
    # the same run with the check off accepts a wrong trajectory: the case really needs the check
    r0 = solve(clamp, clamp_jac, (0.0, 1.5), [1.0, 1.0], p, residual_check=0, **kw)
    assert r0.counts["n_residual_reject"] == 0
    k = np.unique(np.linspace(0, r0.t.size - 1, 40).astype(int))
    assert np.max(np.abs(r0.y[:, k] - _clamp_reference(p, r0.t[k]))) > 1e-2
    # the kept-Jacobian check alone (what radau_check.py adds to scipy) fires on this case too
    r1 = solve(clamp, clamp_jac, (0.0, 1.5), [1.0, 1.0], p, residual_check=1, rtol=1e-4, atol=1e-7)
    assert r1.counts["n_residual_reject"] >= 1


@pytest.mark.parametrize("seed", [1, 2, 3, 4])
def test_random_stiff_oscillatory_systems_match_matrix_exponential(seed):
    # seeded random 4×4 systems with a stiff complex pair (|lambda| ~ 1e3…1e5, lightly damped) and
    # slow real modes, in a random basis: y(t) = expm(M t) y0 (scipy.linalg.expm)
    rng = np.random.default_rng(seed)
    w = 10 ** rng.uniform(3, 5)
    blocks = np.zeros((4, 4))
    blocks[:2, :2] = [[-0.05 * w, w], [-w, -0.05 * w]]
    blocks[2, 2], blocks[3, 3] = -rng.uniform(0.5, 2.0), -rng.uniform(5.0, 50.0)
    S = rng.normal(size=(4, 4)) + 3 * np.eye(4)
    M = S @ blocks @ np.linalg.inv(S)
    y0 = rng.normal(size=4)
    r = solve(linear, linear_jac, (0.0, 1.0), y0, M.ravel(), rtol=1e-8, atol=1e-10)
    assert r.status == 0, r.message
    for tq in (1e-5, 3e-3, 0.25, 1.0):
        np.testing.assert_allclose(r.sol(tq), expm(M * tq) @ y0, rtol=1e-5, atol=1e-7, err_msg=f"t = {tq}")


def test_event_zero_at_the_start_is_not_a_crossing_and_the_earliest_terminal_event_wins():
    # y = exp(-t): event 0 is y - 1 (zero at t = 0, then negative: not a crossing); events 1 and 2
    # (y - 0.5 and y - 0.4, both terminal) fall in the same long step: the run stops at ln 2
    # (closed form) and the later zero is not recorded
    @njit_events
    def levels(t, y, p):
        return np.array([y[0] - 1.0, y[0] - 0.5, y[0] - 0.4])

    r = solve(linear, linear_jac, (0.0, 5.0), [1.0], [-1.0], rtol=1e-3, atol=1e-6, first_step=1.0,
              events=levels, directions=[0, -1, -1], terminal=[1, 1, 1])
    assert r.status == 1, r.message
    assert r.t_events[0].size == 0 and r.t_events[2].size == 0
    # time to the solution's accuracy at rtol 1e-3; the state there is the level, to the root tolerance
    assert r.t_events[1] == pytest.approx([np.log(2.0)], rel=1e-4)
    assert r.t[-1] == r.t_events[1][0] and r.y[0, -1] == pytest.approx(0.5, abs=1e-12)
    assert r.counts["n_accepted"] <= 2, "both zeros were meant to fall in one long step"
