"""Building the exact solution of a segment from its linear system, and the ramp form.

:func:`build_scalar` and :func:`build_modal` write ``x' = A x + b0 + b1·τ`` in the forms of
:mod:`kickback.engine.pwl`. Under a ramp (the switch current falling during ``t_f``) the
particular solution of a slow system is huge (``p0 ~ b1/λ²``) and would cancel against the modal
terms to a fraction ``ε·|p0|/|x|`` of the state; there the segment is written instead in the
φ-form of exponential integrators, which has no such cancellation:

.. math:: x(τ) = x_0 + F_1(τ)\\, f_0 + F_2(τ)\\, b_1, \\quad F_1 = \\int_0^τ e^{As} ds, \\quad
          F_2 = \\int_0^τ (τ - s)\\, e^{As} ds, \\quad f_0 = A x_0 + b_0,

with ``e^{As}`` through the pair ``(μ, w²)`` and a real eigenvalue's projector, so that ``F1`` and
``F2`` are the modal integrals of :mod:`kickback.engine.pwl_functions` (robust at every limit).
Its energy moments are taken by graded Gauss–Legendre quadrature (the integrand is entire).

References
----------
M. Hochbruck and A. Ostermann, "Exponential integrators", Acta Numerica 19 (2010) 209–286.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kickback.engine.pwl import DECLINED, ModalSegment, ScalarSegment, SegmentError
from kickback.engine.pwl_functions import cosh_sinhc, modal_integrals, psi01, slow_rate
from kickback.engine.pwl_quadrature import mode_rates, quadrature_moments

#: a triple (or nearly triple) eigenvalue of a 3-state segment is not handled
_TRIPLE_GAP = 1e-7


def build_scalar(X0, A, b0, b1, k: int = 0) -> ScalarSegment:
    """The segment with state ``k`` dynamic and the rest frozen.

    Parameters
    ----------
    X0 : (G, nX) — state at the segment start
    A : (G, nX, nX), b0, b1 : (G, nX) — ``x' = A x + b0 + b1 τ`` in the full layout
    """
    beta = A[:, k, k]
    f0 = np.einsum("gj,gj->g", A[:, k, :], X0) + b0[:, k]
    return ScalarSegment(X0.copy(), beta.copy(), f0, b1[:, k].copy(), k)


def _blocks(X0, A, b0, b1, dyn):
    frozen = [j for j in range(X0.shape[1]) if j not in dyn]
    Ad = A[:, dyn][:, :, dyn]
    beff = b0[:, dyn] + (np.einsum("gij,gj->gi", A[:, dyn][:, :, frozen], X0[:, frozen]) if frozen else 0.0)
    return Ad, beff, b1[:, dyn]


def spectral(Ad):
    """Pair (μ, w², m + w, N = A − μI) and, for 3 states, the real eigenvalue λ1 and its projector P1.

    Raises
    ------
    SegmentError — singular, or three nearly equal eigenvalues.
    """
    n = Ad.shape[1]
    det = np.linalg.det(Ad)
    zero_row = np.any(np.all(Ad == 0, axis=2), axis=1)
    if np.any(zero_row | ~np.isfinite(det) | (det == 0)):
        raise SegmentError("singular state matrix on a segment (a state with no restoring term, "
                           "e.g. zero coil resistance while the node is held by an ideal law)")
    eye = np.eye(n)
    if n == 2:
        mu = 0.5 * (Ad[:, 0, 0] + Ad[:, 1, 1])
        w2 = (0.5 * (Ad[:, 0, 0] - Ad[:, 1, 1])) ** 2 + Ad[:, 0, 1] * Ad[:, 1, 0]
        return dict(mu=mu, w2=w2, rp=slow_rate(mu, w2, det), N=Ad - mu[:, None, None] * eye, l1=None, P1=None)
    if n != 3:
        raise SegmentError(f"{n} dynamic states on one segment (the batch engine handles up to 3; {DECLINED})")
    c1 = np.trace(Ad, axis1=1, axis2=2)
    c2 = (Ad[:, 0, 0] * Ad[:, 1, 1] - Ad[:, 0, 1] * Ad[:, 1, 0] + Ad[:, 0, 0] * Ad[:, 2, 2]
          - Ad[:, 0, 2] * Ad[:, 2, 0] + Ad[:, 1, 1] * Ad[:, 2, 2] - Ad[:, 1, 2] * Ad[:, 2, 1])
    c3 = det
    lam = np.linalg.eigvals(Ad)
    real = np.abs(lam.imag) <= 1e-12 * np.abs(lam).max(axis=1, keepdims=True)
    iso = np.where(real, np.abs(lam[:, :, None] - lam[:, None, :]).prod(axis=2), -1.0)
    l1 = lam[np.arange(lam.shape[0]), np.argmax(iso, axis=1)].real
    for _ in range(3):  # Newton on the characteristic polynomial
        p = ((l1 - c1) * l1 + c2) * l1 - c3
        dp = (3 * l1 - 2 * c1) * l1 + c2
        l1 = np.where(dp != 0, l1 - p / np.where(dp != 0, dp, 1.0), l1)
    # the pair's sum 2μ and product: from c3/λ1 and c2 when λ1 dominates (a fast node mode: c1 − λ1
    # would cancel), else from the trace
    prod = c3 / np.where(l1 != 0, l1, 1.0)
    dominant = np.abs(l1) >= np.abs(c1 - l1)
    two_mu = np.where(dominant, (c2 - prod) / np.where(l1 != 0, l1, 1.0), c1 - l1)
    mu = 0.5 * two_mu
    w2 = mu * mu - prod
    denom = (l1 - mu) ** 2 - w2
    if np.any(~(np.abs(denom) > _TRIPLE_GAP * np.abs(lam).max(axis=1) ** 2)):
        raise SegmentError("three nearly equal eigenvalues on one segment (not handled by the batch engine; "
                           f"{DECLINED})")
    A2 = np.einsum("gij,gjk->gik", Ad, Ad)
    P1 = (A2 - 2 * mu[:, None, None] * Ad + prod[:, None, None] * eye) / denom[:, None, None]
    return dict(mu=mu, w2=w2, rp=slow_rate(mu, w2, prod), N=Ad - mu[:, None, None] * eye, l1=l1, P1=P1)


def pair_slope(Ad, sp, q):
    """``N q`` for a vector q in the pair's subspace of a 3-state segment, without cancellation.

    With a fast real eigenvalue (a node with little capacitance) the full matrix has entries
    ~|λ1| and ``N q`` would lose ε·|λ1|·|q| to rounding. Instead the pair's subspace is written over
    the two slow coordinates (the fast one, where the fast eigenvector lives, follows as
    ``q_f = k·q_s``) and N acts there through the slow rows of A only, whose entries are O(|μ|).
    """
    P1 = sp["P1"]
    Q = np.eye(3) - P1
    out = _mv(sp["N"], q)
    stiff = np.abs(sp["l1"]) > 1e3 * (np.abs(sp["mu"]) + np.sqrt(np.abs(sp["w2"])))
    if not np.any(stiff):
        return out
    j = np.argmax(np.abs(np.diagonal(P1, axis1=1, axis2=2)), axis=1)
    for jf in range(3):
        rows = np.nonzero(stiff & (j == jf))[0]
        if rows.size == 0:
            continue
        sl = [c for c in range(3) if c != jf]
        S = Q[rows][:, :, sl]  # columns of Q spanning the pair's subspace
        k = np.einsum("gi,gij->gj", S[:, jf, :], np.linalg.inv(S[:, sl, :]))  # q_f = k·q_s
        As = Ad[rows][:, sl][:, :, sl] + np.einsum("gi,gj->gij", Ad[rows][:, sl, jf], k)
        Ns = As - sp["mu"][rows][:, None, None] * np.eye(2)
        bs = np.einsum("gij,gj->gi", Ns, q[rows][:, sl])
        full = np.empty((rows.size, 3))
        full[:, sl] = bs
        full[:, jf] = np.einsum("gi,gi->g", k, bs)
        out[rows] = full
    return out


def _mv(M, v):
    return np.einsum("gij,gj->gi", M, v)


def _embed(G, nX, dyn, v):
    out = np.zeros((G, nX))
    out[:, dyn] = v
    return out


def build_modal(X0, A, b0, b1, dyn):
    """The segment with the states ``dyn`` (2 or 3 indices) dynamic: modal form, or the φ-form
    under a ramp (``b1 ≠ 0``)."""
    dyn = list(dyn)
    Ad, beff, b1d = _blocks(X0, A, b0, b1, dyn)
    sp = spectral(Ad)
    G, nX = X0.shape
    if np.any(b1d != 0):
        return PhiSegment(X0.copy(), dyn, Ad, _mv(Ad, X0[:, dyn]) + beff, b1d, sp)
    with np.errstate(all="ignore"):
        p0 = -np.linalg.solve(Ad, beff[..., None])[..., 0]
    if not np.all(np.isfinite(p0)):
        raise SegmentError("singular state matrix on a segment (its particular solution is not finite)")
    y0 = X0[:, dyn] - p0
    terms = []
    if sp["l1"] is not None:
        ar = _mv(sp["P1"], y0)
        terms.append((sp["l1"], np.zeros(G), _embed(G, nX, dyn, ar), np.zeros((G, nX)), sp["l1"]))
        y0 = y0 - ar
        b = pair_slope(Ad, sp, y0)
    else:
        b = _mv(sp["N"], y0)
    terms.append((sp["mu"], sp["w2"], _embed(G, nX, dyn, y0), _embed(G, nX, dyn, b), sp["rp"]))
    P0 = X0.copy()
    P0[:, dyn] = p0
    return ModalSegment(P0, np.zeros((G, nX)), terms)


@dataclass
class PhiSegment:
    """Two or three dynamic states under a ramp, in the φ-form (see the module docstring).

    Attributes
    ----------
    X0 : (G, nX); dyn : list of int; Ad : (G, n, n); f0, b1 : (G, n); sp : dict (see :func:`spectral`)
    """

    X0: np.ndarray
    dyn: list
    Ad: np.ndarray
    f0: np.ndarray
    b1: np.ndarray
    sp: dict

    def __post_init__(self):
        sp = self.sp
        self.fr = self.br = None
        fq, bq = self.f0, self.b1
        if sp["l1"] is not None:
            self.fr, self.br = _mv(sp["P1"], fq), _mv(sp["P1"], bq)
            fq, bq = fq - self.fr, bq - self.br
        self.fq, self.bq = fq, bq
        if sp["l1"] is not None:
            self.nfq, self.nbq = pair_slope(self.Ad, sp, fq), pair_slope(self.Ad, sp, bq)
        else:
            self.nfq, self.nbq = _mv(sp["N"], fq), _mv(sp["N"], bq)

    @property
    def terms(self):
        """Modes as (m, w², –, –, m + w), for grids and quadrature panels."""
        sp = self.sp
        out = [(sp["mu"], sp["w2"], None, None, sp["rp"])]
        if sp["l1"] is not None:
            out.insert(0, (sp["l1"], np.zeros_like(sp["l1"]), None, None, sp["l1"]))
        return out

    def take(self, idx) -> PhiSegment:
        sp = {k: (None if v is None else v[idx]) for k, v in self.sp.items()}
        return PhiSegment(self.X0[idx], self.dyn, self.Ad[idx], self.f0[idx], self.b1[idx], sp)

    def _shape(self, tau):
        tau = np.asarray(tau, float)
        return tau, (-1,) + (1,) * (tau.ndim - 1), (slice(None),) + (None,) * (tau.ndim - 1)

    def _pieces(self, tau):
        tau, shp, ex = self._shape(tau)
        sp = self.sp
        r = modal_integrals(sp["mu"].reshape(shp), sp["w2"].reshape(shp), tau, sp["rp"].reshape(shp))
        ec, es = cosh_sinhc(sp["mu"].reshape(shp), sp["w2"].reshape(shp), tau, sp["rp"].reshape(shp))
        return tau, shp, ex, r, ec, es

    def _full(self, xd, tau):
        out = np.broadcast_to(self.X0[(slice(None),) + (None,) * (tau.ndim - 1)], tau.shape + self.X0.shape[1:]).copy()
        out[..., self.dyn] = xd
        return out

    def _values(self, tau, with_deriv: bool):
        tau, shp, ex, r, ec, es = self._pieces(tau)

        def c(v, s):
            return s[..., None] * v[ex]

        x = (self.X0[:, self.dyn][ex] + c(self.fq, r["K0"]) + c(self.nfq, r["J0"])
             + c(self.bq, tau * r["K0"] - r["K1"]) + c(self.nbq, tau * r["J0"] - r["J1"]))
        d1 = None
        if with_deriv:
            d1 = c(self.fq, ec) + c(self.nfq, es) + c(self.bq, r["K0"]) + c(self.nbq, r["J0"])
        if self.fr is not None:
            l1 = self.sp["l1"].reshape(shp)
            p0, p1 = psi01(l1, tau)
            x = x + c(self.fr, p0) + c(self.br, tau * p0 - p1)
            if with_deriv:
                d1 = d1 + c(self.fr, np.exp(l1 * tau)) + c(self.br, p0)
        return tau, ex, self._full(x, tau), d1

    def state(self, tau):
        return self._values(tau, False)[2]

    def derivs(self, tau, kmax: int = 3):
        tau, ex, x, d1 = self._values(tau, True)
        out = [x]
        d = d1
        for k in range(1, kmax + 1):
            full = np.zeros(tau.shape + self.X0.shape[1:])
            full[..., self.dyn] = d
            out.append(full)
            Ab = self.Ad.reshape(self.Ad.shape[:1] + (1,) * (tau.ndim - 1) + self.Ad.shape[1:])
            d = np.einsum("g...ij,g...j->g...i", Ab, d) + (self.b1[ex] if k == 1 else 0.0)
        return out

    def deriv(self, tau):
        return self.derivs(tau, 1)[1]

    def sizes(self, kmax: int = 2):
        """Size of the terms making up x^(k) at τ = 0 (for rounding tolerances)."""
        G, nX = self.X0.shape
        absA = np.abs(self.Ad)
        d = np.abs(self.f0)
        out = [np.abs(self.X0), _embed(G, nX, self.dyn, d)]
        d = _mv(absA, d) + np.abs(self.b1)
        for _ in range(2, kmax + 1):
            out.append(_embed(G, nX, self.dyn, d))
            d = _mv(absA, d)
        return out

    def sizes_at(self, tau, kmax: int = 2, upto=None):
        """Bound of the terms' sizes at τ: those at τ = 0 (a ramp segment is short)."""
        return self.sizes(kmax)

    def rates(self, idx=slice(None)):
        return mode_rates(self.terms, idx)

    def moments(self, T):
        return quadrature_moments(self, np.asarray(T, float), self.rates())
