"""Stiff test problems for the Radau IIA tests, compiled with radau5's njit decorators (cached).

Not a test module: tests/test_radau5.py and tests/test_radau5_failures.py import it.
"""

from __future__ import annotations

import numpy as np
from scipy.integrate import solve_ivp

from kickback.engine.radau5 import njit_events, njit_jac, njit_rhs

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


def py_call(fn, p):
    return lambda t, y: fn.py_func(t, y, p)


def scipy_radau(fn, jac, span, y0, p, rtol, atol, **kw):
    return solve_ivp(py_call(fn, p), span, y0, method="Radau", rtol=rtol, atol=atol, jac=py_call(jac, p), **kw)


@njit_rhs
def diode_node(t, y, p):  # a current source I charging a capacitance C shunted by a Shockley diode
    i_src, i_s, vt, c = p[0], p[1], p[2], p[3]
    return (i_src - i_s * np.expm1(y / vt)) / c


@njit_jac
def diode_node_jac(t, y, p):
    i_s, vt, c = p[1], p[2], p[3]
    return (-i_s / vt * np.exp(y / vt) / c).reshape((1, 1))
