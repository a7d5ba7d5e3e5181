"""Event functions of one mode and the quantities recorded at segment ends.

Mode events end the validity of the mode (a branch leaving its segment, the channel reaching
or leaving its falling limit, the end of the fall). Figure events split a segment where a
figure needs an exact point: the levels 10 %, 1 % and "at zero" of the coil current, the release
current, every extremum of the node voltage and of each chain's current, a chain current
crossing the conduction threshold, the end of the ringing and the time bound.
"""

from __future__ import annotations

import numpy as np

from kickback.conventions import CONDUCTION_FRACTION, ZERO_FRACTION

MODE, LZ, RING, CROSS, BOUND = range(5)
DECAY, RINGING, CROSSING, DONE = range(4)


def mode_events(md, forms, mode, t0, meta=None):
    """Validity events of a mode: list of (form (G, 3, nξ), tag). ``meta`` (a list), if given,
    receives per event (branch, direction (G,)) of the state change it signals: ±1 to the next
    state up or down, 2 to the falling limit, 0 none."""
    bc = md.bc
    G = t0.shape[0]
    nX = bc.nX
    i1, it = nX, nX + 1
    one = np.zeros((G, nX + 2))
    one[:, i1] = 1.0
    never = -one
    rows = np.arange(G)
    out = []

    def add(form, where):
        f = np.where(where[:, None] & np.all(np.isfinite(form), axis=1)[:, None], form, never)
        out.append((_order(f, 0), MODE))

    for b in range(md.B):
        d = forms.info[b]
        law = md.laws[b]
        cI = forms.cI[b]
        cur_seg = d["seg"] | d["vert"]
        lo = np.where(np.isfinite(d["Ilo"]), d["Ilo"], 0.0)
        hi = np.where(np.isfinite(d["Ihi"]), d["Ihi"], 0.0)
        u = forms.cv - forms.offf[b]
        blo = law.V[rows, d["k"]]
        bhi = law.uhi[rows, d["k"]]
        bhi0 = np.where(np.isfinite(bhi), bhi, 0.0)
        blo0 = np.where(np.isfinite(blo), blo, 0.0)
        ev1 = np.where(cur_seg[:, None], lo[:, None] * one - cI, u - bhi0[:, None] * one)
        w1 = np.where(cur_seg, np.isfinite(d["Ilo"]), d["block"] & np.isfinite(bhi))
        ev2 = np.where(cur_seg[:, None], cI - hi[:, None] * one, blo0[:, None] * one - u)
        w2 = np.where(cur_seg, np.isfinite(d["Ihi"]), d["block"] & np.isfinite(blo))
        add(ev1, w1)
        add(ev2, w2)
        if meta is not None:
            meta += [(b, np.where(cur_seg, -1, 1)), (b, np.where(cur_seg, 1, -1))]
        if b == 0:
            on = md.laws[0]
            vlim = on.V[:, -1][:, None] * one + on.r[:, -1][:, None] * forms.ilim - forms.cv
            add(vlim, d["lim"])
            add(cI - forms.ilim, ~d["lim"] & ~d["off"])
            tend = np.zeros((G, nX + 2))
            tend[:, it] = 1.0
            tend[:, i1] = t0 - md.tf
            add(tend, ~d["off"])
            if meta is not None:
                meta += [(0, np.zeros(G, int)), (0, np.full(G, 2)), (0, np.zeros(G, int))]
    return out


def _basics(md, t0):
    bc = md.bc
    G = t0.shape[0]
    nX = bc.nX
    one = np.zeros((G, nX + 2))
    one[:, nX] = 1.0
    ei = np.zeros((G, nX + 2))
    ei[:, 0] = 1.0
    return bc, G, nX, one, ei


def stop_events(md, forms, mode, t0, st):
    """Phase events that end a segment: the coil current at zero, its zero crossing, the bound."""
    bc, G, nX, one, ei = _basics(md, t0)
    idx = md.idx
    phase = st.phase[idx]
    out = []
    i0 = bc.i0[idx]
    out.append((_order(np.where((phase == DECAY)[:, None], ZERO_FRACTION * i0[:, None] * one - ei, -one), 0), LZ))
    for sgn in (1.0, -1.0):
        out.append((_order(np.where((phase == CROSSING)[:, None], sgn * ei, -one), 0), CROSS))
    tb = np.zeros((G, nX + 2))
    tb[:, nX + 1] = 1.0
    tb[:, nX] = t0 - bc.t_bound[idx]
    out.append((_order(tb, 0), BOUND))
    return out


#: kinds of figure events (with the chain they belong to, −1: none)
F_L10, F_L1, F_REL, F_EXT, F_UP_POS, F_DN_POS, F_UP_NEG, F_DN_NEG, F_VMAX = range(9)


def fig_events(md, forms, mode, t0, st):
    """Figure events, found inside a segment without ending it: list of (form (G, 3, nξ), kind, chain)."""
    bc, G, nX, one, ei = _basics(md, t0)
    idx = md.idx
    never = _order(-one, 0)
    i0 = bc.i0[idx]
    out = []

    def add(form, where, kind, chain=-1, order=0):
        out.append((np.where(where[:, None, None], _order(form, order), never), kind, chain))

    add(0.1 * i0[:, None] * one - ei, np.isnan(st.t10[idx]), F_L10)
    add(0.01 * i0[:, None] * one - ei, np.isnan(st.t1[idx]), F_L1)
    rel = bc.release_current[idx]
    has_rel = np.isfinite(rel) & (i0 >= np.nan_to_num(rel, nan=np.inf))
    relf = np.nan_to_num(rel, nan=0.0)[:, None]
    add(relf * one - ei, has_rel, F_REL)
    add(ei + relf * one, has_rel, F_REL)
    cv = forms.cv
    free = mode.pin < 0
    add(-cv, free, F_VMAX, order=1)  # a maximum of the node voltage
    add(cv, free, F_EXT, order=1)
    th = CONDUCTION_FRACTION * i0[:, None]
    kinds = (F_UP_POS, F_DN_POS, F_UP_NEG, F_DN_NEG)
    for m in range(len(bc.chains)):
        d = forms.info[2 + m]
        cond = d["seg"] | d["vert"]
        cI = forms.cI[2 + m]
        add(-cI, cond, F_EXT, m, 1)
        add(cI, cond, F_EXT, m, 1)
        for f, kind in zip((cI - th * one, th * one - cI, -th * one - cI, cI + th * one), kinds, strict=True):
            add(f, cond, kind, m)
        if m in bc.icap:  # extrema of the capacitor's voltage (its rate is the chain current over C)
            vc = np.zeros_like(cI)
            vc[:, bc.icap[m]] = 1.0
            add(-vc, cond, F_EXT, m, 1)
            add(vc, cond, F_EXT, m, 1)
    for q, (_k, cs, _ref) in enumerate(bc.lone):
        c = len(bc.chains) + q
        cur = cs[idx][:, None] * cv  # the lone capacitor's current is C·v'
        add(-cur, free, F_EXT, c, 2)
        add(cur, free, F_EXT, c, 2)
        for (sign, level), kind in zip(((1, -1), (-1, 1), (-1, -1), (1, 1)), kinds, strict=True):
            f = _order(sign * cur, 1)
            f[:, 0] = level * th * one
            out.append((np.where(free[:, None, None], f, never), kind, c))
    return out


def power_events(md, forms, mode):
    """Extrema of each series capacitor's power v_C·i (bilinear in ξ and ξ'): list of Qb (G, nξ, nξ)."""
    bc = md.bc
    out = []
    nX = bc.nX
    G = md.idx.size
    for m in bc.cap_chains:
        vc = np.zeros((G, nX + 2))
        vc[:, bc.icap[m]] = 1.0
        cI = forms.cI[2 + m]
        cond = (forms.info[2 + m]["seg"] | forms.info[2 + m]["vert"])[:, None, None]
        q = np.einsum("gi,gj->gij", cI, vc) + np.einsum("gi,gj->gij", vc, cI)
        out += [np.where(cond, -q, 0.0), np.where(cond, q, 0.0)]
    return out


def _order(form, k):
    """A form (G, nξ) placed on the derivative of order k: (G, 3, nξ)."""
    out = np.zeros((form.shape[0], 3, form.shape[1]))
    out[:, k] = form
    return out


def ring_event(md, t0, st):
    """End of the ringing: rest level − oscillating energy (quadratic form), armed while ringing."""
    bc = md.bc
    idx = md.idx
    G = t0.shape[0]
    nX = bc.nX
    n = nX + 2
    i1 = nX
    Q = np.zeros((G, n, n))
    E = np.zeros((G, n))
    Q[:, 0, 0] = -0.5 * bc.L[idx]
    if bc.capacitive:
        C, Vs = bc.C_node[idx], bc.Vs[idx]
        Q[:, 1, 1] = -0.5 * C
        E[:, 1] = C * Vs
        E[:, i1] -= 0.5 * C * Vs * Vs
    for m in bc.cap_chains:
        if bc.chains[m].law.block is not None:
            continue
        C = bc.chains[m].capacitance[idx]
        tgt = bc.Vs[idx] * (1.0 - bc.ref[m])
        j = bc.icap[m]
        Q[:, j, j] = -0.5 * C
        E[:, j] += C * tgt
        E[:, i1] -= 0.5 * C * tgt * tgt
    E[:, i1] += st.rest_level[idx]
    armed = st.phase[idx] == RINGING
    Q = np.where(armed[:, None, None], Q, 0.0)
    E = np.where(armed[:, None], E, 0.0)
    E[:, i1] = np.where(armed, E[:, i1], -1.0)
    return E, Q


def dyn_energy(bc, idx, X):
    """Energy [J] still oscillating: coil plus node and free snubber capacitors about their end values."""
    w = 0.5 * bc.L[idx] * X[:, 0] ** 2
    if bc.capacitive:
        w = w + 0.5 * bc.C_node[idx] * (X[:, 1] - bc.Vs[idx]) ** 2
    for m in bc.cap_chains:
        if bc.chains[m].law.block is not None:
            continue
        tgt = bc.Vs[idx] * (1.0 - bc.ref[m])
        w = w + 0.5 * bc.chains[m].capacitance[idx] * (X[:, bc.icap[m]] - tgt) ** 2
    return w
