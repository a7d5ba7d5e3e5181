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
Scope: a capacitive node (``C_node > 0``) free or pinned, and an algebraic one (no node
capacitance: :mod:`kickback.engine.knode`) free, pinned or floating (:mod:`kickback.engine.kfloat`);
:func:`supported` names what is not covered. The layout and shared functions are
:mod:`kickback.engine.kbase`, the element laws :mod:`kickback.engine.klaws`, the chains
:mod:`kickback.engine.kchain`.
"""

from __future__ import annotations

import math

import numpy as np

from kickback.engine import kbase, kcache, kfloat, knode, radau5
from kickback.engine.kbase import (  # noqa: F401 - the layout's names, re-exported
    C_GND,
    C_NODE,
    C_PLUS,
    CAPACITIVE,
    CONDUCTING,
    FALL,
    FLUX,
    G_LEAK,
    HEAD,
    I0,
    I_ON,
    I_SAT,
    IE,
    INERTIA,
    IW,
    K_EMF,
    L_,
    LOAD,
    MAGIC,
    MAGIC_VALUE,
    MECH,
    MOTOR,
    N_AFTER,
    N_CHAINS,
    N_DURING,
    N_ENERGY_FIXED,
    N_SLOTS,
    N_STATES,
    OFF,
    ON,
    PIN_ACTIVE,
    PIN_FLOAT,
    PIN_N,
    PIN_SIDE,
    PIN_V,
    R_,
    SCALE,
    SPEED,
    T_TURNOFF,
    THR_AFTER,
    THR_DURING,
    V_SCALE,
    VISC,
    VS,
    chain_off,
    coil_current,
    conductances,
    currents_at,
    emf_of,
    fall_limit,
    fsum_list,
    in_fall,
    state_gain,
    vcap_of,
)
from kickback.engine.kchain import chain_powers, chain_record
from kickback.engine.klaws import pieces_record, pymax
from kickback.engine.radau5_jit import jit
from kickback.models import ShockleyDiode, Varistor

kcache.register()  # the cache of these functions follows the modules they call into


def supported(circuit) -> str | None:
    """None when the compiled equations cover ``circuit``, else the reason why not."""
    from kickback.floatnode import FLOAT

    if circuit.capacitive and circuit.pin is FLOAT:
        return "floating mode of a capacitive node"
    for k in circuit.active_chains:
        for law in circuit.chains[k].laws:
            if law is not None and law.pieces() is None and not isinstance(law, ShockleyDiode | Varistor):
                return f"element law {type(law).__name__} has no compiled form"
    pin = circuit.pin
    if pin is not None and pin is not FLOAT and not 0 <= pin[1] < 2 + len(circuit.active_chains):
        return "pin on an unknown branch"
    return None


def pack(circuit, scale) -> np.ndarray:
    """Every constant of the state equations of ``circuit`` as a float64 array (mode slots set
    from the circuit's present mode).

    Parameters
    ----------
    circuit : kickback.circuit.Circuit
    scale : array_like
        ``PhaseRunner.scale`` (the states' scales, max(atol/rtol, 1e-300)) for the forward
        differences of JAC's energy rows.
    """
    why = supported(circuit)
    if why is not None:
        raise ValueError(f"the compiled circuit does not cover this case: {why}")
    c = circuit
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
    head[CAPACITIVE], head[MAGIC] = float(c.capacitive), MAGIC_VALUE
    head[I0], head[V_SCALE] = c.i0, c.v_scale
    records = []
    offsets = []
    pos = HEAD + len(c.active_chains)
    for k in c.active_chains:
        ch = c.chains[k]
        rec = chain_record(ch, ch.reference, c.icap.get(k, -1))
        offsets.append(float(pos))
        records += rec
        pos += len(rec)
    # the algebraic node's vertical voltages as nodebalance.solve_monotone sorts them
    thr = []
    for key, (o_slot, n_slot) in ((False, (THR_AFTER, N_AFTER)), (True, (THR_DURING, N_DURING))):
        xs = sorted({float(x) for x in c._thresholds[key] if math.isfinite(x)})
        head[o_slot], head[n_slot] = pos, len(xs)
        thr += xs
        pos += len(xs)
    head[SCALE] = pos
    p = np.concatenate([head, np.array(offsets), np.array(records, dtype=float), np.array(thr, dtype=float),
                        scale[:c.ie]])
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
        if c.capacitive:
            raise ValueError("the compiled circuit does not cover the floating mode of a capacitive node")
        p[PIN_ACTIVE], p[PIN_V], p[PIN_N], p[PIN_SIDE] = PIN_FLOAT, 0.0, 0.0, 0.0
    elif c.pin is None:
        p[PIN_ACTIVE], p[PIN_V], p[PIN_N], p[PIN_SIDE] = 0.0, 0.0, -1.0, 0.0
    else:
        p[PIN_ACTIVE], p[PIN_V], p[PIN_N], p[PIN_SIDE] = 1.0, c.pin[0], float(c.pin[1]), float(c.pin[2])


# --------------------------------------------------------------------------- equations
@jit
def rhs_core(t, y, p):
    """Circuit.rhs: a capacitive node (v = y[1]) or an algebraic one (v solved, pinned or
    floating: :mod:`kickback.engine.knode`)."""
    i = coil_current(p, y[0])
    capacitive = p[CAPACITIVE] != 0.0
    pinned = int(p[PIN_N]) if p[PIN_ACTIVE] != 0.0 else -1
    if capacitive:
        v = y[1]
        vals = currents_at(p, t, v, y)
        if pinned >= 0:
            vals[pinned] = 0.0
            vals[pinned] = i - fsum_list(vals)
    else:
        v = knode.node_voltage(p, t, y)
        vals = knode.split_currents(p, t, v, y, i)
    d = np.zeros_like(y)
    emf = emf_of(p, y)
    d[0] = (p[VS] - v - p[R_] * i - emf) * state_gain(p, i)[1]
    if p[MOTOR] != 0.0:
        d[d.size - 1] = emf * i
        if p[MECH] != 0.0:
            iw = int(p[IW])
            d[iw] = (p[K_EMF] * i - p[VISC] * y[iw] - p[LOAD]) / p[INERTIA]
    dv = (i - fsum_list(vals)) / p[C_NODE] if capacitive and pinned < 0 else 0.0
    if capacitive:
        d[1] = dv
    i_supply = i - p[C_PLUS] * dv
    nc = int(p[N_CHAINS])
    for n in range(nc):
        o = chain_off(p, n)
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
        o = chain_off(p, n)
        chain_powers(p, o, vals[2 + n], v - p[VS] * p[o + 1], vcap_of(p, o, y), 2 + n == pinned, d, m)
        m += int(p[o + 20])
    return d


@jit
def jac_dynamic(t, y, p):
    """Circuit.jacobian: the analytic dynamic block, energy rows zero."""
    n = y.size
    jm = np.zeros((n, n))
    if p[CAPACITIVE] == 0.0:
        return knode.jac_algebraic(t, y, p, jm)
    v = y[1]
    nc = int(p[N_CHAINS])
    g = conductances(p, t, v, y)
    pinned = p[PIN_ACTIVE] != 0.0
    if pinned:
        g[int(p[PIN_N])] = math.inf
    G = fsum_list(g)
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
            o = chain_off(p, k)
            if int(p[o + 2]) >= 0:
                jm[1, int(p[o + 2])] = g[2 + k] / C
    for k in range(nc):
        o = chain_off(p, k)
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
    return coil_current(p, y[0]) - fsum_list(currents_at(p, t, y[1], y))


@jit
def PIN_RELEASE(t, y, p):  # noqa: N802 - the contract's name
    """The pinned law's current in its conducting direction [A] (PhaseRunner._release_events'
    g): zero where the pin ends."""
    vals = currents_at(p, t, p[PIN_V], y)
    vals[int(p[PIN_N])] = 0.0
    return p[PIN_SIDE] * (coil_current(p, y[0]) - fsum_list(vals))


# the algebraic node's functions the floating events read (PhaseRunner._float_events), for a
# compiled event function: NODE_VOLTAGE(p, t, y), FORCED_VOLTAGE(p, t, y),
# NODE_CONDUCTANCE(p, t, v, y), FLOAT_LIMIT(p, t, v, y, di), FLOAT_RESIDUAL(p, t, y),
# EDGE_MARGIN(p, t, y, di), FORCED_SLOPE(p, t) (di: PhaseRunner.float_tolerance, which is
# FLOAT_TOLERANCE(p, t, y, rtol, atol0)); the events themselves: FLOAT_ENTRY(p, t, y, v, hold, gate,
# band, entry, rtol, atol0) (v = NODE_VOLTAGE) and FLOAT_RISE(p, t, y, rtol, atol0); the drift
# events are ±FLOAT_RESIDUAL − eps, the edge event EDGE_MARGIN (see s10/kernel_E.md)
NODE_VOLTAGE = knode.node_voltage
FORCED_VOLTAGE = kfloat.forced_voltage
NODE_CONDUCTANCE = kbase.node_conductance
FLOAT_LIMIT = kfloat.float_limit
FLOAT_RESIDUAL = kfloat.float_residual
EDGE_MARGIN = kfloat.edge_margin
FORCED_SLOPE = kfloat.forced_slope
FLOAT_TOLERANCE = kfloat.float_tolerance
FLOAT_ENTRY = kfloat.entry_level
FLOAT_RISE = kfloat.rise_level
