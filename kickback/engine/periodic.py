"""Repetitive switching: one switching cycle of the circuit, and its periodic steady state by
shooting (Newton's method on the one-cycle map).

A cycle starts at turn-on (the switch conducts by its on-state law for ``D·T``), then the
switch turns off (the channel current falls over the fall time) and stays off to ``T``. The
dynamic states at the start of the cycle — coil current (or flux), node and snubber-capacitor
voltages — are the unknowns of the fixed point ``x = Φ(x)``.

References
----------
T. J. Aprille and T. N. Trick, "Steady-state analysis of nonlinear circuits with periodic
inputs", Proc. IEEE 60(1), 1972 (shooting on the one-period map).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kickback.circuit import Circuit
from kickback.engine.detailed import DEFAULT_RTOL, EDGE_STEPS, PhaseRunner, Waveforms
from kickback.errors import SolverError

STEADY_TOL = 1e-9  # relative change of the cycle-start state at the fixed point
MAX_NEWTON = 25
CYCLE_RTOL = 1e-8


@dataclass(frozen=True)
class SteadyState:
    """The periodic steady state at one duty.

    Attributes
    ----------
    x : ndarray — dynamic states at the start of the cycle (turn-on)
    waveforms : Waveforms — one steady-state cycle, t from 0 (turn-on) to the period
    energies_on / energies_off : ndarray — energy integrals [J] over the on and off parts
    cycle_solves : int — one-cycle integrations the shooting needed
    contraction : float — largest |eigenvalue| of the one-cycle map at the fixed point
    brute_force_cycles : int or None — cycles plain repetition from zero current would need to
        come within the same tolerance (from the contraction; None when it does not contract)
    residual : float — relative fixed-point residual reached
    """

    duty: float
    frequency: float
    x: np.ndarray
    waveforms: Waveforms
    energies_on: np.ndarray
    energies_off: np.ndarray
    cycle_solves: int
    contraction: float
    brute_force_cycles: int | None
    residual: float


def _scales(c: Circuit) -> np.ndarray:
    s = np.empty(c.ie)
    s[0] = abs(c.coil_state(c.i0))
    s[1:] = c.v_scale
    if c.mech:
        s[c.iw] = max(abs(c.on_speed()), 1.0)
    return s


def one_cycle(c: Circuit, x0: np.ndarray, duty: float, frequency: float, rtol: float, keep: bool = False):
    """Integrate one cycle from the dynamic state ``x0``; returns (x1, E_on, E_off, runner)."""
    period = 1.0 / frequency
    t_on = duty * period
    y = np.zeros(c.n_states)
    y[: c.ie] = x0
    c.conducting, c.t_turnoff = True, t_on
    try:
        runner = PhaseRunner(c, rtol, y, 0.0)
        runner.run("on", t_on, [])
        e_on = runner.y[c.ie:].copy()
        # turn-off: the channel current falls from what it carries now
        v = float(runner.y[1]) if c.capacitive else c.node_voltage(t_on, runner.y)
        c.i_on = c.split_currents(t_on, v, runner.y)[0] - c.g_leak * v
        c.conducting = False
        tf = c.switch.fall_time
        if tf > 0:
            t_edge = min(t_on + tf, period)
            runner.run("edge", t_edge, [], first_step=tf / 1000, max_step=tf / EDGE_STEPS)
        if runner.t < period:
            runner.run("off", period, [], first_step=max(tf, period * 1e-9) / 1000)
        e_off = runner.y[c.ie:] - e_on
        return runner.y[: c.ie].copy(), e_on, e_off, (runner if keep else None)
    finally:
        c.conducting, c.t_turnoff, c.pin = False, 0.0, None


def steady_state(c: Circuit, duty: float, frequency: float, *, rtol: float | None = None,
                 x_guess: np.ndarray | None = None) -> SteadyState:
    """Periodic steady state by Newton's method on the one-cycle map (finite-difference Jacobian).

    Raises
    ------
    SolverError — Newton did not converge; the message gives the residual reached.
    """
    # cycles tighter than a single turn-off: the fixed point is wanted to 1e-9 and each Newton
    # step differences two cycle solves
    rtol = min(DEFAULT_RTOL if rtol is None else rtol, CYCLE_RTOL)
    scale = _scales(c)
    x = np.array(x_guess if x_guess is not None else _guess(c, duty), dtype=float)
    solves = 0
    resid = math.inf
    jm = None
    for _ in range(MAX_NEWTON):
        x1 = one_cycle(c, x, duty, frequency, rtol)[0]
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
            jm[:, j] = (one_cycle(c, xp, duty, frequency, rtol)[0] - x1) / h
            solves += 1
        x = x - np.linalg.solve(jm - np.eye(c.ie), f)
    else:
        raise SolverError(f"the periodic steady state did not converge at duty {duty:g} "
                          f"(relative residual {resid:.1e} after {MAX_NEWTON} Newton steps)")
    if jm is None:  # converged at the first guess: estimate the map's Jacobian for the contraction
        jm = np.empty((c.ie, c.ie))
        for j in range(c.ie):
            xp = x.copy()
            xp[j] += 1e-6 * scale[j]
            jm[:, j] = (one_cycle(c, xp, duty, frequency, rtol)[0] - x) / (1e-6 * scale[j])
            solves += 1
    rho = float(np.max(np.abs(np.linalg.eigvals(jm))))
    start_err = float(np.max(np.abs(x) / scale))  # from zero current and discharged capacitors
    brute = None
    if 0 < rho < 1 and start_err > STEADY_TOL:
        brute = int(math.ceil(math.log(STEADY_TOL / start_err) / math.log(rho)))
    x_end, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=True)
    solves += 1
    from kickback.engine.sampling import sample_run

    w = sample_run(c, runner.phases, {"10%": None, "1%": None, "zero": None}, runner.peaks, False, rtol,
                   runner.calls, 6)
    w.engine = "detailed, periodic steady state"
    return SteadyState(duty, frequency, x, w, e_on, e_off, solves, rho, brute, resid)


def _guess(c: Circuit, duty: float) -> np.ndarray:
    """Start: the on-state scaled by the duty (an averaged model), capacitors at their on-state."""
    y = c.initial_state()
    x = y[: c.ie].copy()
    x[0] = c.coil_state(duty * c.i0)
    return x
