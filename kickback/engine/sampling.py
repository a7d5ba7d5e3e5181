"""Sampling an engine run: solver steps plus interpolated points, node voltage and branch
currents at each, and the exact maximum of an algebraic node voltage."""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize_scalar

from kickback.circuit import Circuit
from kickback.engine.detailed import Waveforms
from kickback.errors import SolverError


def sample_run(c: Circuit, phases, ev_times, peaks, bound_hit, rtol, n_rhs, per_step) -> Waveforms:
    ts = []
    for ph in phases:
        steps = np.asarray(ph.t_steps)
        ts.append(steps)
        if per_step > 0 and len(steps) > 1:
            frac = np.arange(1, per_step + 1) / (per_step + 1)
            ts.append((steps[:-1, None] + np.diff(steps)[:, None] * frac[None, :]).ravel())
    extra = [x for x in [*ev_times.values(), *peaks] if x is not None]
    t = np.unique(np.concatenate(ts + [np.asarray(extra, dtype=float)]))
    y = np.full((c.n_states, t.size), np.nan)
    pins = np.zeros(t.size, dtype=int)
    covered = np.zeros(t.size, dtype=bool)
    for n, ph in enumerate(phases):
        m = (t >= ph.t0) & (t <= ph.t1)
        y[:, m] = ph.sol(t[m])
        pins[m] = n
        covered |= m
    if not covered.all():  # a sample no phase holds would carry no state: say so, never sample garbage
        k = int(np.argmin(covered))
        raise SolverError(f"internal: the waveform sample at t = {t[k]:.6g} s lies outside every solved phase "
                          f"({int((~covered).sum())} such samples); the result is withheld")
    parts = [derived_with_pin(c, ph.pin, t[pins == n], y[:, pins == n], ph) for n, ph in enumerate(phases)]
    v = np.concatenate([p[0] for p in parts])
    ich = np.concatenate([p[1] for p in parts])
    ioff = np.concatenate([p[2] for p in parts])
    chains = [np.concatenate([p[3][k] for p in parts]) for k in range(len(c.active_chains))]
    w = Waveforms(c, t, y, v, ich, ioff, chains, ev_times, peaks, bound_hit, phases, rtol, n_rhs)
    if not c.capacitive:
        _refine_peak(w)
    return w


def _refine_peak(w: Waveforms) -> None:
    """Add the exact maximum of an algebraic node voltage between samples (no dv/dt event there)."""
    k = int(np.argmax(w.v))
    if k == 0 or k == w.t.size - 1:
        return
    lo, hi = float(w.t[k - 1]), float(w.t[k + 1])
    ph = next((p for p in w.phases if p.t0 <= lo and hi <= p.t1), None)
    if ph is None:
        return
    c = w.circuit

    def neg_v(tt):
        return -c.node_voltage(tt, ph.sol(tt))

    res = minimize_scalar(neg_v, bounds=(lo, hi), method="bounded",
                          options={"xatol": 1e-12 * max(hi, 1e-300)})
    if not res.success or -res.fun <= w.v[k] or res.x in w.t:
        return
    tp = float(res.x)
    yp = ph.sol(tp)[:, None]
    vp, a, b, cs = derived_with_pin(c, ph.pin, np.array([tp]), yp, ph)
    j = int(np.searchsorted(w.t, tp))
    w.t = np.insert(w.t, j, tp)
    w.y = np.insert(w.y, j, yp[:, 0], axis=1)
    w.v = np.insert(w.v, j, vp[0])
    w.i_channel = np.insert(w.i_channel, j, a[0])
    w.i_offstate = np.insert(w.i_offstate, j, b[0])
    w.i_chains = [np.insert(x, j, z[0]) for x, z in zip(w.i_chains, cs, strict=True)]
    w.peak_times.append(tp)


def derived_with_pin(c: Circuit, pin, t: np.ndarray, y: np.ndarray, phase=None):
    """:func:`derived` with the circuit's pin (and switch) mode set as it was when ``t`` was
    integrated."""
    c.pin = pin
    if phase is not None:
        c.conducting, c.t_turnoff = phase.conducting, phase.t_turnoff
    try:
        out = derived(c, t, y)
        if pin is not None:
            rest = c.coil_current(y[0]) - out[1] - out[2] - sum(out[3])
            branches = [out[1], out[2], *out[3]]
            # the pinned law carries current only on its conducting side (pin[2] · i ≥ 0: the
            # release event ends the pin where that current reaches zero); at the pin's first
            # and last instants the balance leaves a rounding residue of the other sign, which a
            # blocking law (a diode's reverse piece) would read as an element voltage of −inf
            # (a floating node, side 0, has no such side)
            pinned = branches[pin[1]] + rest
            branches[pin[1]] = pin[2] * np.maximum(pin[2] * pinned, 0.0) if pin[2] else pinned
            out = (out[0], branches[0], branches[1], branches[2:])
        return out
    finally:
        c.pin = None
        c.conducting, c.t_turnoff = False, 0.0


def derived(c: Circuit, t: np.ndarray, y: np.ndarray):
    """Node voltage and branch currents [V, A] at sample times ``t`` with states ``y``."""
    n = t.size
    if c.capacitive:
        v = y[1].copy()
        ich, ioff, chains = c.branch_currents(t, v, _StateView(y, c))
        return v, np.broadcast_to(ich, (n,)).astype(float), np.broadcast_to(ioff, (n,)).astype(float), \
            [np.broadcast_to(x, (n,)).astype(float) for x in chains]
    v = np.empty(n)
    ich = np.empty(n)
    ioff = np.empty(n)
    chains = [np.empty(n) for _ in c.active_chains]
    for k in range(n):
        yk = y[:, k]
        v[k] = c.node_voltage(float(t[k]), yk)
        a, b, cs = c.split_currents(float(t[k]), v[k], yk)
        ich[k], ioff[k] = a, b
        for j, x in enumerate(cs):
            chains[j][k] = x
    return v, ich, ioff, chains


class _StateView:
    """Index a (n_states, n) array like a state vector, giving rows."""

    def __init__(self, y, c):
        self.y = y

    def __getitem__(self, k):
        return self.y[k]


