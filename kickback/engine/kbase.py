"""Layout of the compiled circuit's parameter array and the functions every mode shares (numba).

The header slots of the float64 parameter array :func:`kickback.engine.kcircuit.pack` builds, and
the compiled twins of :class:`kickback.circuit.Circuit`'s coil and branch functions used by both
the capacitive node (:mod:`kickback.engine.kcircuit`) and the algebraic one
(:mod:`kickback.engine.knode`): ``CoilStates.coil_current/state_gain/speed_of``,
``Circuit.currents_at`` and ``Circuit._conductances`` (same branches, same order of operations).
"""

from __future__ import annotations

import math

import numpy as np

from kickback.engine import kcache
from kickback.engine.kchain import chain_conductance_at, chain_current
from kickback.engine.klaws import pwl_current, pwl_slope, pymax
from kickback.engine.radau5_jit import jit

kcache.register()  # the cache of these functions follows kchain.py and klaws.py too

# header slots of the parameter array
N_STATES, L_, R_, VS, FLUX, I_SAT, MOTOR, K_EMF, MECH, SPEED, VISC, LOAD, INERTIA = range(13)
C_PLUS, C_GND, C_NODE, IW, IE = range(13, 18)
ON, OFF = 18, 22  # four floats each: v_fwd, r_fwd, v_rev, r_rev
FALL, G_LEAK, N_CHAINS, N_SLOTS = 26, 27, 28, 29
#: mode slots (set_mode); PIN_ACTIVE: 0 free, 1 held at a vertical law, 2 floating (FLOAT)
CONDUCTING, T_TURNOFF, I_ON, PIN_ACTIVE, PIN_V, PIN_N, PIN_SIDE = 30, 31, 32, 33, 34, 35, 36
SCALE, CAPACITIVE, MAGIC = 37, 38, 39
#: algebraic node: the node's sorted vertical voltages after the fall (offset, count) and during
#: it (offset, count), i0 [A] and v_scale [V]
THR_AFTER, N_AFTER, THR_DURING, N_DURING, I0, V_SCALE = 40, 41, 42, 43, 44, 45
#: header length; the chain offsets follow it, then the chain records, the node's thresholds,
#: then the state scales
HEAD = 48
MAGIC_VALUE = 18.2  # issue 18, step 1: layout version (18.2: the algebraic node)
N_ENERGY_FIXED = 5
#: PIN_ACTIVE's value of the floating mode
PIN_FLOAT = 2.0


@jit
def coil_current(p, x):
    """CoilStates.coil_current of the first state [A] (the current, or from the flux linkage,
    continued linearly past 0.999·L·I_sat)."""
    if p[FLUX] == 0.0:
        return x
    if math.isnan(x):
        return math.nan
    L, i_sat = p[L_], p[I_SAT]
    lam_max = 0.999 * L * i_sat
    xc = x
    if -lam_max > xc:
        xc = -lam_max
    if xc > lam_max:
        xc = lam_max
    den = L * i_sat - abs(xc)
    ic = xc * i_sat / den if den > 0 else math.copysign(math.inf, xc)
    if x == xc:
        return ic
    return ic + (x - xc) / (L / (1.0 + abs(ic) / i_sat) ** 2)


@jit
def state_gain(p, i):
    """CoilStates.state_gain: (di/dx0, dx0/dt per volt)."""
    if p[FLUX] == 0.0:
        return 1.0, 1.0 / p[L_]
    L, i_sat = p[L_], p[I_SAT]
    lam_max = 0.999 * L * i_sat
    i_end = lam_max * i_sat / (L * i_sat - lam_max)  # past the law's end: the slope at the end
    a = abs(i)
    if a > i_end:
        a = i_end
    return 1.0 / (L / (1.0 + a / i_sat) ** 2), 1.0


@jit
def emf_of(p, y):
    """Back-EMF k·ω [V] (CoilStates.speed_of: the fixed speed or the state; 0 without a motor)."""
    if p[MOTOR] == 0.0:
        return 0.0
    return p[K_EMF] * (y[int(p[IW])] if p[MECH] != 0.0 else p[SPEED])


@jit
def in_fall(p, t):
    tf = p[FALL]
    return 0 < tf and 0 <= t - p[T_TURNOFF] < tf


@jit
def fall_limit(p, t):
    return p[I_ON] * (1.0 - (t - p[T_TURNOFF]) / p[FALL])


@jit
def chain_off(p, n):
    return int(p[HEAD + n])


@jit
def vcap_of(p, o, y):
    ic = int(p[o + 2])
    return y[ic] if ic >= 0 else 0.0


@jit
def currents_at(p, t, v, y):
    """Circuit.currents_at: channel (with leakage), off-state, then each active chain [A]."""
    nc = int(p[N_CHAINS])
    vals = np.empty(2 + nc)
    on = pwl_current(p[ON], p[ON + 1], p[ON + 2], p[ON + 3], v)
    if p[CONDUCTING] != 0.0:
        ich = on
    elif in_fall(p, t):
        lim = fall_limit(p, t)
        ich = lim if lim < on else on
    else:
        ich = 0.0
    vals[0] = ich + p[G_LEAK] * v
    vals[1] = pwl_current(p[OFF], p[OFF + 1], p[OFF + 2], p[OFF + 3], v)
    for n in range(nc):
        o = chain_off(p, n)
        vals[2 + n] = chain_current(p, o, v - p[VS] * p[o + 1], vcap_of(p, o, y))
    return vals


@jit
def conductances(p, t, v, y):
    """Circuit._conductances: small-signal conductance [S] of each branch at node voltage v
    (channel with the leakage, off-state, then each active chain)."""
    return conductances_with(p, t, v, y, np.empty(0), False)


@jit
def conductances_with(p, t, v, y, currents, has_currents):
    """Circuit._conductances with the branches' ``currents`` at v (from :func:`currents_at`,
    where ``has_currents``), so that a chain is not solved again."""
    nc = int(p[N_CHAINS])
    g = np.empty(2 + nc)
    g_ch = p[G_LEAK]
    if p[CONDUCTING] != 0.0 or (in_fall(p, t) and pwl_current(p[ON], p[ON + 1], p[ON + 2], p[ON + 3], v)
                                < fall_limit(p, t)):
        g_ch += pwl_slope(p[ON], p[ON + 1], p[ON + 2], p[ON + 3], v)
    g[0] = g_ch
    g[1] = pwl_slope(p[OFF], p[OFF + 1], p[OFF + 2], p[OFF + 3], v)
    for k in range(nc):
        o = chain_off(p, k)
        ik = currents[2 + k] if has_currents else 0.0
        g[2 + k] = chain_conductance_at(p, o, v - p[VS] * p[o + 1], vcap_of(p, o, y), ik, has_currents)
    return g


@jit
def fsum_list(vals):
    """Python's ``sum`` of the values in order (from 0.0)."""
    s = 0.0
    for x in vals:
        s += x
    return s


@jit
def _at(v, x):
    return math.isfinite(x) and abs(v - x) <= 1e-12 * pymax(1.0, abs(x))


@jit
def vertical_at(p, t, v):
    """Circuit._vertical_at: True for each branch (channel, off-state, chains) whose law is
    vertical at v."""
    nc = int(p[N_CHAINS])
    out = np.zeros(2 + nc, dtype=np.bool_)
    if p[CONDUCTING] != 0.0 or in_fall(p, t):
        out[0] = (p[ON + 1] == 0 and _at(v, p[ON])) or (p[ON + 3] == 0 and _at(v, p[ON + 2]))
    out[1] = (p[OFF + 1] == 0 and _at(v, p[OFF])) or (p[OFF + 3] == 0 and _at(v, p[OFF + 2]))
    for n in range(nc):
        o = chain_off(p, n)
        if int(p[o]) != 0:  # thresholds only of a piecewise-linear chain
            continue
        ref = p[VS] * p[o + 1]
        out[2 + n] = (p[o + 5] == 0 and _at(v, p[o + 4] + ref)) or (p[o + 7] == 0 and _at(v, p[o + 6] + ref))
    return out


@jit
def node_conductance(p, t, v, y):
    """FloatingNode.node_conductance [S] of an algebraic node (inf on a vertical law)."""
    g = conductances(p, t, v, y)
    vert = vertical_at(p, t, v)
    for b in range(g.size):
        if vert[b]:
            g[b] = math.inf
    return fsum_list(g)
