"""The dense closed-form solution of an affine (or nearly affine) phase, callable like scipy's
OdeSolution: its modes, an optional first-order correction, and the energies integrated by
Gauss–Legendre quadrature on its panels.

References
----------
G. H. Golub and J. H. Welsch, "Calculation of Gauss quadrature rules", Math. Comp. 23, 1969.
"""

from __future__ import annotations

import numpy as np
from numpy.polynomial import legendre

#: Gauss–Legendre nodes per panel
GL_NODES = 10
_XI, _WI = legendre.leggauss(GL_NODES)
_XI01, _WI01 = 0.5 * (_XI + 1.0), 0.5 * _WI
#: node values → Legendre coefficients of the interpolant's integral from −1 (one column per node)
_INTEG = np.array([legendre.legint(legendre.legfit(_XI, np.eye(GL_NODES)[m], GL_NODES - 1), lbnd=-1.0)
                   for m in range(GL_NODES)]).T


class LinearSolution:
    """Dense closed-form solution of an affine phase: callable like scipy's OdeSolution."""

    def __init__(self, t0, y0, ie, lam, vec, coef, edges, x_end, nodes=None, rates=None, steps=None, held=None,
                 correction=None):
        self.t0, self.y0, self.ie, self.x_end = t0, y0, ie, x_end
        #: the first-order correction of a nearly affine phase (:class:`linpert.Correction`), or None
        self.correction = correction
        #: (indices, rates) of held states: x = x0 + rate·(t − t0), outside the modes
        self.held = held
        self.steps = edges if steps is None else steps  # [s] sampling grid offered to the sampler
        self.lam, self.vec, self.coef = lam, vec, coef
        self.edges = edges  # [s] absolute panel edges
        self.nodes, self.rates = nodes, rates  # GL nodes [s] per panel, power rates there
        if rates is not None:
            h = np.diff(edges)
            panel = np.einsum("j,pjk->pk", _WI01, rates) * h[:, None]
            self.cum = np.vstack([np.zeros(rates.shape[2]), np.cumsum(panel, axis=0)])

    def dynamic(self, t) -> np.ndarray:
        s = np.atleast_1d(np.asarray(t, dtype=float)) - self.t0
        # (einsum: BLAS threads spin on a small matrix times many columns)
        modes = self.coef[:, None] * np.exp(self.lam[:, None] * s[None, :])
        z = np.real(np.einsum("ij,jn->in", self.vec[: self.ie], modes))
        if self.held is not None:
            idx, rate = self.held
            z[idx] = self.y0[idx, None] + rate[:, None] * s[None, :]
        if self.correction is not None:
            z += self.correction(s + self.t0)
        z[:, s >= self.edges[-1] - self.t0] = self.x_end[:, None]
        return z

    def __call__(self, t):
        scalar = np.ndim(t) == 0
        ts = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.empty((self.y0.size, ts.size))
        out[: self.ie] = self.dynamic(ts)
        if self.rates is None:
            out[self.ie:] = self.y0[self.ie:, None]
        else:
            out[self.ie:] = (self.y0[self.ie:, None] + self._energy(ts).T)
        return out[:, 0] if scalar else out

    def _energy(self, ts: np.ndarray) -> np.ndarray:
        """Cumulative energies at ``ts``: whole panels plus the interpolating polynomial of the
        power at the panel's Gauss nodes, integrated to the sample."""
        k = np.clip(np.searchsorted(self.edges, ts, side="right") - 1, 0, len(self.edges) - 2)
        h = self.edges[k + 1] - self.edges[k]
        frac = np.clip((ts - self.edges[k]) / h, 0.0, 1.0)
        out = self.cum[k].copy()
        # the interpolating polynomial through the panel's Gauss nodes, integrated from the panel
        # start: a fixed linear map of the node values (weights per sample)
        w = legendre.legvander(2.0 * frac - 1.0, GL_NODES) @ _INTEG
        out += 0.5 * h[:, None] * np.einsum("nm,nms->ns", w, self.rates[k])
        return out
