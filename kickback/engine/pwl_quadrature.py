"""Energy moments of a segment by numerical quadrature, where the closed form would cancel.

:meth:`kickback.engine.pwl.ModalSegment.moments` integrates ``ξ ξᵀ`` in closed form; where its
particular and modal parts are large against the state (see ``pwl._CANCEL``) the closed form
loses digits, and :func:`quadrature_moments` integrates the same matrix by Gauss–Legendre on
panels graded to the segment's rates (:func:`mode_rates`).

References
----------
P. J. Davis and P. Rabinowitz, Methods of Numerical Integration, 2nd ed., Academic Press 1984,
§2.7 (Gauss–Legendre rules; composite rules on graded panels).
"""

from __future__ import annotations

import numpy as np

_GL_X, _GL_W = np.polynomial.legendre.leggauss(16)
#: panels per case after which the energy quadrature of a segment gives up on that case
MAX_QUADRATURE_PANELS = 100_000
QUADRATURE_FAILURE = "the energy quadrature of a segment needed more than 10⁵ panels"


def mode_rates(terms, idx=slice(None)):
    """(real rates, slow rate) [1/s] of a segment's modes ``terms`` (see :class:`ModalSegment`)
    for quadrature panels: every real rate (a single real mode's, each root of a real pair),
    and the largest rate that limits panels over the whole segment — an oscillation's
    ν + |μ|, or a real pair's slower root. A single real mode (the first of two terms, w² = 0,
    no S part) is a real rate only: as the "slow" rate a fast node mode would cap every panel
    at 1.5/λ_fast over the whole segment."""
    fast = []
    slow = None
    single = len(terms) == 2
    for n, (m, w2, _a, _b, rp) in enumerate(terms):
        m, w2, rp = m[idx], w2[idx], rp[idx]
        if slow is None:
            slow = np.zeros_like(m)
        wr = np.sqrt(np.maximum(w2, 0.0))
        fast.append(np.abs(m - wr))
        if single and n == 0:
            continue
        fast.append(np.abs(rp))
        slow = np.maximum(slow, np.where(w2 < 0, np.sqrt(np.maximum(-w2, 0.0)) + np.abs(m), np.abs(rp)))
    return fast, slow


def quadrature_moments(seg, T, rates):
    """``∫0^T ξ ξᵀ dτ`` by 16-point Gauss–Legendre on panels graded to the segment's rates.

    Panels double from ``1/λ_fast`` while the fastest mode lives (capped at 12/λ so that the
    rule stays exact to rounding) and are at most ``1.5/λ_slow`` long (oscillation, slow decay).
    A case that would need more than :data:`MAX_QUADRATURE_PANELS` panels gets a row of NaN
    (the caller fails that variant alone, with :data:`QUADRATURE_FAILURE` as the reason); the
    other cases of the batch keep their moments.
    """
    fast, slow = rates
    G = T.shape[0]
    nX = seg.state(np.zeros((G, 1))).shape[-1]
    M = np.zeros((G, nX + 2, nX + 2))
    lam = np.maximum.reduce(fast + [slow, 1.0 / np.maximum(T, 1e-300)])
    s = np.zeros(G)
    h0 = np.minimum(T, 1.0 / lam)
    cap_slow = 1.5 / np.maximum(slow, 1e-300)
    for _ in range(MAX_QUADRATURE_PANELS):
        live = s < T * (1 - 1e-15)
        if not np.any(live):
            break
        h = np.maximum(h0, s)
        for r in fast:
            h = np.where(s < 41.0 / np.maximum(r, 1e-300), np.minimum(h, 12.0 / np.maximum(r, 1e-300)), h)
        h = np.minimum(np.minimum(h, cap_slow), T - s)
        h = np.where(live, h, 0.0)
        tq = s[:, None] + 0.5 * h[:, None] * (1.0 + _GL_X[None, :])
        wq = 0.5 * h[:, None] * _GL_W[None, :]
        x = seg.state(tq)
        xi = np.concatenate([x, np.ones(x.shape[:2] + (1,)), tq[..., None]], axis=2)
        M += np.einsum("gk,gki,gkj->gij", wq, xi, xi)
        s = s + h
    M[s < T * (1 - 1e-15)] = np.nan
    return M
