"""The detailed engine's state equations compiled with numba, for kickback's Radau IIA (radau5).

One compiled right-hand side :data:`RHS` and Jacobian :data:`JAC` serve every circuit: the
circuit is data in a float64 parameter array built by :func:`pack` (its constants, each clamp
chain as a record at an offset, each element law as a record with an integer law code), and the
mutable mode — pin (node held at a vertical law), switch conducting, turn-off time, channel
current at turn-off — lives in slots written by :func:`set_mode` before each phase's solve.

``RHS(t, y, p)`` equals :meth:`kickback.circuit.Circuit.rhs` and ``JAC(t, y, p)`` what
:meth:`kickback.engine.detailed.PhaseRunner.jac` returns (the analytic dynamic block of
:meth:`Circuit.jacobian` and the energy rows by the same forward differences, with the runner's
state scales); :func:`NODE_BALANCE` and :func:`PIN_RELEASE` are the node-balance event
(``PhaseRunner.ev_peak``) and the pin's release event (``PhaseRunner._release_events``).
Scope: a capacitive node (``C_node > 0``); :func:`supported` names what is not covered.
The element laws are :mod:`kickback.engine.klaws`, the chains :mod:`kickback.engine.kchain`.
"""

from __future__ import annotations

import math

import numpy as np

from kickback.engine import kcache, radau5
from kickback.engine.kchain import chain_conductance, chain_current, chain_powers, chain_record
from kickback.engine.klaws import pieces_record, pwl_current, pwl_slope, pymax
from kickback.engine.radau5_jit import jit
from kickback.models import ShockleyDiode, Varistor

kcache.register()  # the cache of these functions follows kchain.py and klaws.py too

# header slots of the parameter array
N_STATES, L_, R_, VS, FLUX, I_SAT, MOTOR, K_EMF, MECH, SPEED, VISC, LOAD, INERTIA = range(13)
C_PLUS, C_GND, C_NODE, IW, IE = range(13, 18)
ON, OFF = 18, 22  # four floats each: v_fwd, r_fwd, v_rev, r_rev
FALL, G_LEAK, N_CHAINS, N_SLOTS = 26, 27, 28, 29
#: mode slots (set_mode)
CONDUCTING, T_TURNOFF, I_ON, PIN_ACTIVE, PIN_V, PIN_N, PIN_SIDE = 30, 31, 32, 33, 34, 35, 36
SCALE, CAPACITIVE, MAGIC = 37, 38, 39
#: header length; the chain offsets follow it, then the chain records, then the state scales
HEAD = 40
MAGIC_VALUE = 18.1  # issue 18, step 1: layout version
N_ENERGY_FIXED = 5


def supported(circuit) -> str | None:
    """None when the compiled equations cover ``circuit``, else the reason why not."""
    from kickback.floatnode import FLOAT

    if not circuit.capacitive:
        return "no node capacitance (algebraic node)"
    if circuit.pin is FLOAT or circuit.floating:
        return "floating node mode"
    for k in circuit.active_chains:
        for law in circuit.chains[k].laws:
            if law is not None and law.pieces() is None and not isinstance(law, ShockleyDiode | Varistor):
                return f"element law {type(law).__name__} has no compiled form"
    if circuit.pin is not None and not 0 <= circuit.pin[1] < 2 + len(circuit.active_chains):
        return "pin on an unknown branch"
    return None


def pack(circuit, scale=None) -> np.ndarray:
    """Every constant of the state equations of ``circuit`` as a float64 array (mode slots set
    from the circuit's present mode).

    Parameters
    ----------
    circuit : kickback.circuit.Circuit
    scale : array_like, optional
        ``PhaseRunner.scale`` (the states' scales, max(atol/rtol, 1e-300)) for the forward
        differences of JAC's energy rows; default the runner's at rtol = 1e-8.
    """
    why = supported(circuit)
    if why is not None:
        raise ValueError(f"the compiled circuit does not cover this case: {why}")
    c = circuit
    if scale is None:
        from kickback.engine.steptol import tolerances

        scale = np.maximum(tolerances(c, 1e-8) / 1e-8, 1e-300)
    scale = np.asarray(scale, dtype=float)
    m = c.motor
    head = np.zeros(HEAD)
    head[N_STATES], head[L_], head[R_], head[VS] = c.n_states, c.L, c.R, c.Vs
    head[FLUX], head[I_SAT] = float(c.flux), c.i_sat if c.flux else 0.0
    head[MOTOR], head[K_EMF], head[MECH] = float(m is not None), c.k_emf, float(c.mech)
    if m is not None:
        head[SPEED] = m.speed if not c.mech else 0.0
        if c.mech:
            head[VISC], head[LOAD], head[INERTIA] = m.viscous_friction, m.load_torque, m.inertia
            head[K_EMF] = m.back_emf_constant
    head[C_PLUS], head[C_GND], head[C_NODE] = c.C_plus, c.C_gnd, c.C_node
    head[IW] = c.iw if c.mech else -1
    head[IE] = c.ie
    head[ON:ON + 4] = pieces_record(c.switch.on_state)
    head[OFF:OFF + 4] = pieces_record(c.switch.off_state)
    head[FALL], head[G_LEAK] = c.switch.fall_time, c.g_leak
    head[N_CHAINS], head[N_SLOTS] = len(c.active_chains), len(c.energy_slots)
    head[CAPACITIVE], head[MAGIC] = 1.0, MAGIC_VALUE
    records = []
    offsets = []
    pos = HEAD + len(c.active_chains)
    for k in c.active_chains:
        ch = c.chains[k]
        rec = chain_record(ch, ch.reference, c.icap.get(k, -1))
        offsets.append(float(pos))
        records += rec
        pos += len(rec)
    head[SCALE] = pos
    p = np.concatenate([head, np.array(offsets), np.array(records, dtype=float), scale[:c.ie]])
    set_mode(p, c)
    return p


def set_mode(p: np.ndarray, circuit) -> None:
    """Copy the circuit's mutable mode (pin, conducting, t_turnoff, i_on) into ``p``."""
    from kickback.floatnode import FLOAT

    c = circuit
    p[CONDUCTING] = float(bool(c.conducting))
    p[T_TURNOFF] = c.t_turnoff
    p[I_ON] = c.i_on
    if c.pin is FLOAT:
        raise ValueError("the compiled circuit does not cover the floating node mode")
    if c.pin is None:
        p[PIN_ACTIVE], p[PIN_V], p[PIN_N], p[PIN_SIDE] = 0.0, 0.0, -1.0, 0.0
    else:
        p[PIN_ACTIVE], p[PIN_V], p[PIN_N], p[PIN_SIDE] = 1.0, c.pin[0], float(c.pin[1]), float(c.pin[2])


# --------------------------------------------------------------------------- coil and switch
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
    return 1.0 / (p[L_] / (1.0 + abs(i) / p[I_SAT]) ** 2), 1.0


@jit
def _in_fall(p, t):
    tf = p[FALL]
    return 0 < tf and 0 <= t - p[T_TURNOFF] < tf


@jit
def _limit(p, t):
    return p[I_ON] * (1.0 - (t - p[T_TURNOFF]) / p[FALL])


@jit
def _chain_off(p, n):
    return int(p[HEAD + n])


@jit
def _vcap(p, o, y):
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
    elif _in_fall(p, t):
        lim = _limit(p, t)
        ich = lim if lim < on else on
    else:
        ich = 0.0
    vals[0] = ich + p[G_LEAK] * v
    vals[1] = pwl_current(p[OFF], p[OFF + 1], p[OFF + 2], p[OFF + 3], v)
    for n in range(nc):
        o = _chain_off(p, n)
        vals[2 + n] = chain_current(p, o, v - p[VS] * p[o + 1], _vcap(p, o, y))
    return vals


@jit
def _sum(vals):
    s = 0.0
    for x in vals:
        s += x
    return s


# --------------------------------------------------------------------------- equations
@jit
def rhs_core(t, y, p):
    """Circuit.rhs of a capacitive node."""
    i = coil_current(p, y[0])
    v = y[1]
    vals = currents_at(p, t, v, y)
    pinned = int(p[PIN_N]) if p[PIN_ACTIVE] != 0.0 else -1
    if pinned >= 0:
        vals[pinned] = 0.0
        vals[pinned] = i - _sum(vals)
    d = np.zeros_like(y)
    emf = 0.0
    if p[MOTOR] != 0.0:
        emf = p[K_EMF] * (y[int(p[IW])] if p[MECH] != 0.0 else p[SPEED])
    d[0] = (p[VS] - v - p[R_] * i - emf) * state_gain(p, i)[1]
    if p[MOTOR] != 0.0:
        d[d.size - 1] = emf * i
        if p[MECH] != 0.0:
            iw = int(p[IW])
            d[iw] = (p[K_EMF] * i - p[VISC] * y[iw] - p[LOAD]) / p[INERTIA]
    dv = (i - _sum(vals)) / p[C_NODE] if pinned < 0 else 0.0
    d[1] = dv
    i_supply = i - p[C_PLUS] * dv
    nc = int(p[N_CHAINS])
    for n in range(nc):
        o = _chain_off(p, n)
        ic = vals[2 + n]
        if p[o + 1] != 0.0:
            i_supply -= ic
        if int(p[o + 2]) >= 0:
            d[int(p[o + 2])] = ic / p[o + 3]
    e = int(p[IE])
    ioff = vals[1]
    d[e] = p[R_] * i * i
    d[e + 1] = p[VS] * i_supply
    d[e + 2] = v * vals[0]
    side = p[PIN_SIDE] if pinned == 1 else (1.0 if ioff > 0 else -1.0)
    d[e + 3] = v * ioff if side > 0 and ioff > 0 else 0.0
    d[e + 4] = v * ioff if side < 0 and ioff < 0 else 0.0
    m = e + N_ENERGY_FIXED
    for n in range(nc):
        o = _chain_off(p, n)
        chain_powers(p, o, vals[2 + n], v - p[VS] * p[o + 1], _vcap(p, o, y), 2 + n == pinned, d, m)
        m += int(p[o + 20])
    return d


@jit
def jac_dynamic(t, y, p):
    """Circuit.jacobian of a capacitive node: the analytic dynamic block, energy rows zero."""
    n = y.size
    jm = np.zeros((n, n))
    v = y[1]
    nc = int(p[N_CHAINS])
    g = np.empty(2 + nc)
    g_ch = p[G_LEAK]
    if p[CONDUCTING] != 0.0 or (_in_fall(p, t) and pwl_current(p[ON], p[ON + 1], p[ON + 2], p[ON + 3], v)
                                < _limit(p, t)):
        g_ch += pwl_slope(p[ON], p[ON + 1], p[ON + 2], p[ON + 3], v)
    g[0] = g_ch
    g[1] = pwl_slope(p[OFF], p[OFF + 1], p[OFF + 2], p[OFF + 3], v)
    for k in range(nc):
        o = _chain_off(p, k)
        g[2 + k] = chain_conductance(p, o, v - p[VS] * p[o + 1], _vcap(p, o, y))
    pinned = p[PIN_ACTIVE] != 0.0
    if pinned:
        g[int(p[PIN_N])] = math.inf
    G = _sum(g)
    g0, k0 = state_gain(p, coil_current(p, y[0]))
    if p[MECH] != 0.0:
        iw = int(p[IW])
        jm[0, iw] = -k0 * p[K_EMF]
        jm[iw, 0] = p[K_EMF] * g0 / p[INERTIA]
        jm[iw, iw] = -p[VISC] / p[INERTIA]
    jm[0, 0] = -k0 * p[R_] * g0
    jm[0, 1] = -k0
    C = p[C_NODE]
    if not pinned:
        jm[1, 0] = g0 / C
        jm[1, 1] = -G / C
        for k in range(nc):
            o = _chain_off(p, k)
            if int(p[o + 2]) >= 0:
                jm[1, int(p[o + 2])] = g[2 + k] / C
    for k in range(nc):
        o = _chain_off(p, k)
        ic = int(p[o + 2])
        if ic >= 0:
            gk, ck = g[2 + k], p[o + 3]
            jm[ic, 1] = gk / ck
            jm[ic, ic] = -gk / ck
    return jm


@jit
def jac_core(t, y, p):
    """PhaseRunner.jac: the analytic block, and the energy rows by forward differences of the
    right-hand side with h = 1e-8·max(|y_j|, scale_j)."""
    jm = jac_dynamic(t, y, p)
    n_dyn = int(p[IE])
    n = y.size
    f0 = rhs_core(t, y, p)
    s0 = int(p[SCALE])
    for j in range(n_dyn):
        h = 1e-8 * pymax(abs(y[j]), p[s0 + j])
        yp = y.copy()
        yp[j] += h
        f1 = rhs_core(t, yp, p)
        for r in range(n_dyn, n):
            jm[r, j] = (f1[r] - f0[r]) / h
    return jm


def _rhs(t, y, p):
    return rhs_core(t, y, p)


def _jac(t, y, p):
    return jac_core(t, y, p)


#: the compiled right-hand side (t, y, params) -> dy/dt
RHS = radau5.njit_rhs(_rhs)
#: the compiled Jacobian (t, y, params) -> d(dy/dt)/dy
JAC = radau5.njit_jac(_jac)


@jit
def NODE_BALANCE(t, y, p):  # noqa: N802 - the contract's name
    """Coil current less the branch currents at v = y[1] [A] (PhaseRunner.ev_peak)."""
    return coil_current(p, y[0]) - _sum(currents_at(p, t, y[1], y))


@jit
def PIN_RELEASE(t, y, p):  # noqa: N802 - the contract's name
    """The pinned law's current in its conducting direction [A] (PhaseRunner._release_events'
    g): zero where the pin ends."""
    vals = currents_at(p, t, p[PIN_V], y)
    vals[int(p[PIN_N])] = 0.0
    return p[PIN_SIDE] * (coil_current(p, y[0]) - _sum(vals))
