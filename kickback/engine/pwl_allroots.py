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
    _extremum,
    _never,
    _Pairs,
    _refine,
    grid_step,
    start_values,
)
from kickback.engine.pwl_scalar_roots import closed_scalar, quadratic, scalar_pieces


def all_roots(ev: Events, T, exps, oscs, t0):
    """Every upward zero crossing of every event in ``(0, T]``.

    Parameters
    ----------
    ev : Events
    T : (G,) — [s] end of the segment
    exps, oscs — the segment's modes (see :func:`kickback.engine.pwl_roots.grid_step`)
    t0 : (G,) — [s] absolute start time (zero tolerance)

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
                              np.where(numeric[rows], g0[rows], 1.0), gp0[rows])
        cases.append(rows[gi])
        events.append(ei)
        taus.append(r)
    return (np.concatenate(cases) if cases else np.zeros(0, int), np.concatenate(events) if events else
            np.zeros(0, int), np.concatenate(taus) if taus else np.zeros(0)), g0


def _scan_all(ev, H, exps, oscs, g0, gp0):
    G, ne = ev.E.shape[:2]
    start = np.zeros(G)
    ga, gpa = g0, gp0
    out_g, out_e, out_lo, out_hi, out_ga, out_gb = [], [], [], [], [], []
    for _ in range(1_000_000):
        live = start < H * (1 - 1e-15)
        if not np.any(live):
            break
        pts = np.empty((G, ROUND))
        t = start.copy()
        for kk in range(ROUND):
            t = t + np.where(live, np.maximum(grid_step(t, exps, oscs, H), 0.0), 0.0)
            pts[:, kk] = t
        g, gp = ev.values(pts)
        tl = np.concatenate([start[:, None], pts[:, :-1]], axis=1)
        gl = np.concatenate([ga[:, None, :], g[:, :-1]], axis=1)
        gpl = np.concatenate([gpa[:, None, :], gp[:, :-1]], axis=1)
        nonzero = (pts - tl) > 0
        lv = (live[:, None] & nonzero)[..., None]
        cross = (gl < 0) & (g >= 0) & lv
        gi, ki, ei = np.nonzero(cross)
        out_g.append(gi)
        out_e.append(ei)
        out_lo.append(tl[gi, ki])
        out_hi.append(pts[gi, ki])
        out_ga.append(gl[gi, ki, ei])
        out_gb.append(g[gi, ki, ei])
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
            out_g.append(sgi[ok])
            out_e.append(sei[ok])
            out_lo.append(np.where(is_peak, a, te)[ok])
            out_hi.append(np.where(is_peak, te, b)[ok])
            ga_, _ = pairs.values(np.where(is_peak, a, te))
            gb_, _ = pairs.values(np.where(is_peak, te, b))
            out_ga.append(ga_[ok])
            out_gb.append(gb_[ok])
        start = np.where(live, pts[:, -1], start)
        ga, gpa = g[:, -1], gp[:, -1]
    gi = np.concatenate(out_g) if out_g else np.zeros(0, int)
    ei = np.concatenate(out_e) if out_e else np.zeros(0, int)
    if gi.size == 0:
        return gi, ei, np.zeros(0)
    lo = np.concatenate(out_lo)
    hi = np.concatenate(out_hi)
    root = _refine(_Pairs(ev, gi, ei), lo, hi, np.concatenate(out_ga), np.concatenate(out_gb))
    return gi, ei, root
