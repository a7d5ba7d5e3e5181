"""The circuit's rates at many states at once, for checking a closed-form phase along its path.

:meth:`kickback.circuit.Circuit.rhs` takes one state at a time (tens of µs in Python). A
closed-form phase that rings for thousands of LC periods is checked at tens of thousands of
points; here the same rates are computed for all of them with the circuit's vectorised branch
laws (``Circuit.branch_currents``, ``Chain.element_voltages``). The vectorised rates are used only
after they agree with :meth:`Circuit.rhs` at :data:`N_CROSS` points spread over the batch (to
rounding); otherwise :func:`rates` returns None and the caller evaluates point by point.
"""

from __future__ import annotations

import numpy as np

from kickback.circuit import N_ENERGY_FIXED, Circuit

#: points of each batch also evaluated by the scalar right-hand side
N_CROSS = 24
#: agreement required of the vectorised rates with the scalar ones: relative, plus an absolute
#: part relative to the largest magnitude of the row over the cross-check points (for the
#: energy rows, the largest power of any element there)
CROSS_REL = 1e-9


def _raw(c: Circuit, t: np.ndarray, Y: np.ndarray) -> np.ndarray:
    """Rates of the states ``Y`` (n_states × N) at times ``t``; capacitive node, not pinned,
    coil current as the first state."""
    i = Y[0]
    v = Y[1]
    ich, ioff, chains = c.branch_currents(t, v, Y)
    ich = np.broadcast_to(np.asarray(ich, dtype=float), i.shape)
    ioff = np.broadcast_to(np.asarray(ioff, dtype=float), i.shape)
    chains = [np.broadcast_to(np.asarray(x, dtype=float), i.shape) for x in chains]
    d = np.zeros_like(Y)
    if c.motor:
        speed = Y[c.iw] if c.mech else np.full_like(i, c.motor.speed)
        emf = c.k_emf * speed
    else:
        emf = 0.0
    d[0] = (c.Vs - v - c.R * i - emf) / c.L
    if c.motor:
        m = c.motor
        d[-1] = emf * i
        if c.mech:
            d[c.iw] = (m.back_emf_constant * i - m.viscous_friction * Y[c.iw] - m.load_torque) / m.inertia
    dv = (i - ich - ioff - sum(chains)) / c.C_node
    d[1] = dv
    i_supply = i - c.C_plus * dv
    for n, k in enumerate(c.active_chains):
        ch = c.chains[k]
        if ch.reference:
            i_supply = i_supply - chains[n]
        if k in c.icap:
            d[c.icap[k]] = chains[n] / ch.capacitance
    e = c.ie
    d[e] = c.R * i * i
    d[e + 1] = c.Vs * i_supply
    d[e + 2] = v * ich
    d[e + 3] = np.where(ioff > 0, v * ioff, 0.0)
    d[e + 4] = np.where(ioff < 0, v * ioff, 0.0)
    shared = {}  # chain → its element voltages, where the chain shares a residual voltage
    for m, (k, j) in enumerate(c.energy_slots):
        ic = chains[c._pos[k]]
        ch = c.chains[k]
        law = ch.laws[j]
        p = law.pieces()
        if ch.pieces is None:
            # as Chain.powers_at: a chain with a curved law gives the chain voltage that the
            # other elements' laws leave to one of them (a reverse-biased Shockley diode holds
            # what its clipped law cannot show near −I_s)
            if k not in shared:
                shared[k] = ch.element_voltages(ic, v - c.Vs * ch.reference, Y[c.icap[k]] if k in c.icap else 0.0)
            vj = shared[k][j]
        else:
            vj = p.voltage(np.where(ic != 0, ic, 1.0))
        d[e + N_ENERGY_FIXED + m] = np.where(ic != 0, vj * ic, 0.0)
    return d


def rates(c: Circuit, t: np.ndarray, Y: np.ndarray) -> np.ndarray | None:
    """Rates (n_states × N) of the states ``Y`` at times ``t``, or None where the circuit is not
    of the vectorised kind (no node capacitance, node pinned, saturating coil) or the vectorised
    rates disagree with :meth:`Circuit.rhs`."""
    if not c.capacitive or c.pin is not None or c.flux:
        return None
    t = np.asarray(t, dtype=float)
    with np.errstate(all="ignore"):
        d = _raw(c, t, Y)
    if not np.all(np.isfinite(d)):
        return None
    n = t.size
    idx = np.unique(np.linspace(0, n - 1, min(n, N_CROSS)).astype(int))
    ref = np.array([c.rhs(float(t[k]), Y[:, k]) for k in idx]).T
    scale = np.max(np.abs(ref), axis=1, keepdims=True)
    # the energy rows are powers [W] of one circuit: a power far below the largest one (a
    # reverse-biased clamp's 1e-31 W beside the coil resistance's) is checked against that one
    scale[c.ie:] = np.max(scale[c.ie:])
    allow = CROSS_REL * (np.abs(ref) + scale) + 1e-300
    if not np.all(np.abs(d[:, idx] - ref) <= allow):
        return None
    return d
