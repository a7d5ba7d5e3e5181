"""Roots of the events of a one-state segment in closed form or on at most two monotone pieces.

Without a ramp an event is monotone and its root closed (:func:`closed_scalar`). Under a ramp
(:func:`scalar_pieces`: one dynamic state, the switch current falling linearly) every event is

.. math:: g(τ) = A_0 + A_1 τ + B\\,E_1(τ) + D\\,E_2(τ), \\qquad E_1 = τφ_1(βτ),\\ E_2 = τ^2φ_2(βτ),

whose second derivative ``(Bβ + D)·e^{βτ}`` keeps one sign: ``g'`` is monotone, so ``g`` has at
most one turning point, at ``E_1(τ_c) = −(A_1 + B)/(Bβ + D)`` (closed form, E_1 inverted by
``log1p``), and is monotone on each side of it. Each side is tested for an upward sign change and
its root refined on the exact solution (Newton inside the bracket) — at most two roots per event.
"""

from __future__ import annotations

import numpy as np

from kickback.engine.pwl_functions import log1p_ratio


def scalar_pieces(ev, g0, armed, H):
    """Upward roots in ``(0, H]`` of the non-quadratic events of a scalar segment.

    Parameters
    ----------
    ev : Events — on a ScalarSegment
    g0 : (G, ne) — start values (rounding-level values signed by :func:`start_values`)
    armed : (G, ne) bool
    H : (G,) — [s]

    Returns
    -------
    (r1, r2) : (G, ne) — first and second root (inf where none)
    """
    from kickback.engine.pwl_roots import _Pairs, _refine

    seg = ev.seg
    nX = ev.E.shape[3] - 2
    k = seg.k
    E = ev.E
    beta = seg.beta[:, None]
    f0 = seg.f0[:, None]
    gam = seg.gamma[:, None]
    c = f0 * beta + gam
    A1 = E[:, :, 0, nX + 1]
    B = E[:, :, 0, k] * f0 + E[:, :, 1, k] * c + E[:, :, 2, k] * c * beta
    D = E[:, :, 0, k] * gam
    curv = B * beta + D
    with np.errstate(divide="ignore", invalid="ignore"):
        q = -(A1 + B) / curv
        x = beta * q
        tc = q * log1p_ratio(np.where(x > -1, x, 0.0))
    turn = np.isfinite(tc) & (q > 0) & (x > -1) & (curv != 0)
    Hb = np.broadcast_to(H[:, None], tc.shape)
    tc = np.where(turn, np.minimum(tc, Hb), Hb)
    G, ne = g0.shape
    gi, ei = np.nonzero(np.ones((G, ne), bool))
    pairs = _Pairs(ev, gi, ei)
    gc, _ = pairs.values(tc.ravel())
    gH, _ = pairs.values(Hb.ravel())
    gc, gH = gc.reshape(G, ne), gH.reshape(G, ne)
    r1 = np.full((G, ne), np.inf)
    r2 = np.full((G, ne), np.inf)
    first = armed & (gc >= 0)
    second = turn & (tc < Hb) & (gc < 0) & (gH >= 0)
    for mask, lo, hi, glo, ghi, out in ((first, 0.0, tc, g0, gc, r1), (second, tc, Hb, gc, gH, r2)):
        a, b = np.nonzero(mask)
        if a.size == 0:
            continue
        lo_ = np.broadcast_to(lo, (G, ne))[a, b]
        out[a, b] = _refine(_Pairs(ev, a, b), lo_, hi[a, b], np.minimum(glo[a, b], -1e-300), ghi[a, b])
    return r1, r2


def quadratic(ev):
    """(G, ne) bool: events with a quadratic part on these cases."""
    G, ne = ev.E.shape[:2]
    quad = np.zeros((G, ne), bool)
    if ev.Qa is not None:
        quad[:, ev.iq] = np.any(ev.Qa != 0, axis=(2, 3)) | np.any(ev.Qb != 0, axis=(2, 3))
    return quad


def closed_scalar(ev, g0, armed, best):
    """Closed-form roots of the monotone events of a ramp-free scalar segment.

    With no ramp, x_k − x_k(0) = f0·E1(τ) and every derivative is a multiple of e^{βτ} = 1 + β·E1,
    so an event is g(0) + s·E1(τ) + c_τ·τ; with c_τ = 0 (or no state term) its root is closed.
    """
    seg = ev.seg
    nX = ev.E.shape[3] - 2
    k = seg.k
    E = ev.E
    beta = seg.beta[:, None]
    f0 = seg.f0[:, None]
    ci = E[:, :, 0, k] + beta * E[:, :, 1, k] + beta * beta * E[:, :, 2, k]
    ct = E[:, :, 0, nX + 1]
    quad = np.zeros(ci.shape, bool)
    if ev.Qa is not None:
        quad[:, ev.iq] = np.any(ev.Qa != 0, axis=(2, 3)) | np.any(ev.Qb != 0, axis=(2, 3))
    ramp = (seg.gamma != 0)[:, None]
    closed = ~quad & ~ramp & ((ct == 0) | (ci == 0))
    slope = ci * f0
    with np.errstate(divide="ignore", invalid="ignore"):
        q = -g0 / slope
        x = beta * q
        tau_e = q * log1p_ratio(np.where(x > -1, x, 0.0))
        ok_e = armed & (slope > 0) & (x > -1) & (ct == 0)
        tau_t = -g0 / ct
        ok_t = armed & (ct > 0) & (ci == 0)
    root = np.where(ok_e, tau_e, np.where(ok_t, tau_t, np.inf))
    best = np.where(closed, root, best)
    return best, ~closed
