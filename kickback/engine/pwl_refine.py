"""Refinement of bracketed roots of event functions, many (case, event) pairs at once.

Newton steps kept inside the bracket; false position (Illinois) when a step leaves it; a probe
next to an end that a Newton step overshoots; bisection while the function still falls on the
lower side (the crossing lies beyond a minimum).

References
----------
W. H. Press et al., Numerical Recipes, 3rd ed., CUP 2007, §9.2 (false position, the Illinois
variant), §9.4 (Newton–Raphson with bisection).
"""

from __future__ import annotations

import numpy as np

_NEWTON_ITERS = 100
#: a figure root's refinement ends at a Newton step this fraction of its bracket (see _refine)
_FIGURE_STEP = 1e-9


def _refine(pairs, a, b, ga=None, gb=None, *, figure: bool = False):
    """Root of g in [a, b] (g(a) < 0 ≤ g(b)) per pair, to a few ulp: Newton steps kept inside the
    bracket, false position (Illinois) when a step leaves it; returns a point where g ≥ 0.

    With ``figure`` (a root a figure is read at, not one the segment ends at) a Newton step
    inside the bracket shorter than 1e-9 of the bracket ends the refinement: its quadratic
    convergence puts the next iterate within rounding of the root, and the side of the root it
    lands on does not matter there.
    """
    P = a.size
    a, b = a.copy(), b.copy()
    if ga is None or gb is None:
        ga, _ = pairs.values(a)
        gb, _ = pairs.values(b)
    ga, gb = np.minimum(ga.copy(), -1e-300), np.maximum(gb.copy(), 0.0)
    width = (b - a) * _FIGURE_STEP if figure else np.zeros(P)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = a - ga * (b - a) / (gb - ga)
    x = np.where(np.isfinite(x) & (x > a) & (x < b), x, 0.5 * (a + b))
    out = b.copy()
    idx = np.arange(P)
    sub = pairs
    pos = np.arange(P)  # row of each active pair in ``sub``
    side = np.zeros(P, int)  # Illinois: which end was kept last
    for _it in range(_NEWTON_ITERS):
        xa = x[idx]
        g, gp = sub.values(_rows_at(xa, pos, sub))
        g, gp = g[pos], gp[pos]
        a_, b_, ga_, gb_ = a[idx], b[idx], ga[idx], gb[idx]
        # a value within rounding of zero while g falls is on the lower side: an upward
        # crossing has g' ≥ 0, and the bracket's upper end still lies beyond one. The rounding
        # level is the segment start's, lowered to the bracket's own where modes have died away
        # (computed only where it decides)
        neg = g < 0
        near = ~neg & (g <= pairs.ztol[idx]) & (gp < 0)
        if np.any(near):
            r = np.nonzero(near)[0]
            near[r] = g[r] <= pairs.local_ztol(idx[r], a_[r], b_[r])
            neg |= near
        a_ = np.where(neg, xa, a_)
        ga_ = np.where(neg, np.minimum(g, -1e-300), ga_)
        b_ = np.where(neg, b_, xa)
        gb_ = np.where(neg, gb_, g)
        s_ = np.where(neg, -1, 1)
        # Illinois: halve the value kept twice in a row
        same = side[idx] == s_
        ga_ = np.where(same & ~neg, 0.5 * ga_, ga_)
        gb_ = np.where(same & neg, 0.5 * gb_, gb_)
        side[idx] = s_
        with np.errstate(divide="ignore", invalid="ignore"):
            xn = xa - g / gp
            xf = a_ - ga_ * (b_ - a_) / (gb_ - ga_)
        inside = np.isfinite(xn) & (xn > a_) & (xn < b_)
        fp = np.isfinite(xf) & (xf > a_) & (xf < b_)
        ulp = np.spacing(np.maximum(np.abs(xa), 1e-300))
        # a Newton step past an end says the root is near that end (a root within rounding of a
        # bracket end stalls false position): probe there, as far in as the step overshot
        half = 0.5 * (b_ - a_)
        with np.errstate(invalid="ignore"):
            probe_a = a_ + np.minimum(half, np.maximum(4 * ulp, a_ - xn))
            probe_b = b_ - np.minimum(half, np.maximum(4 * ulp, xn - b_))
        xo = np.where(fp, xf, a_ + half)
        xo = np.where(np.isfinite(xn) & (xn <= a_), probe_a, np.where(np.isfinite(xn) & (xn >= b_), probe_b, xo))
        # still falling on the lower side: the crossing lies beyond a minimum, where neither
        # Newton nor false position leads; halve the bracket
        xo = np.where(neg & (gp < 0), a_ + half, xo)
        xn = np.where(inside & ~(neg & (gp < 0)), xn, xo)
        step = np.abs(xn - xa)
        done = ((g == 0) & ~neg) | ((b_ - a_) <= 4 * ulp) | (inside & (step <= 2 * ulp))
        # converged from below: the root lies within the Newton step above xa (or at b)
        up = np.minimum(b_, np.maximum(xn, xa + 2 * ulp))
        res = np.where(neg, up, xa)
        if figure:
            short = ((inside & (step <= width[idx])) | ((b_ - a_) <= width[idx])) & ~done
            res = np.where(short, xn, res)
            done = done | short
        out[idx] = np.where(done, res, out[idx])
        a[idx], b[idx], ga[idx], gb[idx], x[idx] = a_, b_, ga_, gb_, xn
        keep = ~done
        if not np.any(keep):
            break
        idx = idx[keep]
        pos = pos[keep]
        if idx.size < 0.5 * len(sub.E):  # compact the active pairs only when they have halved
            sub = pairs.take(idx)
            pos = np.arange(idx.size)
    else:
        # not converged (Newton steps that alternate about a root on the event's rounding noise,
        # each step far longer than an ulp of τ): the bracket's upper end, where g ≥ 0, is within
        # the bracket of the root; the end it started from may lie far beyond (the segment's
        # horizon: a varistor segment's end 1 ns into a 5.5 µs fall was read at the fall's end,
        # wide-range case 5937, peak 45 V against 25 V)
        out[idx] = b[idx]
    return out


def _rows_at(xa, pos, sub):
    """τ for every row of ``sub``: the active pairs' iterates at their rows, the others unused."""
    if pos.size == len(sub.E):
        return xa
    tau = np.zeros(len(sub.E))
    tau[pos] = xa
    return tau
