"""Exact solution of one linear segment ``x' = A x + b0 + b1·τ``, vectorised over cases.

On a segment of a piecewise-linear circuit (one conduction state) the states obey a linear
system with constant ``A`` and a forcing that is at most a ramp (the switch current falling
linearly). Two closed forms are used:

* one dynamic state (the coil current alone; the node is algebraic or held by an ideal law):

  .. math:: x(τ) = x_0 + f_0\\,τ φ_1(βτ) + γ\\,τ^2 φ_2(βτ), \\qquad f_0 = β x_0 + b_0,

  exact for β = 0 too (zero coil resistance against an ideal clamp);
* two or three dynamic states: the particular solution ``p0 + p1·τ`` and modal terms

  .. math:: x(τ) = p_0 + p_1 τ + \\sum_k e^{m_k τ}\\,(C_k(τ) a_k + S_k(τ) b_k),

  from the pair of eigenvalues ``μ ± w`` written through ``μ`` and ``w²`` (``C = cosh wτ``,
  ``S = sinh(wτ)/w``), exact through critical damping where an eigenvector basis fails; a
  third, real eigenvalue enters through its spectral projector.

Every state is kept in the full layout of the case (frozen states are constants), and
:meth:`moments` gives ``∫0^T ξ ξᵀ dτ`` with ``ξ = (x, 1, τ)`` in closed form, so that every
energy (a quadratic form in ξ) is integrated exactly.

References
----------
E. A. Coddington and N. Levinson, Theory of Ordinary Differential Equations, McGraw-Hill 1955,
ch. 3 (linear systems with constant coefficients, variation of constants).
C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 7–8 (first- and
second-order circuits: over-, critically and under-damped responses).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kickback.engine.pwl_functions import cosh_sinhc, modal_integrals, phi12, psi01
from kickback.engine.pwl_quadrature import mode_rates, quadrature_moments
from kickback.errors import KickbackError

_GL_X, _GL_W = np.polynomial.legendre.leggauss(16)
#: |β·T| up to which the scalar segment's integrals use 16-point Gauss–Legendre quadrature
#: (the integrand is then within (βT)^32/32! of a polynomial of degree 31: exact to rounding)
_SCALAR_QUAD = 2.0
#: a triple (or nearly triple) eigenvalue of a 3-state segment is not handled
_TRIPLE_GAP = 1e-7
#: size of the particular/modal parts relative to the state above which the closed-form
#: moments would cancel (error ~ ε·ratio²) and quadrature is used
_CANCEL = 300.0


#: the words that end a batch engine's stated refusal of a regime it does not cover (a decline, which
#: a study answers by running the variant on the detailed engine; any other stated failure is a defect)
DECLINED = "the detailed engine solves it"


class SegmentError(KickbackError, ArithmeticError):
    """A segment the closed forms do not cover (singular or triply degenerate state matrix).

    The batch engine turns it into the variant's failure status and message.
    """


@dataclass
class ScalarSegment:
    """One dynamic state (index ``k``) on a segment; the others constant.

    Attributes
    ----------
    X0 : (G, nX) — state at τ = 0
    beta, f0, gamma : (G,) — [1/s], [unit/s], [unit/s²]
    k : int — index of the dynamic state
    """

    X0: np.ndarray
    beta: np.ndarray
    f0: np.ndarray
    gamma: np.ndarray
    k: int = 0

    def take(self, idx) -> ScalarSegment:
        """The segment of the cases ``idx`` only."""
        return ScalarSegment(self.X0[idx], self.beta[idx], self.f0[idx], self.gamma[idx], self.k)

    def _bc(self, tau):
        tau = np.asarray(tau, float)
        extra = tau.ndim - 1
        shp = (-1,) + (1,) * extra
        return tau, self.beta.reshape(shp), self.f0.reshape(shp), self.gamma.reshape(shp)

    def delta(self, tau):
        """x_k(τ) − x_k(0) and its derivative, for τ of shape (G,) or (G, K)."""
        tau, b, f0, g = self._bc(tau)
        p1, p2 = phi12(b * tau)
        e1 = tau * p1
        d = f0 * e1 + g * tau * tau * p2
        dd = f0 * np.exp(b * tau) + g * e1
        return d, dd

    def state(self, tau):
        d, _ = self.delta(tau)
        x = np.broadcast_to(self.X0.reshape(self.X0.shape[:1] + (1,) * (d.ndim - 1) + self.X0.shape[1:]),
                            d.shape + self.X0.shape[1:]).copy()
        x[..., self.k] += d
        return x

    def sizes(self, kmax: int = 2):
        """Size of the terms making up x^(k) at τ = 0, k = 0…kmax (for rounding tolerances)."""
        G, nX = self.X0.shape
        e = np.zeros(nX)
        e[self.k] = 1.0
        b, f0, g = np.abs(self.beta), np.abs(self.f0), np.abs(self.gamma)
        out = [np.abs(self.X0) + (f0 * 0)[:, None], (f0 + g * 0)[:, None] * e]
        c = f0 * b + g
        for _ in range(2, kmax + 1):
            out.append(c[:, None] * e)
            c = c * b
        return out

    def sizes_at(self, tau, kmax: int = 2, upto=None):
        """Bound of the terms' sizes at τ (G,): those at τ = 0 (the scalar solution's terms do
        not decay as a whole: ``x0`` and ``f0·τφ1(βτ)`` stay of their starting size)."""
        return self.sizes(kmax)

    def derivs(self, tau, kmax: int = 3):
        """[x, x', …, x^(kmax)] at τ (each of shape τ.shape + (nX,))."""
        tau, b, f0, g = self._bc(tau)
        p1, p2 = phi12(b * tau)
        e1 = tau * p1
        ex = np.exp(b * tau)
        vals = [f0 * e1 + g * tau * tau * p2, f0 * ex + g * e1]
        c = f0 * b + g
        for _ in range(2, kmax + 1):
            vals.append(c * ex)
            c = c * b
        out = [self.state(tau)]
        for v in vals[1:kmax + 1]:
            x = np.zeros(v.shape + self.X0.shape[1:])
            x[..., self.k] = v
            out.append(x)
        return out

    def deriv(self, tau):
        _, dd = self.delta(tau)
        x = np.zeros(dd.shape + self.X0.shape[1:])
        x[..., self.k] = dd
        return x

    def moments(self, T):
        """``∫0^T ξ ξᵀ dτ`` with ξ = (x, 1, τ), shape (G, nX+2, nX+2)."""
        T = np.asarray(T, float)
        b, f0, g = self.beta, self.f0, self.gamma
        quad = np.abs(b * T) <= _SCALAR_QUAD
        # quadrature branch
        tq = 0.5 * T[:, None] * (1.0 + _GL_X[None, :])
        wq = 0.5 * T[:, None] * _GL_W[None, :]
        p1, p2 = phi12(b[:, None] * tq)
        e1, e2 = tq * p1, tq * tq * p2
        q = {"E1": e1, "E2": e2, "tE1": tq * e1, "tE2": tq * e2, "E11": e1 * e1, "E12": e1 * e2, "E22": e2 * e2}
        qi = {k: np.sum(v * wq, axis=1) for k, v in q.items()}
        # closed-form branch (|βT| > 2, β < 0)
        bl = np.where(quad, -1.0, b)
        Tl = np.where(quad, 1.0, T)
        i0, i1 = psi01(bl, Tl)
        i02, _ = psi01(2 * bl, Tl)
        c = {
            "E1": (i0 - Tl) / bl,
            "E2": (i0 - Tl - bl * Tl**2 / 2) / bl**2,
            "tE1": (i1 - Tl**2 / 2) / bl,
            "tE2": (i1 - Tl**2 / 2 - bl * Tl**3 / 3) / bl**2,
            "E11": (i02 - 2 * i0 + Tl) / bl**2,
            "E12": (i02 - 2 * i0 + Tl - bl * (i1 - Tl**2 / 2)) / bl**3,
            "E22": (i02 - 2 * i0 + Tl - 2 * bl * i1 + bl * Tl**2 + bl**2 * Tl**3 / 3) / bl**4,
        }
        J = {k: np.where(quad, qi[k], c[k]) for k in qi}
        sd = f0 * J["E1"] + g * J["E2"]
        std = f0 * J["tE1"] + g * J["tE2"]
        sdd = f0 * f0 * J["E11"] + 2 * f0 * g * J["E12"] + g * g * J["E22"]
        X0 = self.X0
        G, nX = X0.shape
        ek = np.zeros(nX)
        ek[self.k] = 1.0
        sx = X0 * T[:, None] + sd[:, None] * ek
        stx = X0 * (T * T / 2)[:, None] + std[:, None] * ek
        sxx = (np.einsum("gi,gj->gij", X0, X0) * T[:, None, None]
               + sd[:, None, None] * (np.einsum("gi,j->gij", X0, ek) + np.einsum("i,gj->gij", ek, X0))
               + sdd[:, None, None] * np.outer(ek, ek))
        return _assemble(sxx, sx, stx, T)


@dataclass
class ModalSegment:
    """Two or three dynamic states: ``x = P0 + P1 τ + Σ exp(m τ)(C a + S b)``.

    Attributes
    ----------
    P0, P1 : (G, nX)
    terms : list of (m, w2, a, b, rp) with m, w2, rp of shape (G,), a, b of shape (G, nX); rp is
        ``m + w`` without cancellation; with two terms the first is a single real mode
        (w2 = 0, b = 0).
    """

    P0: np.ndarray
    P1: np.ndarray
    terms: list

    def _expand(self, tau):
        tau = np.asarray(tau, float)
        shp = (-1,) + (1,) * (tau.ndim - 1)
        return tau, shp

    def state(self, tau, *, derivative: bool = False):
        tau, shp = self._expand(tau)
        ex = (slice(None),) + (None,) * (tau.ndim - 1)
        if derivative:
            x = np.broadcast_to(self.P1[ex], tau.shape + self.P1.shape[1:]).copy()
        else:
            x = self.P0[ex] + self.P1[ex] * tau[..., None]
        for m, w2, a, b, rp in self.terms:
            ec, es = cosh_sinhc(m.reshape(shp), w2.reshape(shp), tau, rp.reshape(shp))
            if derivative:
                a, b = m[:, None] * a + b, w2[:, None] * a + m[:, None] * b
            x = x + ec[..., None] * a[ex] + es[..., None] * b[ex]
        return x

    def deriv(self, tau):
        return self.state(tau, derivative=True)

    def sizes(self, kmax: int = 2):
        """Size of the terms making up x^(k) at τ = 0, k = 0…kmax (for rounding tolerances)."""
        out = [np.abs(self.P0) + sum(np.abs(a) for _m, _w, a, _b, _r in self.terms)]
        coef = [(np.abs(a), np.abs(b), np.abs(m)[:, None], np.abs(w2)[:, None]) for m, w2, a, b, _r in self.terms]
        for k in range(1, kmax + 1):
            tot = np.abs(self.P1) if k == 1 else np.zeros_like(self.P1)
            new = []
            for a, b, m, w2 in coef:
                a, b = m * a + b, w2 * a + m * b
                new.append((a, b, m, w2))
                tot = tot + a
            coef = new
            out.append(tot)
        return out

    def sizes_at(self, tau, kmax: int = 2, upto=None):
        """Bound of the size of the terms making up x^(k) at τ of shape (G,), k = 0…kmax: as
        :meth:`sizes`, each modal term shrunk by its envelope (|e^{mτ}C| ≤ e^{rτ} and
        |e^{mτ}S| ≤ τ e^{rτ} with r = m + Re w, the slower rate) — a mode that has died away
        no longer sets the rounding level of the state. With ``upto`` (G,) ≥ τ: a bound over
        all of [τ, upto] (the envelope at τ, the factors growing with τ at ``upto``)."""
        tau = np.asarray(tau, float)
        env = [np.exp(np.minimum(rp * tau, 0.0))[:, None] for _m, _w, _a, _b, rp in self.terms]
        tc = (tau if upto is None else np.maximum(np.asarray(upto, float), tau))[:, None]
        out = [np.abs(self.P0) + np.abs(self.P1) * tc
               + sum(e * (np.abs(a) + np.abs(b) * tc) for e, (_m, _w, a, b, _r) in zip(env, self.terms, strict=True))]
        coef = [(np.abs(a), np.abs(b), np.abs(m)[:, None], np.abs(w2)[:, None]) for m, w2, a, b, _r in self.terms]
        for k in range(1, kmax + 1):
            tot = np.abs(self.P1) if k == 1 else np.zeros_like(self.P1)
            new = []
            for e, (a, b, m, w2) in zip(env, coef, strict=True):
                a, b = m * a + b, w2 * a + m * b
                new.append((a, b, m, w2))
                tot = tot + e * (a + b * tc)
            coef = new
            out.append(tot)
        return out

    def derivs(self, tau, kmax: int = 3):
        """[x, x', …, x^(kmax)] at τ (each of shape τ.shape + (nX,))."""
        tau, shp = self._expand(tau)
        ex = (slice(None),) + (None,) * (tau.ndim - 1)
        basis = []
        for m, w2, a, b, rp in self.terms:
            ec, es = cosh_sinhc(m.reshape(shp), w2.reshape(shp), tau, rp.reshape(shp))
            basis.append((ec[..., None], es[..., None], m[:, None], w2[:, None], a, b))
        x0 = self.P0[ex] + self.P1[ex] * tau[..., None]
        for ec, es, _m, _w2, a, b in basis:
            x0 = x0 + ec * a[ex] + es * b[ex]
        out = [x0]
        coef = [(a, b) for (*_, a, b) in basis]
        for k in range(1, kmax + 1):
            x = np.broadcast_to(self.P1[ex], tau.shape + self.P1.shape[1:]).copy() if k == 1 else \
                np.zeros(tau.shape + self.P1.shape[1:])
            new = []
            for (ec, es, m, w2, _a, _b), (a, b) in zip(basis, coef, strict=True):
                a, b = m * a + b, w2 * a + m * b
                new.append((a, b))
                x = x + ec * a[ex] + es * b[ex]
            coef = new
            out.append(x)
        return out

    def moments(self, T):
        """``∫0^T ξ ξᵀ dτ`` with ξ = (x, 1, τ), shape (G, nX+2, nX+2).

        In closed form where the particular solution and the modal terms are of the size of the
        state itself; where they are much larger (a segment short against a slow mode under a
        steep ramp) their products would cancel, and the state — evaluated with an absolute
        error of only ε·|p0| — is integrated by graded Gauss–Legendre quadrature instead.
        """
        T = np.asarray(T, float)
        M = self._closed_moments(T)
        bad = self._cancelling(T, M)
        if np.any(bad):
            idx = np.nonzero(bad)[0]
            M[idx] = quadrature_moments(self.take(idx), T[idx], self.rates(idx))
        return M

    def take(self, idx) -> ModalSegment:
        """The segment of the cases ``idx`` only."""
        return ModalSegment(self.P0[idx], self.P1[idx], [tuple(x[idx] for x in term) for term in self.terms])

    def rates(self, idx=slice(None)):
        """(fast real rates, slow rate) [1/s] per case, for quadrature panels and search grids."""
        return mode_rates(self.terms, idx)

    def _cancelling(self, T, M):
        """Whether the closed-form moments ``M`` of a case may have cancelled: a state whose
        particular and modal terms are more than ``_CANCEL`` times its own size on the segment.

        The closed form's error in ``∫x_k² dτ`` is about ε·big_k²·T; the state's own size is read
        both from its values at τ = 0, T/2, T and from its root mean square over the segment,
        ``√(M_kk/T)`` (the closed form's own diagonal). The mean square alone sees a lightly
        damped ring: its three samples may all fall near a zero of the oscillation (a ring
        segment that starts and ends at current zeros), where the sampled size alone read a ring
        of 10⁵ periods as a cancellation and sent it to a quadrature of more than 10⁵ panels.
        A mean square the sample misses is safe to trust: where it is at least big²/_CANCEL², the
        closed form's rounding (≲ ε·big²·T) is at most ε·_CANCEL² ≈ 2e-11 of it, and a diagonal
        that did cancel is of that rounding size, far below the threshold.
        """
        # the S part e^{mτ}·sinh(wτ)/w (or sin(ωτ)/ω) is at most min(τ, 1/|w|) of |b| on a decaying
        # term: bounded by |b|·T alone, a fast real pair (a node mode of nanoseconds under a
        # decay of milliseconds, |b| ~ 1e9·|a|) would look like a cancellation it is not
        big = np.abs(self.P0) + np.abs(self.P1) * T[:, None]
        for _m, w2, a, b, _rp in self.terms:
            with np.errstate(divide="ignore"):
                span = np.minimum(T, 1.0 / np.sqrt(np.abs(w2)))
            big = big + np.abs(a) + np.abs(b) * span[:, None]
        small = np.maximum.reduce([np.abs(self.state(T * f)) for f in (0.0, 0.5, 1.0)])
        nX = small.shape[1]
        diag = np.diagonal(M, axis1=1, axis2=2)[:, :nX]
        with np.errstate(invalid="ignore", divide="ignore"):
            rms = np.sqrt(np.where(np.isfinite(diag) & (T[:, None] > 0), np.maximum(diag, 0.0), 0.0)
                          / np.where(T > 0, T, 1.0)[:, None])
        small = np.maximum(small, rms)
        ratio = big / np.maximum(small, 1e-300 + 1e-12 * big)
        return np.max(ratio, axis=1) > _CANCEL

    def _closed_moments(self, T):
        P0, P1 = self.P0, self.P1
        T2, T3 = T * T / 2, T**3 / 3

        def outer(u, v):
            return np.einsum("gi,gj->gij", u, v)

        def sym(u, v):
            return outer(u, v) + outer(v, u)

        def col(s):
            return s[:, None]

        sx = P0 * col(T) + P1 * col(T2)
        stx = P0 * col(T2) + P1 * col(T3)
        sxx = outer(P0, P0) * T[:, None, None] + sym(P0, P1) * T2[:, None, None] + outer(P1, P1) * T3[:, None, None]
        for m, w2, a, b, rp in self.terms:
            r = modal_integrals(m, w2, T, rp)
            y0 = a * col(r["K0"]) + b * col(r["J0"])
            y1 = a * col(r["K1"]) + b * col(r["J1"])
            sx = sx + y0
            stx = stx + y1
            sxx = sxx + sym(P0, y0) + sym(P1, y1)
            rr = modal_integrals(2 * m, 4 * w2, T, 2 * rp)
            c0, _ = psi01(2 * m, T)
            caa = 0.5 * (c0 + rr["K0"])
            sxx = (sxx + outer(a, a) * caa[:, None, None] + sym(a, b) * rr["J0"][:, None, None]
                   + outer(b, b) * (2 * rr["H0"])[:, None, None])
        if len(self.terms) == 2:
            (mr, _, ar, _, _), (mp, w2p, ap, bp, rpp) = self.terms
            r = modal_integrals(mr + mp, w2p, T, mr + rpp)
            yc = ap * col(r["K0"]) + bp * col(r["J0"])
            sxx = sxx + sym(ar, yc)
        return _assemble(sxx, sx, stx, T)


def _assemble(sxx, sx, stx, T):
    G, nX = sx.shape
    M = np.empty((G, nX + 2, nX + 2))
    M[:, :nX, :nX] = sxx
    M[:, :nX, nX] = sx
    M[:, nX, :nX] = sx
    M[:, :nX, nX + 1] = stx
    M[:, nX + 1, :nX] = stx
    M[:, nX, nX] = T
    M[:, nX, nX + 1] = M[:, nX + 1, nX] = T * T / 2
    M[:, nX + 1, nX + 1] = T**3 / 3
    return M
