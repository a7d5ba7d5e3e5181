"""Every root of the figure events on a segment whose end is known.

The conduction state ends at the first *stop* event (:func:`kickback.engine.pwl_roots.first_event`);
the figures need more points inside the segment: each extremum of the node voltage and of every
chain current, each crossing of a conduction threshold, of the 10 % and 1 % levels and of the
release current. They are all found here in one scan of ``(0, T]`` (the same grid and grazing
tests as for the stop events) and refined on the exact solution, so the segment is not split
at them.
"""

from __future__ import annotations

import numpy as np

from kickback.engine.pwl import ScalarSegment
from kickback.engine.pwl_roots import (
    ROUND,
    Events,
    _bilinear,
    _extremum,
    _never,
    _Pairs,
    _refine,
    _xis,
    grid_round,
    modes_take,
    should_compact,
    start_values,
)
from kickback.engine.pwl_scalar_roots import closed_scalar, quadratic, scalar_pieces


def all_roots(ev: Events, T, exps, oscs, t0, peaks=None):
    """Every upward zero crossing of every event in ``(0, T]``.

    Events flagged in ``peaks`` are extrema wanted only for the largest value of what they
    extremise (``g = −s'``: a root is a maximum of ``s``): on a scanned segment a bracket whose
    maximum of ``s`` stays below what another bracket's maximum is known to reach (its larger
    end value) is dropped before it is refined — the largest interior maximum is kept, whatever
    the segment's ends reach (a blocking chain's stand-off is read there). See :func:`_peak_bound`.

    Parameters
    ----------
    ev : Events
    T : (G,) — [s] end of the segment
    exps, oscs — the segment's modes (see :func:`kickback.engine.pwl_roots.grid_step`)
    t0 : (G,) — [s] absolute start time (zero tolerance)
    peaks : (ne,) bool or None — events wanted only at the largest maximum (see above)

    Returns
    -------
    (case, event, tau) : flat int, int, float arrays of the roots; and g0 (G, ne), the effective
    start values (g0 > 0: the event starts above zero).
    """
    G, ne = ev.E.shape[:2]
    g0, gp0, armed = start_values(ev, t0)
    cases, events, taus = [], [], []
    numeric = np.ones((G, ne), bool)
    if isinstance(ev.seg, ScalarSegment):
        best, numeric = closed_scalar(ev, g0, armed, np.full((G, ne), np.inf))
        hit = ~numeric & (best <= T[:, None] * (1 + 1e-12))
        gi, ei = np.nonzero(hit)
        cases.append(gi)
        events.append(ei)
        taus.append(best[gi, ei])
        quad = quadratic(ev)
        lin = numeric & ~quad
        if np.any(lin):
            for r in scalar_pieces(ev, g0, armed, T):
                hit = lin & (r <= T[:, None] * (1 + 1e-12))
                gi, ei = np.nonzero(hit)
                cases.append(gi)
                events.append(ei)
                taus.append(r[gi, ei])
            numeric = numeric & quad
    need = numeric.any(axis=1) & (T > 0)
    if np.any(need):
        rows = np.nonzero(need)[0]
        sub = ev.take(rows)
        sub.E = np.where(numeric[rows][..., None, None], sub.E, _never(sub.E))
        gi, ei, r = _scan_all(sub, T[rows], [x[rows] for x in exps], [(d[rows], w[rows]) for d, w in oscs],
                              np.where(numeric[rows], g0[rows], 1.0), gp0[rows], _peak_forms(sub, peaks))
        cases.append(rows[gi])
        events.append(ei)
        taus.append(r)
    return (np.concatenate(cases) if cases else np.zeros(0, int), np.concatenate(events) if events else
            np.zeros(0, int), np.concatenate(taus) if taus else np.zeros(0)), g0


def _scan_all(ev, H, exps, oscs, g0, gp0, pk=None):
    G, ne = ev.E.shape[:2]
    full, pk_full = ev, pk
    rows = np.arange(G)  # the cases still scanned (the working set shrinks as cases finish)
    start = np.zeros(G)
    ga, gpa = g0, gp0
    bulk = 0
    out_g, out_e, out_lo, out_hi, out_ga, out_gb = [], [], [], [], [], []
    bound = []  # per crossing bracket: an upper bound of s inside it (peak events; −inf: keep)
    if pk is not None:
        sa = pk.values(_xis(ev.seg, np.zeros((G, 1)), 1))[:, 0]
        # the best value an interior maximum is known to reach (a bracket's larger end value):
        # not the segment's start, so that the largest interior maximum is always kept (a blocking
        # chain's stand-off is read there even where the segment starts higher)
        s_best = np.full_like(sa, -np.inf)
    for _ in range(1_000_000):
        live = start < H * (1 - 1e-15)
        if not np.any(live):
            break
        if should_compact(live):
            k = np.nonzero(live)[0]
            rows, ev, start, ga, gpa, H, live = rows[k], ev.take(k), start[k], ga[k], gpa[k], H[k], live[k]
            exps, oscs = modes_take(exps, oscs, k)
            if pk is not None:
                pk, sa = _PeakForms(ev, pk.mask[k]), sa[k]
        pts = grid_round(start, live, exps, oscs, H, bulk)
        bulk = bulk + 1 if pts.shape[1] > ROUND else 0
        xs = _xis(ev.seg, pts, ev.kmax)
        g, gp = ev.values(pts, xs)
        if pk is not None:
            sv = pk.values(xs)
        tl = np.concatenate([start[:, None], pts[:, :-1]], axis=1)
        gl = np.concatenate([ga[:, None, :], g[:, :-1]], axis=1)
        gpl = np.concatenate([gpa[:, None, :], gp[:, :-1]], axis=1)
        nonzero = (pts - tl) > 0
        lv = (live[:, None] & nonzero)[..., None]
        cross = (gl < 0) & (g >= 0) & lv
        gi, ki, ei = np.nonzero(cross)
        out_g.append(rows[gi])
        out_e.append(ei)
        out_lo.append(tl[gi, ki])
        out_hi.append(pts[gi, ki])
        out_ga.append(gl[gi, ki, ei])
        out_gb.append(g[gi, ki, ei])
        if pk is not None:
            svl = np.concatenate([sa[:, None, :], sv[:, :-1]], axis=1)
            bound.append(_peak_bound(svl[gi, ki, ei], sv[gi, ki, ei], -gl[gi, ki, ei], -g[gi, ki, ei],
                                     (pts - tl)[gi, ki]))
            np.fmax.at(s_best, (rows[gi], ei), np.maximum(svl[gi, ki, ei], sv[gi, ki, ei]))
        else:
            bound.append(np.full(gi.size, np.inf))
        cand_peak = (gl < 0) & (g < 0) & (gpl > 0) & (gp < 0) & lv
        cand_dip = (gl >= 0) & (g >= 0) & (gpl < 0) & (gp > 0) & lv
        span = np.abs(gl) + np.abs(g)
        h = (pts - tl)[:, :, None]
        for cand, is_peak in ((cand_peak, True), (cand_dip, False)):
            if not np.any(cand):
                continue
            ext = None
            for s in (0.25, 0.5, 0.75):
                m = ((2 * s**3 - 3 * s**2 + 1) * gl + (s**3 - 2 * s**2 + s) * h * gpl + (-2 * s**3 + 3 * s**2) * g
                     + (s**3 - s**2) * h * gp)
                ext = m if ext is None else (np.fmax(ext, m) if is_peak else np.fmin(ext, m))
            sus = cand & ((ext >= -0.25 * span) if is_peak else (ext <= 0.25 * span))
            sgi, ski, sei = np.nonzero(sus)
            if sgi.size == 0:
                continue
            pairs = _Pairs(ev, sgi, sei)
            a, b = tl[sgi, ski], pts[sgi, ski]
            te = _extremum(pairs, a, b)
            gte, _ = pairs.values(te)
            ok = (gte >= 0) if is_peak else (gte < 0)
            out_g.append(rows[sgi[ok]])
            out_e.append(sei[ok])
            out_lo.append(np.where(is_peak, a, te)[ok])
            out_hi.append(np.where(is_peak, te, b)[ok])
            ga_, _ = pairs.values(np.where(is_peak, a, te))
            gb_, _ = pairs.values(np.where(is_peak, te, b))
            out_ga.append(ga_[ok])
            out_gb.append(gb_[ok])
            bound.append(np.full(int(np.count_nonzero(ok)), np.inf))
        start = np.where(live, pts[:, -1], start)
        ga, gpa = g[:, -1], gp[:, -1]
        if pk is not None:
            sa = np.where(live[:, None], sv[:, -1], sa)
    gi = np.concatenate(out_g) if out_g else np.zeros(0, int)
    ei = np.concatenate(out_e) if out_e else np.zeros(0, int)
    if gi.size == 0:
        return gi, ei, np.zeros(0)
    lo = np.concatenate(out_lo)
    hi = np.concatenate(out_hi)
    ga, gb = np.concatenate(out_ga), np.concatenate(out_gb)
    if pk is not None:
        ub = np.concatenate(bound)
        best = s_best[gi, ei]
        keep = ~pk_full.mask[gi, ei] | ~(ub < best - _PEAK_MARGIN * (np.abs(best) + np.abs(ub)))
        gi, ei, lo, hi, ga, gb = gi[keep], ei[keep], lo[keep], hi[keep], ga[keep], gb[keep]
    root = _refine(_Pairs(full, gi, ei), lo, hi, ga, gb, figure=True)
    return gi, ei, root


#: relative margin by which a bracket's bound must stay below a grid value to be dropped
_PEAK_MARGIN = 1e-9


def _peak_bound(sl, sr, dl, dr, h):
    """Upper bound of ``s`` on a bracket of width ``h`` from its end values and slopes: the
    largest value of the cubic Hermite interpolant (sampled on ninths), raised by a tenth of the
    largest rise the end slopes allow over the bracket. The grid keeps brackets short against
    every mode (:func:`kickback.engine.pwl_roots.grid_step`: ≤ 0.35/λ, ≤ 0.6/ω), where the cubic's
    error is ~(hλ)⁴/384 ≤ 4e-4 of the extremised signal's size, far inside the margin."""
    best = np.maximum(sl, sr)
    for u in np.arange(1, 9) / 9.0:
        m = ((2 * u**3 - 3 * u**2 + 1) * sl + (u**3 - 2 * u**2 + u) * h * dl + (-2 * u**3 + 3 * u**2) * sr
             + (u**3 - u**2) * h * dr)
        best = np.maximum(best, m)
    return best + 0.1 * h * np.maximum(np.abs(dl), np.abs(dr))


class _PeakForms:
    """The signals ``s`` (with ``g = −s'``) of the peak events, on a segment: ``s = −(c₁·ξ + c₂·ξ')``
    for an event ``g = c₁·ξ' + c₂·ξ''``, ``s = −½ ξᵀQξ`` for ``g = ξᵀQξ'`` with Q symmetric."""

    def __init__(self, ev, mask):
        self.ev, self.mask = ev, mask

    def values(self, xs):
        """s for every event (0 where not a peak event) from ξ and ξ' at τ (G, K) (:func:`_xis`):
        (G, K, ne)."""
        ev = self.ev
        G, ne, _, nxi = ev.E.shape
        Et = ev.E[:, :, 1:].reshape(G, ne, 2 * nxi).transpose(0, 2, 1)
        s = -np.matmul(np.concatenate(xs[:2], axis=-1), Et)
        if ev.has_qb:
            s[..., ev.iq] -= 0.5 * _bilinear(xs[0], ev.Qb, xs[0])
        return np.where(self.mask[:, None, :], s, 0.0)


def _peak_forms(ev, peaks):
    """The peak events that really are extrema of a signal (no value term, no quadratic part
    in ξ alone, a symmetric bilinear part): a :class:`_PeakForms`, or None when there are none."""
    if peaks is None:
        return None
    mask = np.asarray(peaks, bool)[None, :] & np.all(ev.E[:, :, 0] == 0, axis=2)
    if ev.Qa is not None:
        ok = np.all(ev.Qa == 0, axis=(2, 3)) & np.all(ev.Qb == np.swapaxes(ev.Qb, 2, 3), axis=(2, 3))
        mask[:, ev.iq] &= ok
    return _PeakForms(ev, mask) if np.any(mask) else None
