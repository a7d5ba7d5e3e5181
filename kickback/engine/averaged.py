"""First guess for the periodic steady state from the averaged model.

Over a cycle much shorter than the slow time constants, the slow states (coil current, motor
speed, snubber-capacitor voltages) see the duty-weighted mean of their rates in the two switch
states, with the switch node settled in each: ``D·f_on(x̄) + (1 − D)·f_off(x̄) = 0``. The cycle
starts at turn-on, half an on-time's rise below the mean.

References
----------
R. D. Middlebrook and S. Ćuk, "A general unified approach to modelling switching-converter
power stages", IEEE PESC 1976 (state-space averaging).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import fsolve

from kickback.circuit import Circuit
from kickback.engine.linphase import settled_probe
from kickback.errors import SolverError


def scales(c):
    from kickback.engine.periodic import scales as _s

    return _s(c)


def _rates(c: Circuit, x: np.ndarray, conducting: bool) -> tuple[np.ndarray, np.ndarray]:
    """Dynamic rates and the state with the node settled, the switch on (or off, fall over)."""
    y = np.zeros(c.n_states)
    y[: c.ie] = x
    c.conducting = conducting
    c.t_turnoff = -math.inf if not conducting else 0.0
    c.pin = None
    try:
        y = settled_probe(c, 0.0, y)
        return c.rhs(0.0, y)[: c.ie], y[: c.ie]
    finally:
        c.conducting, c.t_turnoff, c.pin = False, 0.0, None


def averaged_guess(c: Circuit, duty: float, frequency: float, report: bool = False):
    """Cycle-start state (turn-on) from the averaged model; the on-state scaled by the duty
    when the averaged equations cannot be solved (e.g. nothing conducts with the switch off, or
    the coil current reaches zero every cycle: discontinuous conduction has no solution with a
    current that flows all cycle). ``report``: return (state, whether the averaged model was
    solved)."""
    x, ok = _averaged(c, duty, frequency)
    return (x, ok) if report else x


def _averaged(c: Circuit, duty: float, frequency: float) -> tuple[np.ndarray, bool]:
    y0 = c.initial_state()
    fallback = y0[: c.ie].copy()
    fallback[0] = c.coil_state(duty * c.i0)
    slow = [k for k in range(c.ie) if not (c.capacitive and k == 1)]
    t_on = duty / frequency

    def full(xs):
        x = fallback.copy()
        x[slow] = xs
        return x

    def mean_rate(xs):
        x = full(xs)
        r_on = _rates(c, x, True)[0]
        r_off = _rates(c, x, False)[0]
        return (duty * r_on + (1.0 - duty) * r_off)[slow]

    with np.errstate(all="ignore"):
        try:
            xs, info, ier, _ = fsolve(mean_rate, fallback[slow], full_output=True, xtol=1e-10)
            # accepted when the mean drift over a cycle is small against each state's scale
            drift = np.abs(info["fvec"]) / frequency / scales(c)[slow]
            if not np.all(np.isfinite(xs)) or not (ier == 1 or np.max(drift) < 1e-6):
                return fallback, False
            x = full(xs)
            i_mean = float(c.coil_current(x[0])) / c.i0
            if not -0.5 <= i_mean <= 2.0:
                # a spurious root (the node settled on a breakdown or body-diode law at a large
                # reverse current): the mean of a PWM current lies between zero and about the
                # on-state current
                return fallback, False
            mean = x
            x = x - 0.5 * t_on * _rates(c, x, True)[0]  # back to the cycle's start
            if not _plausible(c, x):
                # the linear step back holds only for an on-time short against the states' time
                # constants: over a long one it lands far outside (a saturating coil's flux past
                # L0·I_sat, where no current reaches it); the mean is the better start then
                x = mean.copy()
            # a capacitor held behind a diode has a nil mean rate at almost any voltage (its
            # drain is the diode's saturation current): the averaged model leaves it anywhere, up
            # to 1e5 times the voltage scale; it starts from rest then, and the shooting tops it up
            wild = np.abs(x) > 10.0 * c.v_scale
            wild[0] = False
            if c.mech:
                wild[c.iw] = False
            x[wild] = fallback[wild]
            if c.capacitive:
                x[1] = _rates(c, x, False)[1][1]  # the node as the off-state leaves it
        except (SolverError, ArithmeticError, ValueError):
            return fallback, False
    return (x, True) if np.all(np.isfinite(x)) else (fallback, False)


def _plausible(c: Circuit, x: np.ndarray) -> bool:
    """A cycle-start state a PWM cycle can have: a coil current between −0.5 and 2 times the
    on-state current (a flux inside the saturation law's range), capacitor voltages within ten
    times the voltage scale."""
    if c.flux and not abs(x[0]) < c.L * c.i_sat:
        return False
    i = float(c.coil_current(x[0])) / c.i0
    caps = np.abs(x[1:][: len(c.icap) + (1 if c.capacitive else 0)])
    return bool(-0.5 <= i <= 2.0 and np.all(caps <= 10.0 * c.v_scale))

