"""The first shooting method, kept as a reference: Newton's method with a fresh finite-difference
Jacobian (``nx + 1`` cycle solves per step), every cycle integrated step by step.

:func:`kickback.engine.periodic.steady_state` is checked against it (tests, and
``python benchmarks/bench_pwm.py``, which times both in one run).

References
----------
T. J. Aprille and T. N. Trick, "Steady-state analysis of nonlinear circuits with periodic
inputs", Proc. IEEE 60(1), 1972 (shooting on the one-period map).
"""

from __future__ import annotations

import math

import numpy as np

from kickback.circuit import Circuit
from kickback.engine.detailed import DEFAULT_RTOL
from kickback.engine.periodic import (
    CYCLE_RTOL,
    MAX_NEWTON,
    STEADY_TOL,
    SteadyState,
    brute_force_estimate,
    one_cycle,
    scales,
    steady_waveforms,
)
from kickback.errors import SolverError


def reference_steady_state(c: Circuit, duty: float, frequency: float, *, rtol: float | None = None) -> SteadyState:
    """Periodic steady state by plain Newton shooting (finite-difference Jacobian at every step),
    every phase of every cycle integrated by Radau.

    Raises
    ------
    SolverError — Newton did not converge; the message gives the residual reached.
    """
    rtol = min(DEFAULT_RTOL if rtol is None else rtol, CYCLE_RTOL)
    scale = scales(c)
    x = naive_guess(c, duty)
    solves = 0
    resid = math.inf
    jm = None

    def cycle(x0):
        return one_cycle(c, x0, duty, frequency, rtol, fast=False)[0]

    for _ in range(MAX_NEWTON):
        x1 = cycle(x)
        solves += 1
        f = x1 - x
        resid = float(np.max(np.abs(f) / scale))
        if resid <= STEADY_TOL:
            break
        jm = np.empty((c.ie, c.ie))
        for j in range(c.ie):
            h = 1e-6 * scale[j]
            xp = x.copy()
            xp[j] += h
            jm[:, j] = (cycle(xp) - x1) / h
            solves += 1
        x = x - np.linalg.solve(jm - np.eye(c.ie), f)
    else:
        raise SolverError(f"the periodic steady state did not converge at duty {duty:g} "
                          f"(relative residual {resid:.1e} after {MAX_NEWTON} Newton steps)")
    if jm is None:
        jm = np.empty((c.ie, c.ie))
        for j in range(c.ie):
            xp = x.copy()
            xp[j] += 1e-6 * scale[j]
            jm[:, j] = (cycle(xp) - x) / (1e-6 * scale[j])
            solves += 1
    rho, brute = brute_force_estimate(c, x, jm)
    _, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=True, fast=False)
    solves += 1
    w = steady_waveforms(c, runner, rtol, "detailed, periodic steady state (reference shooting)")
    return SteadyState(duty, frequency, x, w, e_on, e_off, solves, rho, brute, resid)


def naive_guess(c: Circuit, duty: float) -> np.ndarray:
    """The on-state scaled by the duty, capacitors at their on-state."""
    y = c.initial_state()
    x = y[: c.ie].copy()
    x[0] = c.coil_state(duty * c.i0)
    return x
