"""The batch engine: exact piecewise-linear turn-off of many variants at once.

Every variant advances segment by segment: find its mode (:mod:`batch_modes`), write the
segment's linear system, solve it in closed form (:mod:`pwl`), find the first event on the
exact solution (:mod:`pwl_roots`), integrate every energy over the segment exactly, record the
figures at the segment's ends, and go on from the event. All variants of a batch move together,
as arrays; variants sharing a set of dynamic states are solved as one group. The run ends as
the detailed engine's does (:func:`kickback.engine.detailed.integrate`): when the coil current
first reaches 1e-9 × i0, or — while capacitors still ring — when the oscillating energy is below
0.1 % of the start (or of the release level) and then at the next zero of the coil current, or
at the time bound ``t_f + 60·L/R``.

References
----------
DESIGN.md §3–§4 (conventions and the end of the run); the closed forms in :mod:`kickback.engine.pwl`.
"""

from __future__ import annotations

import numpy as np

from kickback.conventions import RING_END_FRACTION
from kickback.engine import batch_events as bev
from kickback.engine import batch_fitcheck
from kickback.engine.batch_modes import Mode, Modes
from kickback.engine.batch_record import Record
from kickback.engine.pwl import SegmentError
from kickback.engine.pwl_allroots import all_roots
from kickback.engine.pwl_build import build_modal, build_scalar
from kickback.engine.pwl_quadrature import QUADRATURE_FAILURE
from kickback.engine.pwl_roots import Events, first_event

#: a variant that needs more segments than this is stopped with a message (chatter)
MAX_SEGMENTS = 20_000
#: consecutive segments shorter than the probe step after which a variant is stopped
MAX_ZERO_SEGMENTS = 200
#: probe step as a fraction of the variant's time scale (see batch_modes)
PROBE = 1e-11


class State:
    """Per-variant run state and accumulators (arrays over the batch)."""

    def __init__(self, bc):
        n = bc.n
        self.t = np.zeros(n)
        self.X = bc.X0.copy()
        self.Xdot = np.zeros_like(self.X)
        self.phase = np.where(bc.ok, bev.DECAY, bev.DONE)
        nan = np.full(n, np.nan)
        self.t10, self.t1, self.tz, self.trel = nan.copy(), nan.copy(), nan.copy(), nan.copy()
        self.bound_hit = np.zeros(n, bool)
        self.nseg = np.zeros(n, int)
        self.nzero = np.zeros(n, int)
        e0 = bc.stored + bc.cap0
        self.rest_level = RING_END_FRACTION * e0
        rel = bc.release_current
        self.rest_level = np.where(np.isfinite(rel), np.minimum(self.rest_level, 0.5 * bc.L * (0.5 * rel) ** 2),
                                   self.rest_level)
        self.E = {k: np.zeros(n) for k in ("R", "sup", "ch", "av", "bd")}
        self.E_el = [[np.zeros(n) for _ in ch.elements] for ch in bc.chains]
        #: the fit's estimated energy error per chain [J] (:mod:`kickback.engine.batch_fitcheck`)
        self.fit_err = np.zeros((n, len(bc.chains)))
        self.fit_chains = batch_fitcheck.fitted_chains(bc)
        self.rec = Record(bc)
        self.rings = bc.capacitive or any(bc.chains[m].law.block is None for m in bc.cap_chains)
        scale = [bc.L * bc.i0 / bc.v_scale]
        if bc.capacitive:
            scale.append(bc.C_node * bc.v_scale / bc.i0)
        scale.append(np.where(bc.tf > 0, bc.tf, np.inf))
        self.tscale = np.minimum.reduce(scale)
        self.X0scale = np.abs(bc.X0) + np.where(np.arange(bc.nX) == 0, bc.i0[:, None], bc.v_scale[:, None])
        nb = 2 + len(bc.chains)
        self.prev_states = np.full((n, nb), -1)
        self.prev_pin = np.full(n, -1)
        self.force_b = np.full(n, -1)
        self.force_dir = np.zeros(n, int)
        #: with a single variant, the segments (t0, τ, solution, forms, mode) for sampling
        self.trace = [] if n == 1 else None


def run(bc) -> State:
    """Run every variant of the batch circuit ``bc``; returns the filled :class:`State`."""
    st = State(bc)
    # the detailed engine's first sample is the on-state where the node is continuous at t = 0
    on_rec = (bc.tf > 0) | bc.capacitive
    st.rec.on_state(np.nonzero(on_rec & bc.ok)[0])
    for _ in range(10 * MAX_SEGMENTS):
        live = np.nonzero(bc.ok & (st.phase != bev.DONE))[0]
        if live.size == 0:
            break
        _step(bc, st, live)
    batch_fitcheck.decline(bc, st)
    st.rec.rest_states(np.nonzero(bc.ok)[0], st.X[bc.ok])
    return st


def _step(bc, st, idx):
    md = Modes(bc, idx)
    t0 = st.t[idx]
    X = st.X[idx]
    xdot = st.Xdot[idx]
    delta = _probe_step(st, idx, X, xdot)
    mode, Xs, ok = md.classify(X, t0, xdot, delta)
    forms = md.assemble(mode, t0)
    # second look along the motion the mode found gives (the state's derivative may jump at an
    # event, and is unknown at t = 0): keep the mode it confirms, or take the one it finds
    xi = np.concatenate([Xs, np.ones((idx.size, 1)), np.zeros((idx.size, 1))], axis=1)
    xdot2 = np.einsum("gjk,gk->gj", forms.F, xi)
    delta2 = _probe_step(st, idx, Xs, xdot2)
    mode2, Xs2, ok2 = md.classify(X, t0, xdot2, delta2)
    moved = np.any(mode2.states != mode.states, axis=1) | (mode2.pin != mode.pin)
    if np.any(moved):
        mode = Mode(np.where(moved[:, None], mode2.states, mode.states), np.where(moved, mode2.pin, mode.pin))
        Xs = np.where(moved[:, None], Xs2, Xs)
        ok = np.where(moved, ok2, ok)
        forms = md.assemble(mode, t0)
    mode_kept = mode
    mode, forced = _apply_transition(md, st, idx, mode)
    if np.any(forced):
        forms = md.assemble(mode, t0)
        back = forced & ~_forced_holds(md, forms, mode, Xs, st.force_b[idx])
        if np.any(back):
            # the signalled change would leave its piece at once (an event fired on rounding,
            # e.g. a node at a vertical law's voltage while the current that would hold it
            # there is falling): the classification, which saw the motion, stands
            mode = Mode(np.where(back[:, None], mode_kept.states, mode.states),
                        np.where(back, mode_kept.pin, mode.pin))
            forms = md.assemble(mode, t0)
    st.force_b[idx] = -1
    if not np.all(ok):
        bc.fail(np.isin(np.arange(bc.n), idx[~ok]), "no conducting path takes the coil current (the node "
                "voltage would be unbounded)")
    if np.any(forms.nopath):
        bc.fail(np.isin(np.arange(bc.n), idx[forms.nopath]), "no conducting path takes the coil current")
    # a node snapped to a vertical law's voltage moves by rounding only; a larger move would be a
    # jump of the state (energy from nowhere): the variant is stopped with the reason, never
    # continued silently
    jump = np.abs(Xs - X) > 1e-9 * (np.abs(X) + st.X0scale[idx])
    if np.any(jump):
        bad = np.any(jump, axis=1)
        bc.fail(np.isin(np.arange(bc.n), idx[bad]), "the node voltage would jump when a law took hold of it "
                "(an inconsistent conduction state); the batch engine stopped this variant")
        ok = ok & ~bad
    X = Xs
    st.X[idx] = Xs
    keep = ok & ~forms.nopath
    # a segment under the falling switch current (a ramp, b1 ≠ 0) takes the φ-form with quadrature
    # moments; variants without one are kept apart so that they keep the closed-form modal segment
    # (mixed in one group, a long segment after the fall would be integrated panel by panel)
    ramp = np.any((forms.b1 != 0) & forms.dyn, axis=1)
    pattern = forms.dyn @ (1 << np.arange(bc.nX)) + (ramp.astype(int) << bc.nX)
    for pat in np.unique(pattern[keep]):
        g = np.nonzero(keep & (pattern == pat))[0]
        _segment(bc, st, md, idx, g, forms, mode, X, t0)


def _probe_step(st, idx, X, xdot):
    """Probe step [s]: long enough to move the slowest-moving state by ~1e-12 of itself (past
    rounding, so ties at thresholds are settled by the direction of motion), at most 1e-8 of the
    fastest time scale (a mode shorter than that is taken with the next one)."""
    xd = np.abs(xdot)
    size = np.abs(X) + np.abs(st.X0scale[idx])
    with np.errstate(divide="ignore", invalid="ignore"):
        move = np.where(xd > 0, 1e-12 * size / xd, np.inf).min(axis=1)
    ts = st.tscale[idx]
    return np.clip(move, PROBE * ts, 1e-8 * ts) + 4 * np.spacing(np.maximum(st.t[idx], 1e-300))


def _sub(forms, g):
    from kickback.engine.batch_modes import Forms

    return Forms(cv=forms.cv[g], cI=[c[g] for c in forms.cI], F=forms.F[g], dyn=forms.dyn[g],
                 info=[{k: v[g] for k, v in d.items()} for d in forms.info], ilim=forms.ilim[g],
                 offf=[o[g] for o in forms.offf], nopath=forms.nopath[g], nX=forms.nX)


def _segment(bc, st, md, idx, g, forms, mode, X, t0):
    gi = idx[g]
    fs = _sub(forms, g)
    dyn = np.nonzero(fs.dyn[0])[0]
    Xg, tg = X[g], t0[g]
    try:
        if dyn.size == 1:
            seg = build_scalar(Xg, fs.A, fs.b0, fs.b1, int(dyn[0]))
            exps = [np.abs(seg.beta)]
            oscs = []
        else:
            seg = build_modal(Xg, fs.A, fs.b0, fs.b1, dyn)
            exps, oscs = _modes_of(seg)
    except SegmentError as err:
        bc.fail(np.isin(np.arange(bc.n), gi), str(err))
        return
    sub = _SubModes(md, g)
    mg = Mode(mode.states[g], mode.pin[g])
    G = gi.size
    # stop events: the mode's validity, the phases, the ring end (quadratic), the bound
    meta = []
    evs = bev.mode_events(sub, fs, mg, tg, meta) + bev.stop_events(sub, fs, mg, tg, st)
    E = np.stack([f for f, _ in evs], axis=1)
    tags = np.array([tag for _, tag in evs] + [bev.RING])
    Er, Qr = bev.ring_event(sub, tg, st)
    Ering = np.zeros((G, 1) + E.shape[2:])
    Ering[:, 0, 0] = Er
    E = np.concatenate([E, Ering], axis=1)
    iq = np.array([E.shape[1] - 1])
    H = np.maximum(bc.t_bound[gi] - tg, 0.0)
    stops = Events(seg, E, Qr[:, None], np.zeros_like(Qr)[:, None], iq)
    stops.fresh = _fresh(st, gi, mg, meta, E.shape[1])
    tau, fired = first_event(stops, H, exps, oscs, tg)
    _remember_transition(st, gi, fired, meta, mg)
    # figure events: every root inside the segment
    fev = bev.fig_events(sub, fs, mg, tg, st)
    Qp = bev.power_events(sub, fs, mg)
    F = np.stack([f for f, _k, _c in fev] + [np.zeros_like(fev[0][0])] * len(Qp), axis=1)
    kinds = np.array([k for _f, k, _c in fev] + [bev.F_EXT] * len(Qp))
    chains = np.array([c for _f, _k, c in fev] + [-1] * len(Qp))
    if Qp:
        qb = np.stack(Qp, axis=1)
        fe = Events(seg, F, np.zeros_like(qb), qb, np.arange(len(fev), len(fev) + len(Qp)))
    else:
        fe = Events(seg, F)
    (rc, re, rt), g0f = all_roots(fe, tau, exps, oscs, tg, peaks=(kinds == bev.F_EXT) | (kinds == bev.F_VMAX))
    try:
        M2 = seg.moments(tau)
    except SegmentError as err:
        bc.fail(np.isin(np.arange(bc.n), gi), str(err))
        return
    lost = ~np.all(np.isfinite(M2), axis=(1, 2))
    if np.any(lost):  # only the variants whose quadrature gave up fail; the group goes on
        bc.fail(np.isin(np.arange(bc.n), gi[lost]), QUADRATURE_FAILURE)
        M2[lost] = 0.0
    Xe = seg.state(tau)
    Xd = seg.deriv(tau)
    dv = Xe[:, 1] - Xg[:, 1] if bc.capacitive else None
    _energies(bc, st, gi, fs, M2, dv)
    if st.fit_chains:
        batch_fitcheck.accumulate(bc, st, gi, fs, seg, tau, mg)
    if st.trace is not None:
        st.trace.append((tg[0], tau[0], seg, fs, mg))
    st.rec.boundary(gi, fs, Xg, np.zeros(G), tg, np.ones(G, bool), seg.deriv(np.zeros(G)),
                    np.where(tau > 0, mg.pin, -1))
    _figure_roots(bc, st, gi, fs, seg, tg, tau, rc, re, rt, g0f, kinds, chains)
    st.rec.boundary(gi, fs, Xe, tau, tg, np.ones(G, bool), Xd, end=True)
    _events(bc, st, gi, tags, fired, tg + tau, Xe)
    st.t[gi] = tg + tau
    st.X[gi] = Xe
    st.Xdot[gi] = Xd
    st.nseg[gi] += 1
    short = tau <= PROBE * st.tscale[gi] * 10
    st.nzero[gi] = np.where(short, st.nzero[gi] + 1, 0)
    bad = (st.nseg[gi] > MAX_SEGMENTS) | (st.nzero[gi] > MAX_ZERO_SEGMENTS)
    if np.any(bad):
        bc.fail(np.isin(np.arange(bc.n), gi[bad]), "the node voltage chatters at a threshold (too many "
                "segments); the batch engine stopped this variant")


def _fresh(st, gi, mode, meta, ne):
    """(G, ne) bool: the mode events of branches whose state did not change at this segment's
    start and that neither held the node nor hold it now: they did not fire there, so one at zero
    within rounding and moving out of its range fires now (a current that leaves its piece at
    once), instead of being taken for an event that just fired.

    A pin that moves between *other* branches leaves such a branch's events fresh: the switch's
    avalanche releasing the node while a diode + RC chain's current has decayed to rounding on
    its conducting piece (wide-range case 4680) — taken for just fired, the chain's exit event
    never fired, and the chain conducted backwards through its diode for the rest of the run
    (clamp energy 6.6 % low, the diode's stand-off after the transient lost).
    """
    out = np.zeros((gi.size, ne), bool)
    prev = st.prev_states[gi]
    known = prev[:, 0] >= 0
    prev_pin = st.prev_pin[gi]
    for e, (b, _d) in enumerate(meta):
        apart = (prev_pin == mode.pin) | ((prev_pin != b) & (mode.pin != b))
        out[:, e] = known & apart & (prev[:, b] == mode.states[:, b])
    return out


def _remember_transition(st, gi, fired, meta, mode):
    """The state change the first mode event that fired signals (applied if the next
    classification, unable to tell at a tangency, keeps the old state)."""
    n_mode = len(meta)
    fb = np.full(gi.size, -1)
    fd = np.zeros(gi.size, int)
    for e in range(n_mode - 1, -1, -1):
        b, d = meta[e]
        hit = fired[:, e] & (d != 0)
        fb = np.where(hit, b, fb)
        fd = np.where(hit, d, fd)
    st.force_b[gi] = fb
    st.force_dir[gi] = fd
    st.prev_states[gi] = mode.states
    st.prev_pin[gi] = mode.pin


def _apply_transition(md, st, idx, mode):
    """Force the signalled state change where the classification kept the old state."""
    fb = st.force_b[idx]
    rows = np.nonzero(fb >= 0)[0]
    if rows.size == 0:
        return mode, np.zeros(idx.size, bool)
    states, pin = mode.states.copy(), mode.pin.copy()
    b = fb[rows]
    same = states[rows, b] == st.prev_states[idx[rows], b]
    rows, b = rows[same], b[same]
    d = st.force_dir[idx[rows]]
    changed = np.zeros(idx.size, bool)
    for br in np.unique(b):
        r = rows[b == br]
        dd = d[b == br]
        law = md.laws[br]
        S = law.n_states
        new = np.where(dd == 2, md.LIM, np.clip(states[r, br] + dd, 0, S - 1))
        states[r, br] = new
        k = np.minimum(new, S - 1)
        vert = np.array([kd == "seg" for kd in law.kinds])[k] & (law.r[r, k] == 0) & (new < S)
        pin[r] = np.where(vert, br, np.where(pin[r] == br, -1, pin[r]))
        changed[r] = True
    return Mode(states, pin), changed


def _forced_holds(md, forms, mode, X, fb):
    """Whether a forced state change is consistent with the motion at its start (G,): the forced
    branch ``fb`` (−1: none), if it carries current on its new piece (or holds the node pinned),
    does not start at an end of that piece moving out of it. Rounding level: 256 ε of the size
    of the current's terms (and of its rate's)."""
    G = X.shape[0]
    ok = np.ones(G, bool)
    xi = np.concatenate([X, np.ones((G, 1)), np.zeros((G, 1))], axis=1)
    for b in np.unique(fb[fb >= 0]):
        r = fb == b
        d = forms.info[b]
        carries = (d["seg"] | d["vert"]) & r
        if not np.any(carries):
            continue
        c = forms.cI[b]
        dc = forms.d(c)
        cur = np.einsum("gj,gj->g", c, xi)
        rate = np.einsum("gj,gj->g", dc, xi)
        tol = 256 * np.finfo(float).eps * np.einsum("gj,gj->g", np.abs(c), np.abs(xi))
        rtol = 256 * np.finfo(float).eps * np.einsum("gj,gj->g", np.abs(dc), np.abs(xi))
        lo = np.where(np.isfinite(d["Ilo"]), d["Ilo"], -np.inf)
        hi = np.where(np.isfinite(d["Ihi"]), d["Ihi"], np.inf)
        leaves = ((cur <= lo + tol) & (rate < -rtol)) | ((cur >= hi - tol) & (rate > rtol))
        ok &= ~(carries & leaves)
    return ok


def _figure_roots(bc, st, gi, fs, seg, t0, tau, rc, re, rt, g0f, kinds, chains):
    """Levels, release, extremes and conduction from the figure events' roots inside a segment."""
    G = gi.size
    kr = kinds[re]
    for kind, arr in ((bev.F_L10, st.t10), (bev.F_L1, st.t1)):
        m = kr == kind
        first = np.full(G, np.inf)
        np.minimum.at(first, rc[m], rt[m])
        hit = np.isfinite(first) & np.isnan(arr[gi])
        arr[gi] = np.where(hit, t0 + first, arr[gi])
    m = kr == bev.F_REL
    last = np.full(G, -np.inf)
    np.maximum.at(last, rc[m], rt[m])
    st.trel[gi] = np.where(np.isfinite(last), t0 + last, st.trel[gi])
    # extrema, and the conduction thresholds' crossings (where a blocking element's held
    # voltage can be largest: its current is at the threshold there)
    cross = (kr == bev.F_UP_POS) | (kr == bev.F_DN_POS) | (kr == bev.F_UP_NEG) | (kr == bev.F_DN_NEG)
    m = (kr == bev.F_EXT) | (kr == bev.F_VMAX) | cross
    if np.any(m):
        node_ext = ((kr == bev.F_VMAX) | ((kr == bev.F_EXT) & (chains[re] < 0)))[m]
        st.rec.points(gi, fs, seg, rc[m], rt[m], t0, kr[m] == bev.F_VMAX, node_ext, kr[m] == bev.F_VMAX)
    for c in range(st.rec.nch):
        add = np.zeros(G)
        for up, dn in ((bev.F_UP_POS, bev.F_DN_POS), (bev.F_UP_NEG, bev.F_DN_NEG)):
            e_up = np.nonzero((kinds == up) & (chains == c))[0]
            if e_up.size == 0:
                continue
            add += np.where(g0f[:, e_up[0]] > 0, tau, 0.0)
            for kind, sign in ((up, 1.0), (dn, -1.0)):
                sel = (kr == kind) & (chains[re] == c)
                np.add.at(add, rc[sel], sign * (tau[rc[sel]] - rt[sel]))
        st.rec.cond[gi, c] += add


class _SubModes:
    """The group ``g`` of a Modes object (the laws and values of those variants only)."""

    def __init__(self, md, g):
        from kickback.engine.batch_modes import take

        self.bc = md.bc
        self.idx = md.idx[g]
        self.laws = [take(law, g) for law in md.laws]
        self.B = md.B
        self.tf = md.tf[g]


def _modes_of(seg):
    exps, oscs = [], []
    for m, w2, _a, _b, rp in seg.terms:
        w = np.sqrt(np.maximum(w2, 0.0))
        real = w2 >= 0
        exps.append(np.where(real, np.abs(m - w), 0.0))
        exps.append(np.where(real, np.abs(rp), 0.0))
        oscs.append((np.where(real, 0.0, np.abs(m)), np.where(real, 0.0, np.sqrt(np.maximum(-w2, 0.0)))))
    return exps, oscs


def _quad(M2, a, b):
    return np.einsum("gi,gij,gj->g", a, M2, b)


def energy_increments(bc, gi, fs, M2, dv=None):
    """Energies [J] over a segment from its moments M2 and the change ``dv`` [V] of a capacitive
    node (the supply's share C_plus·Δv is exact): (dict R/sup/ch/av/bd, per element [[…]])."""
    nX = bc.nX
    G = gi.size
    ei = np.zeros((G, nX + 2))
    ei[:, 0] = 1.0
    one = np.zeros((G, nX + 2))
    one[:, nX] = 1.0
    out = {"R": bc.R[gi] * M2[:, 0, 0]}
    isup = ei.copy()
    for m, ref in enumerate(bc.ref):
        if ref:
            isup = isup - fs.cI[2 + m]
    out["sup"] = bc.Vs[gi] * _quad(M2, isup, one)
    if bc.capacitive and dv is not None:
        out["sup"] = out["sup"] - bc.Vs[gi] * bc.C_plus[gi] * dv
    out["ch"] = _quad(M2, fs.cv, fs.cI[0])
    off = fs.info[1]
    p_off = _quad(M2, fs.cv, fs.cI[1])
    blk = bc.off_law.block if bc.off_law.block is not None else -1
    fwd = (off["seg"] | off["vert"]) & (off["k"] > blk)
    rev = (off["seg"] | off["vert"]) & ~fwd
    out["av"] = np.where(fwd, p_off, 0.0)
    out["bd"] = np.where(rev, p_off, 0.0)
    els = []
    for m, ch in enumerate(bc.chains):
        d = fs.info[2 + m]
        cond = d["seg"] | d["vert"]
        cI = fs.cI[2 + m]
        q1 = _quad(M2, cI, one)
        q2 = _quad(M2, cI, cI)
        row = []
        for el in ch.elements:
            if el is None:
                row.append(np.zeros(G))
                continue
            Ve, re = el.V[gi, d["k"]], el.r[gi, d["k"]]
            row.append(np.where(cond, Ve * q1 + re * q2, 0.0))
        els.append(row)
    return out, els


def _energies(bc, st, gi, fs, M2, dv):
    inc, els = energy_increments(bc, gi, fs, M2, dv)
    for key, val in inc.items():
        st.E[key][gi] += val
    for m, row in enumerate(els):
        for j, val in enumerate(row):
            st.E_el[m][j][gi] += val


def _events(bc, st, gi, tags, fired, t_ev, Xe):
    def any_of(tag):
        return np.any(fired[:, tags == tag], axis=1)

    phase = st.phase[gi]
    zero = any_of(bev.LZ) & (phase == bev.DECAY)
    ring = any_of(bev.RING) & (phase == bev.RINGING)
    cross = any_of(bev.CROSS) & (phase == bev.CROSSING)
    bound = any_of(bev.BOUND) | (t_ev >= bc.t_bound[gi])
    st.tz[gi] = np.where(zero & np.isnan(st.tz[gi]), t_ev, st.tz[gi])
    dyn = bev.dyn_energy(bc, gi, Xe)
    rest = st.rest_level[gi]
    new = phase.copy()
    if st.rings:
        new = np.where(zero, np.where((dyn > rest) & (t_ev < bc.t_bound[gi]), bev.RINGING, bev.DONE), new)
    else:
        new = np.where(zero, bev.DONE, new)
    big = np.abs(Xe[:, 0]) > RING_END_FRACTION * bc.i0[gi]
    new = np.where(ring, np.where(big & (t_ev < bc.t_bound[gi]), bev.CROSSING, bev.DONE), new)
    new = np.where(cross, bev.DONE, new)
    stop = bound & (new != bev.DONE)
    hit = np.where(phase == bev.DECAY, ~zero,
                   np.where(phase == bev.RINGING, ~(dyn <= rest * 1.0001), big))
    st.bound_hit[gi] = np.where(stop, hit, np.where(ring, False, st.bound_hit[gi]))
    new = np.where(stop, bev.DONE, new)
    st.phase[gi] = new
