"""The node equations of a turn-off solved in stages, for the ring tests' references.

The fall (to t_f), the decay (to the coil current's first zero), the ring (until the oscillating
energy falls below its rest level), then the next zero of the coil current unless it is below
``end_fraction`` of its start already (DESIGN §3). Each stage is solved with scipy's solve_ivp
in pieces between the kinks of the clamp laws (terminal events; the state is moved a hair past
the kink it crossed), by Radau where the caller says the equations are stiff, else by DOP853.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.integrate import solve_ivp


def solve_in_stages(rhs, y0, t_fall, knees, below, stiff, opts, end_fraction):
    """Solve from ``y0`` (coil current first, node voltage second) through the stages above.

    Parameters
    ----------
    rhs : callable ``rhs(t, y)``
    y0 : array — the state at t = 0
    t_fall : float — [s] the end of the current fall
    knees : list of event functions, zero at a clamp law's kink (made terminal here)
    below : event function, the oscillating energy less its rest level
    stiff : callable ``stiff(t, y)`` — whether to use Radau from this state
    opts : dict — solve_ivp's tolerances (dense_output is set)
    end_fraction : float — the ring ends at once where |i| is below this share of its start

    Returns
    -------
    (pieces, t_ring) : the solve_ivp results in time order and the time [s] of the first zero
    """
    def zero(t, y):
        return y[0]

    for k in knees:
        k.terminal = True
    zero.terminal, zero.direction = True, -1
    below.terminal, below.direction = True, -1
    y = np.array(y0, dtype=float)
    i0 = abs(float(y[0]))
    t, pieces, stage, t_ring = 0.0, [], "decay", None
    while True:
        t_stop = t_fall if t < t_fall else 1.0
        events = list(knees) + ([zero] if stage in ("decay", "last zero") else [below] if stage == "ring" else [])
        sol = solve_ivp(rhs, (t, t_stop), y, events=events, method="Radau" if stiff(t, y) else "DOP853",
                        dense_output=True, **opts)
        assert sol.status >= 0, sol.message
        pieces.append(sol)
        t, y = float(sol.t[-1]), sol.y[:, -1].copy()
        hit = [k for k, te in enumerate(sol.t_events) if te.size and te[-1] == t]
        if not hit:
            continue  # the end of the fall
        if hit[0] < len(knees):
            y[1] += 1e-9 * math.copysign(1.0, rhs(t, y)[1])  # just past the knee it crossed
            continue
        if stage == "decay":
            stage, t_ring = "ring", t
        elif stage == "ring":
            if abs(y[0]) <= end_fraction * i0:
                break
            stage = "last zero"
            zero.direction = 0
        else:
            break
    return pieces, t_ring


def assert_energies(f, ref, rel):
    """The run's energies (coil resistance, motor, first clamp) against the reference's ``res``,
    ``motor``, ``clamp`` within ``rel`` (and 1e-9 of the stored energy ``e0``), its ledger within
    1e-6."""
    import pytest

    floor = 1e-9 * ref["e0"]
    assert f.resistance_energy_J == pytest.approx(ref["res"], rel=rel, abs=floor)
    assert f.motor_energy_J == pytest.approx(ref["motor"], rel=rel, abs=floor)
    assert f.clamps[0].energy_J == pytest.approx(ref["clamp"], rel=rel, abs=floor)
    assert abs(f.energy_balance_error) <= 1e-6
