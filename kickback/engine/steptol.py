"""The detailed engine's absolute tolerance per state (a module of its own: the engine's driver
and the compiled circuit, ``kcircuit``, both read it without importing each other)."""

from __future__ import annotations

import numpy as np

from kickback.circuit import Circuit


def tolerances(c: Circuit, rtol: float) -> np.ndarray:
    """Absolute tolerance per state, scaled to the initial current, the voltage scale and the
    stored energy."""
    e0 = c.coil_energy(c.i0) + float(c.capacitor_energy(c.on.node_voltage, c.initial_state()))
    atol = np.empty(c.n_states)
    atol[0] = rtol * 1e-6 * abs(c.coil_state(c.i0))
    if c.capacitive:
        atol[1] = rtol * 1e-3 * c.v_scale
    for idx in c.icap.values():
        atol[idx] = rtol * 1e-3 * c.v_scale
    if c.mech:
        atol[c.iw] = rtol * 1e-6 * max(abs(c.on_speed()), 1.0)
    atol[c.ie:] = rtol * 1e-6 * e0
    return atol
