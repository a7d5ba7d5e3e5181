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
