"""Growable storage, event root-finding and the starting step of the Radau IIA integrator
(numba-compiled helpers; plain Python through ``.py_func``)."""

from __future__ import annotations

import numpy as np

from kickback.engine.radau5_jit import jit

EPS = 2.220446049250313e-16


@jit
def grow1(a, n_new):
    out = np.empty(n_new, a.dtype)
    out[: a.shape[0]] = a
    return out


@jit
def grow2(a, n_new):
    out = np.empty((n_new, a.shape[1]), a.dtype)
    out[: a.shape[0]] = a
    return out


@jit
def grow3(a, n_new):
    out = np.empty((n_new, a.shape[1], a.shape[2]), a.dtype)
    out[: a.shape[0]] = a
    return out


@jit
def first_step_guess(y0, f0, f1, h0, scale, order):
    """Starting step from two slopes (Hairer, Nørsett & Wanner, Solving ODEs I, §II.4).

    ``f1`` is the slope at (t0 + h0, y0 + h0·f0); the step makes the local error of a method of
    error order ``order`` about 0.01 of the tolerance.
    """
    n = y0.size
    d1 = 0.0
    d2 = 0.0
    for i in range(n):
        d1 += (f0[i] / scale[i]) ** 2
        d2 += ((f1[i] - f0[i]) / scale[i]) ** 2
    d1 = np.sqrt(d1 / n)
    d2 = np.sqrt(d2 / n) / h0
    big = max(d1, d2)
    if big <= 1e-15:
        h1 = max(1e-6, h0 * 1e-3)
    else:
        h1 = (0.01 / big) ** (1.0 / (order + 1.0))
    return min(100.0 * h0, h1)


@jit
def first_trial(y0, f0, scale, span):
    """The explicit-Euler trial step h0 of the starting-step rule (same reference)."""
    n = y0.size
    d0 = 0.0
    d1 = 0.0
    for i in range(n):
        d0 += (y0[i] / scale[i]) ** 2
        d1 += (f0[i] / scale[i]) ** 2
    d0 = np.sqrt(d0 / n)
    d1 = np.sqrt(d1 / n)
    h0 = 1e-6 * span if (d0 < 1e-5 or d1 < 1e-5) else 0.01 * d0 / d1
    return min(h0, span)


@jit
def bracket_step(g_a, g_b, a, b):
    """One Illinois-type false-position point inside (a, b), bisection when it would not move."""
    if g_b != g_a:
        m = b - g_b * (b - a) / (g_b - g_a)
        if a < m < b:
            return m
    return 0.5 * (a + b)
