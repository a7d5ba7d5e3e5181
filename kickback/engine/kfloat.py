"""The floating mode of the compiled circuit's algebraic node (numba).

The compiled twins of :class:`kickback.floatnode.FloatingNode`'s functions (same branches, same
order of operations): with nothing but current-limited branches conducting, the coil current
follows them and the coil sets the node voltage, v = V_s − R·i − (back-EMF) − L·di/dt
(:func:`forced_voltage`); the rate, the conductance limit, the balance residual and the edge
margin the engine's floating events read (``PhaseRunner._float_events``).

References
----------
C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 6 (v = L di/dt).
"""

from __future__ import annotations

import math

from kickback.engine import kcache
from kickback.engine.kbase import (
    CONDUCTING,
    FALL,
    I0,
    I_ON,
    R_,
    V_SCALE,
    VS,
    coil_current,
    currents_at,
    emf_of,
    fsum_list,
    in_fall,
    node_conductance,
    state_gain,
)
from kickback.engine.klaws import pymax, pymin
from kickback.engine.radau5_jit import jit
from kickback.floatnode import ALGEBRAIC_ERROR, EDGE_JUMP, FLOAT_CONDUCTANCE, FLOAT_CONDUCTANCE_MAX, FLOAT_LANDING

kcache.register()


@jit
def forced_slope(p, t):
    """FloatingNode.forced_slope [A/s]: the channel's fall rate, else 0."""
    if p[CONDUCTING] == 0.0 and in_fall(p, t):
        return -p[I_ON] / p[FALL]
    return 0.0


@jit
def quasi_static_voltage(p, t, y):
    i = coil_current(p, y[0])
    g0, k0 = state_gain(p, i)
    return p[VS] - p[R_] * i - emf_of(p, y) - forced_slope(p, t) / (g0 * k0)


@jit
def rate_conductances(p, t, y):
    """FloatingNode._rate_conductances: (G_q, v_1, G_1)."""
    vq = quasi_static_voltage(p, t, y)
    G = node_conductance(p, t, vq, y)
    if not (math.isfinite(G) and p[R_] * G > 1e-9):
        return G, vq, G
    g0, k0 = state_gain(p, coil_current(p, y[0]))
    s = forced_slope(p, t)
    v1 = vq + s / (g0 * k0) * (1.0 - 1.0 / (1.0 + p[R_] * G))
    return G, v1, node_conductance(p, t, v1, y)


@jit
def float_rate(p, t, y):
    """FloatingNode.float_rate [A/s]: s/(1 + R·G), or s at a conduction edge."""
    s = forced_slope(p, t)
    if not s:
        return 0.0
    G, _, g1 = rate_conductances(p, t, y)
    if g1 < EDGE_JUMP * G:
        return s
    return s / (1.0 + p[R_] * G) if math.isfinite(G) else s


@jit
def forced_voltage(p, t, y):
    """FloatingNode.forced_voltage [V]: V_s − R·i − (back-EMF) − L·di/dt of a floating node."""
    i = coil_current(p, y[0])
    g0, k0 = state_gain(p, i)
    return p[VS] - p[R_] * i - emf_of(p, y) - float_rate(p, t, y) / (g0 * k0)


@jit
def float_limit(p, t, v, y, di):
    """FloatingNode.float_limit [S] (``di``: the solver's tolerance on the coil current [A])."""
    unit = p[I0] / p[V_SCALE]
    lo, hi = FLOAT_CONDUCTANCE * unit, FLOAT_CONDUCTANCE_MAX * unit
    s = forced_slope(p, t)
    if not s or not math.isfinite(v):
        return lo
    d = 1e-6 * p[V_SCALE]
    ga, gb = node_conductance(p, t, v - d, y), node_conductance(p, t, v + d, y)
    if not (math.isfinite(ga) and math.isfinite(gb) and ga > 0 and gb > 0):
        return lo
    kappa = abs(math.log(gb / ga)) / (2 * d)
    g0, k0 = state_gain(p, coil_current(p, y[0]))
    a = (s / (g0 * k0)) ** 2 * kappa * p[R_] ** 2
    if a <= 0:
        return hi
    return pymin(hi, pymax(lo, (ALGEBRAIC_ERROR * di / a) ** (1.0 / 3.0)))


@jit
def float_residual(p, t, y):
    """FloatingNode.float_residual [A]: the balance at the forced voltage, clipped to ±i0."""
    v = forced_voltage(p, t, y)
    r = fsum_list(currents_at(p, t, v, y)) - coil_current(p, y[0])
    i0 = p[I0]
    if not math.isfinite(r):
        r = -i0 if r == -math.inf else i0
    return pymax(-i0, pymin(i0, r))


@jit
def edge_margin(p, t, y, di):
    """FloatingNode.edge_margin: > 0 where a chain's conduction edge lies between the forced and
    the quasi-static voltage during a current fall (−1 outside a fall or on a vertical law)."""
    if not forced_slope(p, t):
        return -1.0
    gq, v, gf = rate_conductances(p, t, y)
    lim = float_limit(p, t, v, y, di)
    if not (math.isfinite(gq) and math.isfinite(gf)):
        return -1.0
    a = (gq - FLOAT_LANDING * lim) / (gq + FLOAT_LANDING * lim)
    return pymin(a, (lim - gf) / (lim + gf))




# --------------------------------------------------------------------------- the engine's events
@jit
def float_tolerance(p, t, y, rtol, atol0):
    """PhaseRunner.float_tolerance [A]: rtol·|i| + atol_0·di/dx0 during a current fall, else 0
    (``atol0``: the runner's absolute tolerance of the first state)."""
    if not forced_slope(p, t):
        return 0.0
    i = coil_current(p, y[0])
    return rtol * abs(i) + atol0 * state_gain(p, i)[0]


@jit
def entry_level(p, t, y, v, hold, gate, band, entry, rtol, atol0):
    """The floating mode's entry event of PhaseRunner._float_events (node free; v: its voltage):
    (G − g_lim)/(G + g_lim), g_lim = ``entry`` × float_limit; 1 before ``hold``, and before
    ``gate`` while the forced voltage is more than ``band`` [V] off v, and on a vertical law."""
    if t < hold:
        return 1.0
    if t < gate and abs(forced_voltage(p, t, y) - v) > band:
        return 1.0
    G = node_conductance(p, t, v, y)
    g_lim = entry * float_limit(p, t, v, y, float_tolerance(p, t, y, rtol, atol0))
    return 1.0 if not math.isfinite(G) else (G - g_lim) / (G + g_lim)


@jit
def rise_level(p, t, y, rtol, atol0):
    """The landing event of a floating node whose conductance rises (PhaseRunner's g_rise)."""
    v = forced_voltage(p, t, y)
    G = node_conductance(p, t, v, y)
    g_lim = FLOAT_LANDING * float_limit(p, t, v, y, float_tolerance(p, t, y, rtol, atol0))
    return 1.0 if not math.isfinite(G) else (G - g_lim) / (G + g_lim)
