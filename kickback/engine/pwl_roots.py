"""First event on a segment: the earliest root of many event functions, for many cases at once.

An event function is affine in ``ξ = (x, 1, τ)`` (a branch current, a node voltage minus a
threshold, a level of the coil current, a time) or, for the end of the ringing, a quadratic
form in ξ. The event *fires* where it crosses zero from below.

* One dynamic state and no ramp (every segment of the single-state families after the current
  fall): an event is ``c0 + c·f0·τφ1(βτ)`` (or linear in τ), monotone, and its root is closed:
  ``τ = q·log(1 + βq)/(βq)`` with ``q = −c0/(c·f0)``.
* Otherwise the exact solution is scanned on a grid graded to the segment's modes (spacing
  ≤ 0.35/|λ| while a mode lives, geometric growth behind a decaying one, ≤ 0.6/ω on an
  oscillation). Each grid interval is tested for a sign change and, with the end derivatives (a
  cubic Hermite model), for an extremum that touches zero between the points (a grazing root);
  brackets are refined by Newton steps safeguarded by bisection to a few ulp.

At τ = 0 an event whose value is zero within rounding counts as below zero only if it is moving
down (it fired at the previous event and now leaves it), so an event never re-fires where the
segment starts.

References
----------
L. F. Shampine and S. Thompson, "Event location for ordinary differential equations",
Computers & Mathematics with Applications 39 (2000) 43–54 (grazing events, why sign tests on a
grid need the derivative).
W. H. Press et al., Numerical Recipes, 3rd ed., CUP 2007, §9.4 (Newton–Raphson with bisection).
"""

from __future__ import annotations

import numpy as np

from kickback.engine.pwl import ScalarSegment
from kickback.engine.pwl_refine import _refine
from kickback.engine.pwl_scalar_roots import closed_scalar, quadratic, scalar_pieces

#: grid points per case evaluated in one round
ROUND = 12
#: |g(0)| treated as zero at the start of a segment: this many ε of the size of its terms, plus
#: its slope times this many ulp of the absolute time (where the last event was located)
START_TOL = 256 * np.finfo(float).eps
START_ULPS = 16
#: halvings locating a grazing extremum: 2^-34 of the interval puts g there within ~1e-20 of
#: its curvature scale of the extreme value, far below what decides its sign
_EXTREMUM_HALVINGS = 34


class Events:
    """Event functions of a group of cases on one segment.

    Parameters
    ----------
    seg : ScalarSegment or ModalSegment — the segment's exact solution
    E : (G, ne, 3, nξ) — affine coefficients over ξ, ξ' and ξ'' (ξ = (x, 1, τ), ξ' = (x', 0, 1),
        ξ'' = (x'', 0, 0)): a derivative event (an extremum) is taken on the solution's own
        derivative, never through the state matrix, whose large entries would cancel
    Qa : (G, nq, nξ, nξ) or None — quadratic parts ξᵀ Qa ξ of the events ``iq``
    Qb : (G, nq, nξ, nξ) or None — bilinear parts ξᵀ Qb ξ' of the events ``iq``
    iq : (nq,) int array or None
    """

    def __init__(self, seg, E, Qa=None, Qb=None, iq=None):
        self.seg, self.E, self.Qa, self.Qb = seg, E, Qa, Qb
        #: highest derivative of ξ the events and their slopes need
        self.kmax = 3 if np.any(E[:, :, 2] != 0) else (2 if (np.any(E[:, :, 1] != 0) or Qa is not None) else 1)
        self.iq = None if Qa is None else np.asarray(iq, int)
        #: (G, ne) size below which a value is rounding (set by :func:`start_values`; 0 until then)
        self.ztol = np.zeros(E.shape[:2])
        #: (G,) [s] the rounding of the absolute start time behind ``ztol`` (START_ULPS ulp)
        self.tspace = np.zeros(E.shape[0])
        self.qmap = np.full(E.shape[1], -1)
        if Qa is not None:
            self.qmap[self.iq] = np.arange(self.iq.size)
        #: (G, ne) bool or None: events that cannot have fired at the segment's start (a mode event
        #: of a branch whose state did not change there): at zero within rounding and moving up,
        #: such an event fires now rather than counting as just fired
        self.fresh = None
        #: whether the quadratic and the bilinear parts are there at all (most events have one)
        self.has_qa = Qa is not None and bool(np.any(Qa))
        self.has_qb = Qa is not None and bool(np.any(Qb))

    def take(self, rows) -> Events:
        def q(Q):
            return None if Q is None else Q[rows]

        out = Events(self.seg.take(rows), self.E[rows], q(self.Qa), q(self.Qb), self.iq)
        out.ztol = self.ztol[rows]
        out.tspace = self.tspace[rows]
        out.fresh = None if self.fresh is None else self.fresh[rows]
        return out

    def values(self, tau, xs=None):
        """g and dg/dτ at τ of shape (G, K): arrays (G, K, ne); ``xs``: ξ and its derivatives
        there if already evaluated (:func:`_xis`)."""
        xs = _xis(self.seg, tau, self.kmax) if xs is None else xs
        G, ne, _, nxi = self.E.shape
        Et = self.E.reshape(G, ne, 3 * nxi).transpose(0, 2, 1)
        g = np.matmul(np.concatenate(xs[:3], axis=-1), Et)
        gp = np.matmul(np.concatenate(xs[1:], axis=-1), Et)
        x0, x1, x2 = xs[0], xs[1], xs[2]
        if self.has_qa:
            g[..., self.iq] += _bilinear(x0, self.Qa, x0)
            gp[..., self.iq] += 2 * _bilinear(x1, self.Qa, x0)
        if self.has_qb:
            g[..., self.iq] += _bilinear(x0, self.Qb, x1)
            gp[..., self.iq] += _bilinear(x1, self.Qb, x1) + _bilinear(x0, self.Qb, x2)
        return g, gp

    def scale(self, derivative: bool = False):
        """Size of each event's terms (or of its slope's terms) at τ = 0, for zero tolerances: (G, ne).

        Taken from the size of every term of the solution and its derivatives (not their sum), so
        that an event computed by cancellation is not mistaken for an accurate zero.
        """
        G = self.E.shape[0]
        sz = self.seg.sizes(3)
        one = np.ones((G, 1))
        zero = np.zeros((G, 1))
        xs = [np.concatenate([sz[0], one, zero], axis=1), np.concatenate([sz[1], zero, one], axis=1)]
        xs += [np.concatenate([x, zero, zero], axis=1) for x in sz[2:]]
        d = 1 if derivative else 0
        s = sum(np.einsum("gj,gej->ge", xs[k + d], np.abs(self.E[:, :, k])) for k in range(3))
        if self.Qa is not None:
            s[:, self.iq] += (np.einsum("gi,gqij,gj->gq", xs[0], np.abs(self.Qa), xs[d])
                              + np.einsum("gi,gqij,gj->gq", xs[0], np.abs(self.Qb), xs[1 + d]))
        return s


def _bilinear(u, Q, v):
    """uᵀ Q v for u, v of shape (G, K, n) and Q of shape (G, q, n, n): (G, K, q) — one batched
    product of the outer products u vᵀ (G, K, n²) with the flattened forms."""
    G, K, n = u.shape
    o = (u[..., :, None] * v[..., None, :]).reshape(G, K, n * n)
    return np.matmul(o, Q.reshape(G, Q.shape[1], n * n).transpose(0, 2, 1))


def start_values(ev: Events, t0):
    """Each event at τ = 0: (g0, g0', armed). A value zero within rounding counts as below zero
    (armed: the event may fire) if it moves down, or does not move at all (a tangency: the mode
    may be leaving its range at second order, which the event then catches at once), and as
    above zero (it just fired and moves away) if it moves up. Such an event is shifted by its
    rounding-level start value (``ev.E`` is changed in place), so that near τ = 0 it has the sign
    it was given and a refinement cannot land on a spurious root at the start: its value there
    is set to the rounding level ``ztol`` on its side. An event marked ``ev.fresh`` (it cannot have
    fired at this start) is armed even when moving up: it fires at once."""
    G = ev.E.shape[0]
    g0, gp0 = ev.values(np.zeros((G, 1)))
    g0, gp0 = g0[:, 0], gp0[:, 0]
    tspace = np.zeros(G) if t0 is None else START_ULPS * np.spacing(np.maximum(t0, 1e-300))
    tol = START_TOL * ev.scale() + tspace[:, None] * np.abs(gp0)
    flat = np.abs(gp0) <= START_TOL * ev.scale(derivative=True)
    near = np.abs(g0) <= tol
    moving_in = (gp0 < 0) | flat
    if ev.fresh is not None:
        moving_in = moving_in | ev.fresh
    armed = np.where(near, moving_in, g0 < 0)
    nX = ev.E.shape[3] - 2
    ev.ztol, ev.tspace = tol, tspace
    # (shifted to the edge of the rounding band on its side, not to zero: a tangency that turns
    # back at second order — a node at a vertical law's voltage with a rounding-level rate
    # while its net current falls — then stays on its side instead of grazing zero at once)
    signed = np.where(armed, -tol - 1e-300, tol + 1e-300)
    ev.E[:, :, 0, nX] -= np.where(near, g0 - signed, 0.0)
    g0 = np.where(near, signed, g0)
    return g0, gp0, armed


class _Pairs:
    """Selected (case, event) pairs, each with its own τ."""

    def __init__(self, ev: Events | None, gi=None, ei=None):
        if ev is None:
            return
        self.seg = ev.seg.take(gi)
        self.E = ev.E[gi, ei]
        self.kmax = ev.kmax
        q = ev.qmap[ei]
        self.quad = q >= 0
        # (the parts that are all zero are left out: None)
        self.Qa = ev.Qa[gi, np.maximum(q, 0)] if ev.has_qa else None
        self.Qb = ev.Qb[gi, np.maximum(q, 0)] if ev.has_qb else None
        self.ztol = ev.ztol[gi, ei]
        self.tspace = ev.tspace[gi]

    def take(self, rows) -> _Pairs:
        out = _Pairs(None)
        out.kmax = self.kmax
        out.ztol = self.ztol[rows]
        out.tspace = self.tspace[rows]
        out.seg = self.seg.take(rows)
        out.E = self.E[rows]
        out.quad = self.quad[rows]
        out.Qa = None if self.Qa is None else self.Qa[rows]
        out.Qb = None if self.Qb is None else self.Qb[rows]
        return out

    def local_ztol(self, rows, a, b):
        """Rounding level of g of the pairs ``rows`` on their brackets [a, b]: the start
        tolerance ``ztol``, lowered to that of the terms' sizes over the bracket
        (:meth:`ModalSegment.sizes_at`) where modes alive at the start (a fast node mode) have
        died away by then."""
        sub = self.take(rows)
        s, sd = sub._scale(a, b)
        return np.minimum(sub.ztol, START_TOL * s + sub.tspace * sd)

    def _scale(self, a, b):
        """Bound of the size of each pair's terms of g and of g' over [a, b] (P,): two arrays (P,)."""
        sz = self.seg.sizes_at(a, 3, upto=b)
        one = np.ones((a.size, 1))
        zero = np.zeros((a.size, 1))
        xs = [np.concatenate([sz[0], one, np.abs(b)[:, None]], axis=1), np.concatenate([sz[1], zero, one], axis=1)]
        xs += [np.concatenate([x, zero, zero], axis=1) for x in sz[2:]]
        xs += [np.zeros_like(xs[0])] * (4 - len(xs))
        E = np.abs(self.E)
        out = []
        for d in (0, 1):
            s = sum(np.sum(xs[k + d] * E[:, k], axis=-1) for k in range(3))
            q = np.zeros_like(s)
            if self.Qa is not None:
                qa = np.abs(self.Qa)
                q += _pair_form(xs[0], qa, xs[0]) if d == 0 else 2 * _pair_form(xs[0], qa, xs[1])
            if self.Qb is not None:
                qb = np.abs(self.Qb)
                q += _pair_form(xs[0], qb, xs[1]) if d == 0 else \
                    _pair_form(xs[1], qb, xs[1]) + _pair_form(xs[0], qb, xs[2])
            s = s + np.where(self.quad, q, 0.0)
            out.append(s)
        return out

    def values(self, tau):
        xs = _xis(self.seg, tau, self.kmax)
        P = self.E.shape[0]
        E = self.E.reshape(P, -1)
        g = np.sum(np.concatenate(xs[:3], axis=-1) * E, axis=-1)
        gp = np.sum(np.concatenate(xs[1:], axis=-1) * E, axis=-1)
        if not np.any(self.quad):
            return g, gp
        x0, x1, x2 = xs[0], xs[1], xs[2]
        q = np.zeros_like(g)
        qp = np.zeros_like(g)
        if self.Qa is not None:
            q += _pair_form(x0, self.Qa, x0)
            qp += 2 * _pair_form(x1, self.Qa, x0)
        if self.Qb is not None:
            q += _pair_form(x0, self.Qb, x1)
            qp += _pair_form(x1, self.Qb, x1) + _pair_form(x0, self.Qb, x2)
        return g + np.where(self.quad, q, 0.0), gp + np.where(self.quad, qp, 0.0)


def _pair_form(u, Q, v):
    """uᵀ Q v per pair: u, v (P, n), Q (P, n, n) → (P,)."""
    return np.sum(np.matmul(u[:, None, :], Q)[:, 0, :] * v, axis=-1)


def _xis(seg, tau, kmax: int = 3):
    """ξ and its first ``kmax`` derivatives at τ (zeros beyond): list of 4 arrays τ.shape + (nξ,)."""
    tau = np.asarray(tau, float)
    xs = seg.derivs(tau, kmax)
    xs = xs + [np.zeros_like(xs[0])] * (4 - len(xs))
    ones = np.ones(tau.shape + (1,))
    zeros = np.zeros_like(ones)
    out = [np.concatenate([xs[0], ones, tau[..., None]], axis=-1),
           np.concatenate([xs[1], zeros, ones], axis=-1)]
    out += [np.concatenate([x, zeros, zeros], axis=-1) for x in xs[2:]]
    return out


def grid_step(tau, exps, oscs, H):
    """Next grid spacing [s] at ``tau`` for each case.

    Parameters
    ----------
    tau : (G,) — [s]
    exps : list of (G,) — [1/s] rates of decaying real exponentials (0: none)
    oscs : list of ((G,), (G,)) — [1/s] (decay rate, angular frequency) of oscillations
    H : (G,) — [s] horizon
    """
    h = np.full(tau.shape, np.inf)
    for r in exps:
        live = (r > 0) & (tau * r < 41.0)
        with np.errstate(divide="ignore"):
            h = np.where(live, np.minimum(h, np.maximum(0.35 / r, 0.4 * tau)), h)
    for d, w in oscs:
        live = (w > 0) & (tau * d < 41.0)
        with np.errstate(divide="ignore"):
            hw = np.minimum(0.6 / w, np.where(d > 0, np.maximum(0.35 / d, 0.4 * tau), np.inf))
        h = np.where(live, np.minimum(h, hw), h)
    return np.minimum(h, H - tau)


#: grid points per case in one round where the spacing has stopped growing (a long, lightly damped
#: ring scanned at 0.6/ω: millions of points): the first such round has BULK_FIRST, each further
#: one in a row twice the last, up to BULK_ROUND (a Q = 2.6e5 ring: 9.4 → 2.8 s of CPU against a
#: fixed 256; a fixed 2048 wasted most of a short scan's last round: multi-clamp cases 2–4× slower),
#: bounded so that the round's values stay ~2·10⁴ per event however many cases are live. Up to 12
#: live cases get the same number, so that chunks of a few variants give the same grid, bit for bit,
#: as all of them at once (tests/test_batch_robust.py)
BULK_FIRST = 256
BULK_ROUND = 2048
_BULK_BUDGET = 12 * BULK_ROUND


def grid_round(start, live, exps, oscs, H, bulk: int = 0):
    """The next :data:`ROUND` grid points after ``start`` (G, ROUND), fewer once every live case
    has reached its horizon; cases not ``live`` stay put.

    Where the spacing no longer grows (every live mode's step saturated: two consecutive steps
    equal), up to :data:`BULK_ROUND` points at that spacing are placed at once. The spacing is
    non-decreasing in τ apart from the horizon (modes die, geometric growth behind decaying
    modes), so a constant step from the round's start is never coarser than the graded grid.
    ``bulk``: how many rounds in a row before this one were bulk (each places twice the last's
    points, from :data:`BULK_FIRST` up to :data:`BULK_ROUND`)."""
    G = start.shape[0]
    h1 = np.where(live, np.maximum(grid_step(start, exps, oscs, H), 0.0), 0.0)
    h2 = np.where(live, np.maximum(grid_step(start + h1, exps, oscs, H), 0.0), 0.0)
    K = min(BULK_FIRST << min(bulk, 8), BULK_ROUND, max(ROUND, _BULK_BUDGET // max(int(np.count_nonzero(live)), 1)))
    if K > ROUND and np.all(~live | (h2 == h1) | (start + h1 >= H)):
        k = np.arange(1, K + 1)
        pts = np.minimum(start[:, None] + h1[:, None] * k[None, :], np.where(live, H, start)[:, None])
        done = np.all(~live[:, None] | (pts >= H[:, None]), axis=0)
        if np.any(done):  # every case has reached its horizon: the rest would repeat it
            pts = pts[:, :int(np.argmax(done)) + 1]
        return pts
    pts = np.empty((G, ROUND))
    t = start.copy()
    for kk in range(ROUND):
        t = t + np.where(live, np.maximum(grid_step(t, exps, oscs, H), 0.0), 0.0)
        pts[:, kk] = t
        if np.all(~live | (t >= H)):
            # every case has reached its horizon: the rest of the round would repeat it
            return pts[:, :kk + 1]
    return pts


def first_event(ev: Events, H, exps, oscs, t0=None):
    """Earliest firing time of any event and which events fire there.

    Parameters
    ----------
    ev : Events
    H : (G,) — [s] horizon (an event at H must be among the events, so one always fires)
    exps, oscs — the segment's modes (see :func:`grid_step`)
    t0 : (G,) or None — [s] absolute time of the segment start (sets the zero tolerance)

    Returns
    -------
    tau : (G,) — [s] first firing time
    fired : (G, ne) bool — events firing at tau (within a relative 1e-12: coincident events)
    """
    G, ne = ev.E.shape[:2]
    g0, gp0, armed = start_values(ev, t0)
    best = np.full((G, ne), np.inf)
    numeric = np.ones((G, ne), bool)
    if isinstance(ev.seg, ScalarSegment):
        best, numeric = closed_scalar(ev, g0, armed, best)
        quad = quadratic(ev)
        if np.any(numeric & ~quad):
            r1, r2 = scalar_pieces(ev, g0, armed, H)
            lin = numeric & ~quad
            best = np.where(lin, np.minimum(r1, r2), best)
            numeric = numeric & quad
    best, numeric = _time_roots(ev, armed, best, numeric)
    need = numeric.any(axis=1)
    if np.any(need):
        rows = np.nonzero(need)[0]
        sub = ev.take(rows)
        sub.E = np.where(numeric[rows][..., None, None], sub.E, _never(sub.E))
        cap = np.minimum(H[rows], np.min(best[rows], axis=1))
        b = _scan(sub, cap, [x[rows] for x in exps], [(d[rows], w[rows]) for d, w in oscs],
                  np.where(numeric[rows], g0[rows], -1.0), gp0[rows])
        best[rows] = np.where(numeric[rows], b, best[rows])
    tau = np.min(best, axis=1)
    tau = np.where(np.isfinite(tau), tau, H)
    fired = best <= tau[:, None] * (1 + 1e-12) + 1e-300
    return tau, fired


def _time_roots(ev: Events, armed, best, numeric):
    """Closed roots of the events that depend on τ alone (``c + s·τ``: the end of the fall, the
    time bound). Taken before the scan, they bound it: a segment under a 200 ns fall is then not
    scanned over the microseconds its slow modes would set the grid to."""
    nX = ev.E.shape[3] - 2
    E = ev.E
    only_t = ~np.any(E[:, :, 0, :nX] != 0, axis=-1) & ~np.any(E[:, :, 1:] != 0, axis=(-1, -2))
    only_t &= numeric & ~quadratic(ev)
    if not np.any(only_t):
        return best, numeric
    s = E[:, :, 0, nX + 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        # (the coefficients as start_values left them: a rounding-level start value shifted out)
        r = np.where(armed & (s > 0), np.maximum(-E[:, :, 0, nX] / s, 0.0), np.inf)
    return np.where(only_t, r, best), numeric & ~only_t


def _never(E):
    out = np.zeros_like(E)
    out[..., 0, -2] = -1.0
    return out


def _scan(ev, H, exps, oscs, g0, gp0):
    """Grid scan and refinement: first root per (case, event) before ``H``; inf if none."""
    G, ne = ev.E.shape[:2]
    best = np.full((G, ne), np.inf)
    rows = np.arange(G)  # the cases still scanned (the working set shrinks as cases finish)
    found = np.zeros(G, bool)
    start = np.zeros(G)
    ga, gpa = g0, gp0
    bulk = 0
    for _ in range(1_000_000):
        live = ~found & (start < H)
        if not np.any(live):
            break
        if should_compact(live):
            k = np.nonzero(live)[0]
            rows, ev, found, start = rows[k], ev.take(k), found[k], start[k]
            ga, gpa, H, live = ga[k], gpa[k], H[k], live[k]
            exps, oscs = modes_take(exps, oscs, k)
        pts = grid_round(start, live, exps, oscs, H, bulk)
        bulk = bulk + 1 if pts.shape[1] > ROUND else 0
        g, gp = ev.values(pts)
        left_t = np.concatenate([start[:, None], pts[:, :-1]], axis=1)
        gl = np.concatenate([ga[:, None, :], g[:, :-1]], axis=1)
        gpl = np.concatenate([gpa[:, None, :], gp[:, :-1]], axis=1)
        lo, hi, ok = _brackets(ev, left_t, pts, gl, gpl, g, gp, live)
        if np.any(ok):
            # only brackets that can hold the earliest root need refining
            first_hi = np.min(np.where(ok, hi, np.inf), axis=1)
            ok &= lo <= first_hi[:, None]
            gi, ei = np.nonzero(ok)
            root = _refine(_Pairs(ev, gi, ei), lo[gi, ei], hi[gi, ei])
            best[rows[gi], ei] = root
            found |= ok.any(axis=1)
        start = np.where(live, pts[:, -1], start)
        ga, gpa = g[:, -1], gp[:, -1]
    return best


#: a scan's working set is cut to its live cases once fewer than this fraction of it are live
#: (every round evaluates every case of the set; most cases finish within a few rounds)
COMPACT_BELOW = 0.6


def should_compact(live) -> bool:
    """Whether the scan's working set should be cut to its live cases (see COMPACT_BELOW)."""
    return live.size > 8 and np.count_nonzero(live) < COMPACT_BELOW * live.size


def modes_take(exps, oscs, k):
    """The segment modes (see :func:`grid_step`) of the cases ``k`` only."""
    return [x[k] for x in exps], [(d[k], w[k]) for d, w in oscs]


def _brackets(ev, tl, tr, gl, gpl, gr, gpr, live):
    """For each (case, event) the first interval of the round holding an upward crossing.

    Returns (lo, hi, ok) of shape (G, ne): a bracket with g(lo) < 0 ≤ g(hi).
    """
    G, K, ne = gl.shape
    h = (tr - tl)[:, :, None]
    cross = (gl < 0) & (gr >= 0)
    # grazing extrema: the cubic Hermite model's extreme value between the points
    span = np.abs(gl) + np.abs(gr)
    cand_peak = (gl < 0) & (gr < 0) & (gpl > 0) & (gpr < 0)
    cand_dip = (gl >= 0) & (gr >= 0) & (gpl < 0) & (gpr > 0)
    peak = np.zeros_like(cand_peak)
    dip = np.zeros_like(cand_dip)
    if np.any(cand_peak | cand_dip):
        ext = np.full(gl.shape, np.nan)
        for s in (0.25, 0.5, 0.75):
            m = ((2 * s**3 - 3 * s**2 + 1) * gl + (s**3 - 2 * s**2 + s) * h * gpl + (-2 * s**3 + 3 * s**2) * gr
                 + (s**3 - s**2) * h * gpr)
            ext = np.where(cand_peak, np.fmax(ext, m), np.fmin(ext, m))
        peak = cand_peak & (ext >= -0.25 * span)
        dip = cand_dip & (ext <= 0.25 * span)
    todo = (cross | peak | dip) & live[:, None, None]
    lo = np.zeros((G, ne))
    hi = np.zeros((G, ne))
    ok = np.zeros((G, ne), bool)
    for _ in range(K):
        cand = todo.any(axis=1) & ~ok
        if not np.any(cand):
            break
        kidx = np.argmax(todo, axis=1)
        gi, ei = np.nonzero(cand)
        ki = kidx[gi, ei]
        a, b = tl[gi, ki], tr[gi, ki]
        is_cross = cross[gi, ki, ei]
        lo_i, hi_i, ok_i = a.copy(), b.copy(), is_cross.copy()
        ext = ~is_cross
        if np.any(ext):
            pairs = _Pairs(ev, gi[ext], ei[ext])
            te = _extremum(pairs, a[ext], b[ext])
            gte, _ = pairs.values(te)
            was_peak = peak[gi[ext], ki[ext], ei[ext]]
            hit = np.where(was_peak, gte >= 0, gte < 0)
            lo_i[ext] = np.where(was_peak, a[ext], te)
            hi_i[ext] = np.where(was_peak, te, b[ext])
            ok_i[ext] = hit
        lo[gi, ei], hi[gi, ei] = lo_i, hi_i
        ok[gi, ei] = ok_i
        todo[gi, ki, ei] = False
        todo &= ~ok[:, None, :]
    return lo, hi, ok


def _extremum(pairs, a, b):
    """Where dg/dτ changes sign in (a, b) for each pair (bisection)."""
    _, da = pairs.values(a)
    sa = np.sign(da)
    for _ in range(_EXTREMUM_HALVINGS):
        m = 0.5 * (a + b)
        _, dm = pairs.values(m)
        same = np.sign(dm) == sa
        a = np.where(same, m, a)
        b = np.where(same, b, m)
    return 0.5 * (a + b)
