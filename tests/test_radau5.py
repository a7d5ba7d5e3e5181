"""kickback's own Radau IIA integrator (kickback.engine.radau5) against references outside it:
the method's published coefficients, scipy.linalg.expm, scipy's solve_ivp(method="Radau") run
tight on the same equations, closed-form crossing times, and the classical order of the method."""

from __future__ import annotations

import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.linalg import expm

from kickback.engine import radau5_tableau as tab
from kickback.engine.radau5 import IntegratorArgumentError, njit_events, njit_jac, njit_rhs, solve

# ---------------------------------------------------------------- test problems (njit, cached)
M_LIN = np.array([[-1.0, 0.5, 0.0], [0.0, -1e3, 2e2], [0.0, 0.0, -1e6]])


@njit_rhs
def linear(t, y, p):
    n = y.size
    out = np.zeros(n)
    for i in range(n):
        for j in range(n):
            out[i] += p[i * n + j] * y[j]
    return out


@njit_jac
def linear_jac(t, y, p):
    n = y.size
    return p[: n * n].copy().reshape((n, n))


@njit_rhs
def rober(t, y, p):
    out = np.empty(3)
    out[0] = -0.04 * y[0] + 1e4 * y[1] * y[2]
    out[2] = 3e7 * y[1] ** 2
    out[1] = -out[0] - out[2]
    return out


@njit_jac
def rober_jac(t, y, p):
    J = np.zeros((3, 3))
    J[0, 0], J[0, 1], J[0, 2] = -0.04, 1e4 * y[2], 1e4 * y[1]
    J[2, 1] = 6e7 * y[1]
    J[1, 0], J[1, 1], J[1, 2] = 0.04, -1e4 * y[2] - 6e7 * y[1], -1e4 * y[1]
    return J


@njit_rhs
def vdp(t, y, p):  # Van der Pol in the scaled form y1' = y2, eps y2' = (1 - y1^2) y2 - y1
    out = np.empty(2)
    out[0] = y[1]
    out[1] = ((1.0 - y[0] ** 2) * y[1] - y[0]) / p[0]
    return out


@njit_jac
def vdp_jac(t, y, p):
    J = np.empty((2, 2))
    J[0, 0], J[0, 1] = 0.0, 1.0
    J[1, 0], J[1, 1] = (-2.0 * y[0] * y[1] - 1.0) / p[0], (1.0 - y[0] ** 2) / p[0]
    return J


@njit_rhs
def clamp(t, y, p):  # coil current y0 into a node y1 with capacitance, a leak and a hard clamp
    L, C, Vc, g, Rp = p[0], p[1], p[2], p[3], p[4]
    out = np.empty(2)
    out[0] = -y[1] / L
    out[1] = (y[0] - y[1] / Rp - g * max(y[1] - Vc, 0.0)) / C
    return out


@njit_jac
def clamp_jac(t, y, p):
    L, C, Vc, g, Rp = p[0], p[1], p[2], p[3], p[4]
    J = np.zeros((2, 2))
    J[0, 1] = -1.0 / L
    J[1, 0] = 1.0 / C
    J[1, 1] = (-1.0 / Rp - (g if y[1] > Vc else 0.0)) / C
    return J


@njit_events
def crossings(t, y, p):  # y0 - 0.1 and y0 itself
    out = np.empty(2)
    out[0] = y[0] - p[1]
    out[1] = y[0]
    return out


@njit_rhs
def blowup(t, y, p):  # y' = y^2: y = 1/(1 - t) leaves every bound at t = 1
    return y * y


@njit_jac
def blowup_jac(t, y, p):
    return (2.0 * y).reshape((1, 1))


def _py(fn, p):
    return lambda t, y: fn.py_func(t, y, p)


def _scipy(fn, jac, span, y0, p, rtol, atol, **kw):
    return solve_ivp(_py(fn, p), span, y0, method="Radau", rtol=rtol, atol=atol, jac=_py(jac, p), **kw)


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
    ref = _scipy(rober, rober_jac, (0.0, 40.0), y0, np.zeros(0), 1e-10, 1e-14)  # scipy, tight
    r = solve(rober, rober_jac, (0.0, 40.0), y0, rtol=1e-10, atol=1e-14)
    assert r.status == 0, r.message
    np.testing.assert_allclose(r.y[:, -1], ref.y[:, -1], rtol=1e-8, err_msg="vs scipy Radau")
    # reference values at t = 40 (Hairer & Wanner's test set, from memory)
    np.testing.assert_allclose(r.y[:, -1], [0.7158270687, 0.9185534764e-5, 0.2841637457], rtol=2e-9)
    assert r.y[:, -1].sum() == pytest.approx(1.0, abs=1e-12)  # mass conservation, exact for the ODE


def test_van_der_pol_matches_scipy_radau_and_published_values():
    # y1' = y2, eps y2' = (1 - y1^2) y2 - y1, y(0) = (2, 0), t = 2
    ref = _scipy(vdp, vdp_jac, (0.0, 2.0), [2.0, 0.0], np.array([1e-3]), 1e-10, 1e-10)  # scipy, tight
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
    s = _scipy(f, jac, span, y0, p, rtol, atol)
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


# ---------------------------------------------------------------- failures say why
def test_blow_up_ends_with_a_reason_not_a_nan():
    # y' = y^2, y(0) = 1: y = 1/(1 - t) is unbounded at t = 1 (closed form); asked to reach t = 2
    r = solve(blowup, blowup_jac, (0.0, 2.0), [1.0], rtol=1e-6, atol=1e-9)
    assert r.status < 0
    assert "step size underflow" in r.message and "unbounded" in r.message, r.message
    assert np.all(np.isfinite(r.y)), "a failed run keeps only finite accepted steps"
    # it stops at the singularity, with y huge (the position of the pole carries the global error)
    assert abs(r.t[-1] - 1.0) < 1e-6 and r.y[0, -1] > 1e6, f"stopped at t = {r.t[-1]}, y = {r.y[0, -1]}"


def test_too_many_steps_is_reported():
    r = solve(vdp, vdp_jac, (0.0, 2.0), [2.0, 0.0], [1e-6], rtol=1e-6, atol=1e-6, max_steps=20)
    assert r.status == -1 and "too many steps" in r.message and "20 accepted" in r.message
    assert r.counts["n_accepted"] == 20


def test_bad_start_and_bad_arguments():
    r = solve(blowup, blowup_jac, (0.0, 1.0), [np.finfo(float).max])  # y^2 overflows to inf at once
    assert r.status == -3 and "not finite" in r.message
    with pytest.raises(IntegratorArgumentError, match="t_span"):
        solve(blowup, blowup_jac, (1.0, 0.0), [1.0])
    with pytest.raises(IntegratorArgumentError, match="rtol"):
        solve(blowup, blowup_jac, (0.0, 1.0), [1.0], rtol=0.0)
    with pytest.raises(IntegratorArgumentError, match="one entry per event"):
        solve(linear, linear_jac, (0.0, 1.0), [1.0], [-1.0, 0.1], events=crossings, directions=[1], terminal=[0, 0])


def test_max_step_and_first_step_are_kept():
    M = np.array([[-1.0]])
    r = solve(linear, linear_jac, (0.0, 1.0), [1.0], M.ravel(), rtol=1e-6, atol=1e-9, first_step=1e-5,
              max_step=0.05)
    assert r.status == 0, r.message
    assert r.t[1] - r.t[0] == pytest.approx(1e-5)
    assert np.max(np.diff(r.t)) <= 0.05 * (1 + 1e-12)
    assert r.y[0, -1] == pytest.approx(np.exp(-1.0), rel=1e-6)  # closed form


# ---------------------------------------------------------------- the uncompiled path, the cache
def test_plain_python_path_runs_the_same_algorithm():
    kw = dict(rtol=1e-6, atol=1e-9)
    a = solve(rober, rober_jac, (0.0, 1.0), [1.0, 0.0, 0.0], **kw)
    b = solve(rober, rober_jac, (0.0, 1.0), [1.0, 0.0, 0.0], compiled=False, **kw)
    assert a.counts == b.counts
    np.testing.assert_allclose(b.y, a.y, rtol=1e-12, atol=1e-18)


def test_works_where_no_cache_folder_is_writable(tmp_path):
    # NUMBA_CACHE_DIR below a plain file cannot be created (not even by root); with only that
    # locator allowed numba refuses cache=True, and the switch compiles uncached instead
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    env = dict(os.environ, NUMBA_CACHE_DIR=str(blocker / "cache"),
               NUMBA_CACHE_LOCATOR_CLASSES="UserProvidedCacheLocator")
    code = textwrap.dedent("""
        import numpy as np
        from kickback.engine import radau5_jit
        @radau5_jit.jit
        def twice(x):
            return 2.0 * x
        assert twice(np.ones(2))[0] == 2.0
        assert radau5_jit.CACHE_UNAVAILABLE
        print("ok")
    """)
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120,
                         cwd=os.path.dirname(os.path.dirname(__file__)))
    assert out.returncode == 0 and out.stdout.strip() == "ok", out.stderr


def test_wrong_output_shapes_are_refused_before_the_compiled_loop():
    # the compiled loop does not check bounds: a Jacobian of the wrong size must never reach it
    with pytest.raises(IntegratorArgumentError, match=r"jac\(t0, y0, params\) has shape \(3, 3\), expected \(2, 2\)"):
        solve(vdp, rober_jac, (0.0, 1.0), [1.0, 1.0], [1.0])
    with pytest.raises(IntegratorArgumentError, match=r"jac\(t0, y0, params\) failed"):
        solve(blowup, blowup_jac, (0.0, 1.0), [1.0, 1.0])
    with pytest.raises(IntegratorArgumentError, match="events"):
        solve(linear, linear_jac, (0.0, 1.0), [1.0], [-1.0, 0.1], events=crossings, directions=[1, 1, 1],
              terminal=[0, 0, 0])
    with pytest.raises(IntegratorArgumentError, match="atol"):
        solve(blowup, blowup_jac, (0.0, 1.0), [1.0], atol=0.0)
    with pytest.raises(IntegratorArgumentError, match="rhs is a plain Python function"):
        solve(blowup.py_func, blowup_jac, (0.0, 1.0), [1.0])


@njit_rhs
def diode_node(t, y, p):  # a current source I charging a capacitance C shunted by a Shockley diode
    i_src, i_s, vt, c = p[0], p[1], p[2], p[3]
    return (i_src - i_s * np.expm1(y / vt)) / c


@njit_jac
def diode_node_jac(t, y, p):
    i_s, vt, c = p[1], p[2], p[3]
    return (-i_s / vt * np.exp(y / vt) / c).reshape((1, 1))


def test_exponential_law_overflowing_inside_newton_is_handled():
    # C v' = I - Is (exp(v/VT) - 1), v(0) = 0. With w = exp(-v/VT): w' = -(a w - b)/VT, a = (I + Is)/C,
    # b = Is/C, so v = -VT ln(b/a + (1 - b/a) exp(-a t/VT)) (closed form). A first step 4000 times the
    # time constant makes the Newton iterate jump to volts where exp(v/VT) overflows to inf: the
    # step must shrink, with no warning and no NaN.
    i_src, i_s, vt, c = 1e-3, 1e-14, 0.025693, 1e-9
    r = solve(diode_node, diode_node_jac, (0.0, 1e-4), [0.0], [i_src, i_s, vt, c], rtol=1e-8, atol=1e-12,
              first_step=1e-4)
    assert r.status == 0, r.message
    a, b = (i_src + i_s) / c, i_s / c
    exact = -vt * np.log(b / a + (1 - b / a) * np.exp(-a * r.t / vt))
    np.testing.assert_allclose(r.y[0], exact, rtol=1e-6, atol=1e-10)
    assert r.counts["n_newton_fail"] >= 1


def test_newton_divergence_is_named_when_it_ends_a_fixed_step_run():
    # the diode node of the test above at a fixed step 4000 times its time constant: the Newton
    # iteration cannot converge and there is no step control to help — the run stops and says so
    r = solve(diode_node, diode_node_jac, (0.0, 1e-4), [0.0], [1e-3, 1e-14, 0.025693, 1e-9], fixed_step=1e-4)
    assert r.status == -4, r.message
    assert "Newton iteration did not converge" in r.message and "non-finite" in r.message, r.message
    assert np.all(np.isfinite(r.y))


def test_numba_disabled_runs_everything_as_plain_python():
    # NUMBA_DISABLE_JIT=1 (numba's own debugging switch): the same counts as the compiled run
    code = textwrap.dedent("""
        import numpy as np
        from kickback.engine.radau5 import njit_jac, njit_rhs, solve
        @njit_rhs
        def f(t, y, p):
            return np.array([-0.04 * y[0] + 1e4 * y[1] * y[2], 0.04 * y[0] - 1e4 * y[1] * y[2] - 3e7 * y[1] ** 2,
                             3e7 * y[1] ** 2])
        @njit_jac
        def jac(t, y, p):
            return np.array([[-0.04, 1e4 * y[2], 1e4 * y[1]], [0.04, -1e4 * y[2] - 6e7 * y[1], -1e4 * y[1]],
                             [0.0, 6e7 * y[1], 0.0]])
        assert not hasattr(f, "py_func")  # really plain Python
        r = solve(f, jac, (0.0, 1.0), [1.0, 0.0, 0.0], rtol=1e-6, atol=1e-9)
        print(r.counts["n_accepted"], repr(float(r.y[0, -1])))
    """)
    env = dict(os.environ, NUMBA_DISABLE_JIT="1")
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=300,
                         cwd=os.path.dirname(os.path.dirname(__file__)))
    assert out.returncode == 0, out.stderr
    steps, y_end = out.stdout.split()
    r = solve(rober, rober_jac, (0.0, 1.0), [1.0, 0.0, 0.0], rtol=1e-6, atol=1e-9)
    assert int(steps) == r.counts["n_accepted"]
    assert float(y_end) == pytest.approx(r.y[0, -1], rel=1e-12)


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
