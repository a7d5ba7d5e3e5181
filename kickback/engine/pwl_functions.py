"""Special functions of exact linear-segment solutions, robust at every limit.

The batch engine writes each state on a segment as constants, a ramp and *modal terms*
``exp(m·τ)·(C_w(τ)·a + S_w(τ)·b)`` with

.. math:: C_w(τ) = \\cosh(wτ), \\qquad S_w(τ) = \\sinh(wτ)/w, \\qquad w^2 \\in \\mathbb{R},

(``w² < 0`` is an oscillation, ``w² = 0`` a double root: ``C = 1``, ``S = τ``). Written in ``w²``
these functions are entire, so nothing breaks at critical damping. This module gives them, the
φ-functions of exponential integrators, and their integrals over ``[0, T]`` against ``τ^j``,
all vectorised over arrays of cases and free of overflow and cancellation.

References
----------
M. Hochbruck and A. Ostermann, "Exponential integrators", Acta Numerica 19 (2010) 209–286
(the φ-functions and their recurrences).
C. Moler and C. Van Loan, "Nineteen dubious ways to compute the exponential of a matrix,
twenty-five years later", SIAM Review 45(1), 2003 (why the closed forms here avoid
eigenvector bases near repeated eigenvalues).
M. Abramowitz and I. A. Stegun, Handbook of Mathematical Functions, 1964, §6.5 (incomplete
gamma function ∫0^1 θ^n e^{uθ} dθ and its series).
"""

from __future__ import annotations

import functools
import math

import numpy as np

#: below this |z| the φ-functions use their Taylor series
_PHI_SERIES = 0.1
_PHI_TERMS = 11
#: |w²|·τ² below which cosh and sinh/w use their series
_CS_SERIES = 1e-3
#: |w²|·T² below which the modal integrals use their series in w²
_INT_SERIES = 0.25
_INT_TERMS = 9
#: the moments μ_n(u) = ∫0^1 θ^n e^{uθ} dθ: below |u| this the downward φ recurrence is used
_MOMENT_SWITCH = 40.0
_NMAX = 2 * _INT_TERMS + 2

#: the modal integrals' series (see :func:`modal_integrals`): per integral and term k, the index j
#: of the moment I_j and the factorial dividing it (K0: I_2k/(2k)!, K1: I_2k+1/(2k)!, J0: I_2k+1/(2k+1)!,
#: J1: I_2k+2/(2k+1)!, H0: I_2k+2/(2k+2)!)
_INT_KEYS = ("K0", "K1", "J0", "J1", "H0")
_INT_PLAN = (np.array([[2 * k + a for k in range(_INT_TERMS)] for a, _f in ((0, 0), (1, 0), (1, 1), (2, 1), (2, 2))]),
             np.array([[[float(math.factorial(2 * k + f))] for k in range(_INT_TERMS)]
                       for _a, f in ((0, 0), (1, 0), (1, 1), (2, 1), (2, 2))]))

_FACT = np.array([math.factorial(k) for k in range(_PHI_TERMS + 3)], dtype=float)


def phi12(z):
    """The first two φ-functions.

    Parameters
    ----------
    z : array, real or complex — dimensionless

    Returns
    -------
    (phi1, phi2) : arrays like ``z``

    .. math:: φ_1(z) = \\frac{e^z - 1}{z}, \\qquad φ_2(z) = \\frac{e^z - 1 - z}{z^2}

    Taylor series (10 terms, error < 1e-19) below |z| = 0.1, the closed forms above (where the
    cancellation in φ2 costs at most a factor 20 of rounding).
    """
    z = np.asarray(z)
    dtype = np.result_type(z, float)
    p1 = np.empty(z.shape, dtype)
    p2 = np.empty(z.shape, dtype)
    small = np.abs(z) < _PHI_SERIES
    if np.any(small):
        zs = z[small]
        a1 = np.zeros(zs.shape, dtype)
        a2 = np.zeros(zs.shape, dtype)
        for k in range(_PHI_TERMS - 1, -1, -1):
            a1 = a1 * zs + 1.0 / _FACT[k + 1]
            a2 = a2 * zs + 1.0 / _FACT[k + 2]
        p1[small] = a1
        p2[small] = a2
    big = ~small
    if np.any(big):
        zl = z[big]
        with np.errstate(over="ignore", invalid="ignore"):
            q1 = np.expm1(zl) / zl
            p1[big] = q1
            p2[big] = (q1 - 1.0) / zl
    return p1, p2


def slow_rate(m, w2, prod):
    """The root ``m + w`` of ``λ² − 2mλ + prod`` (w² = m² − prod > 0) without cancellation.

    ``m − w`` is formed directly (no cancellation for m < 0) and ``m + w = prod/(m − w)``;
    where w² ≤ 0 the result is ``m``.
    """
    m, w2, prod = np.broadcast_arrays(np.asarray(m, float), np.asarray(w2, float), np.asarray(prod, float))
    w = np.sqrt(np.maximum(w2, 0.0))
    rm = m - w
    ok = (w2 > 0) & (rm < 0)
    return np.where(ok, prod / np.where(ok, rm, 1.0), m + w)


def cosh_sinhc(m, w2, tau, rp=None):
    """``exp(m τ)·C_w(τ)`` and ``exp(m τ)·S_w(τ)`` without overflow.

    Parameters
    ----------
    m : array — [1/s] decay rate (≤ 0 up to rounding, with m ± w ≤ 0 for real w)
    w2 : array — [1/s²] w², any sign
    tau : array — [s] broadcastable with m and w2
    rp : array or None — [1/s] ``m + w`` computed without cancellation (:func:`slow_rate`)

    Returns
    -------
    (ec, es) : arrays — [–] and [s]
    """
    if rp is None:
        rp = m + np.sqrt(np.maximum(np.asarray(w2, float), 0.0))
    m, w2, tau, rp = np.broadcast_arrays(np.asarray(m, float), np.asarray(w2, float), np.asarray(tau, float),
                                         np.asarray(rp, float))
    x2 = w2 * tau * tau
    em = np.exp(m * tau)
    series = np.abs(x2) < _CS_SERIES
    one = _one_branch(m, w2, tau, rp, x2, em, series)
    if one is not None:
        return one
    xs = np.where(series, x2, 0.0)
    c_s = 1.0 + xs * (1 / 2 + xs * (1 / 24 + xs / 720))
    s_s = tau * (1.0 + xs * (1 / 6 + xs * (1 / 120 + xs / 5040)))
    osc = (~series) & (x2 < 0)
    nu = np.sqrt(np.where(osc, -w2, 1.0))
    c_o = np.cos(nu * tau)
    s_o = np.sin(nu * tau) / nu
    hyp = (~series) & (x2 > 0)
    w = np.sqrt(np.where(hyp, w2, 1.0))
    with np.errstate(over="ignore", invalid="ignore"):
        ep = np.exp(np.where(hyp, rp * tau, 0.0))
        en = np.exp(np.where(hyp, (m - w) * tau, 0.0))
    ec = np.where(series, em * c_s, np.where(osc, em * c_o, 0.5 * (ep + en)))
    es = np.where(series, em * s_s, np.where(osc, em * s_o, 0.5 * (ep - en) / w))
    return ec, es


def _one_branch(m, w2, tau, rp, x2, em, series):
    """:func:`cosh_sinhc` where every element takes the same branch (the common case: one
    segment's grid): that branch alone, with the same operations as the general path, so the
    values are the same to the bit; None for a mix (or a NaN)."""
    if series.all():
        c_s = 1.0 + x2 * (1 / 2 + x2 * (1 / 24 + x2 / 720))
        s_s = tau * (1.0 + x2 * (1 / 6 + x2 * (1 / 120 + x2 / 5040)))
        return em * c_s, em * s_s
    if (x2 < 0).all() and not series.any():
        nu = np.sqrt(-w2)
        return em * np.cos(nu * tau), em * (np.sin(nu * tau) / nu)
    if (x2 > 0).all() and not series.any():
        w = np.sqrt(w2)
        with np.errstate(over="ignore", invalid="ignore"):
            ep = np.exp(rp * tau)
            en = np.exp((m - w) * tau)
        return 0.5 * (ep + en), 0.5 * (ep - en) / w
    return None


def psi01(s, T):
    """``∫0^T e^{sτ} dτ`` and ``∫0^T τ e^{sτ} dτ`` for real or complex rates ``s`` [1/s], ``T`` [s]."""
    p1, p2 = phi12(s * T)
    return T * p1, T * T * (p1 - p2)


#: terms of the moments' series for |u| ≤ 1 (the last is below 1/22! ≈ 9e-22 of the first)
_MOMENT_TERMS = 22
#: up to this many elements the moments' series is summed as one array (see :func:`moments`)
_MOMENT_WHOLE = 64


@functools.cache
def _series_denominators(nmax: int) -> np.ndarray:
    """The denominators ``n + k + 1`` of the moments' series, shape (_MOMENT_TERMS, nmax + 1, 1)
    (term k, order n), as floats; built once per ``nmax`` (read-only)."""
    den = (np.arange(_MOMENT_TERMS)[:, None, None] + np.arange(nmax + 1)[None, :, None] + 1).astype(float)
    den.setflags(write=False)
    return den


def moments(m, T, nmax: int = _NMAX):
    """``I_n = ∫0^T τ^n e^{mτ} dτ`` for n = 0 … nmax, real rates ``m`` ≤ 0 (tiny positive allowed).

    Parameters
    ----------
    m : array — [1/s]
    T : array — [s]
    nmax : int

    Returns
    -------
    array of shape (nmax + 1,) + broadcast shape — [s^{n+1}]

    .. math:: I_n = T^{n+1} μ_n(mT), \\quad μ_n(u) = \\int_0^1 θ^n e^{uθ} dθ = e^u\\, n!\\, φ_{n+1}(-u)

    |u| ≤ 1: the series μ_n = Σ_k u^k/(k!(n+k+1)); 1 < |u| ≤ 40: φ_{n+1} summed downward
    (φ_k = 1/k! + z φ_{k+1}, stable); beyond, the upward recurrence μ_n = (n μ_{n-1} − e^u)/|u|
    (stable there). Each on its own elements only.
    """
    m, T = np.broadcast_arrays(np.asarray(m, float), np.asarray(T, float))
    u = (m * T).ravel()
    Tf = T.ravel()
    mu = np.empty((nmax + 1, u.size))
    n_ax = np.arange(nmax + 1)[:, None]
    small = np.abs(u) <= 1.0
    if np.any(small):
        us = u[small]
        # μ_n = Σ_k (u^k/k!)/(n + k + 1), summed in k order. A few elements (a single case's
        # segment): every quotient at once, a reduction over the leading axis adds row after row
        # as the running sum does; many (a batch): the running sum itself, without the large
        # (terms × orders × elements) array
        if us.size <= _MOMENT_WHOLE:
            terms = np.empty((_MOMENT_TERMS, 1, us.size))
            term = np.ones_like(us)
            for k in range(_MOMENT_TERMS):
                terms[k, 0] = term
                term = term * us / (k + 1)
            mu[:, small] = np.add.reduce(terms / _series_denominators(nmax), axis=0)
        else:
            acc = np.zeros((nmax + 1, us.size))
            term = np.ones_like(us)
            for k in range(_MOMENT_TERMS):
                acc += term / (n_ax + k + 1)
                term = term * us / (k + 1)
            mu[:, small] = acc
    mid = ~small & (np.abs(u) <= _MOMENT_SWITCH)
    if np.any(mid):
        z = -u[mid]
        top = nmax + 1 + 40
        phi = np.zeros_like(z)
        term = np.full(z.shape, 1.0 / math.factorial(top))
        for k in range(80):
            phi = phi + term
            term = term * z / (top + k + 1)
        cur = phi
        vals = np.empty((nmax + 2, z.size))
        for k in range(top - 1, 0, -1):
            cur = 1.0 / math.factorial(k) + z * cur
            if k <= nmax + 1:
                vals[k] = cur
        eu = np.exp(-z)
        for n in range(nmax + 1):
            mu[n, mid] = eu * math.factorial(n) * vals[n + 1]
    big = ~small & ~mid
    if np.any(big):
        z = -u[big]
        ez = np.exp(-z)
        prev = -np.expm1(-z) / z
        mu[0, big] = prev
        for n in range(1, nmax + 1):
            prev = (n * prev - ez) / z
            mu[n, big] = prev
    out = mu * Tf[None, :] ** (n_ax + 1)
    return out.reshape((nmax + 1,) + m.shape)


def modal_integrals(m, w2, T, rp=None):
    """Integrals of a modal term over ``[0, T]``.

    Parameters
    ----------
    m : array — [1/s]
    w2 : array — [1/s²]
    T : array — [s]
    rp : array or None — [1/s] ``m + w`` without cancellation (real w), see :func:`slow_rate`

    Returns
    -------
    dict of arrays with keys ``K0, K1`` (∫ τ^j e^{mτ} C_w), ``J0, J1`` (∫ τ^j e^{mτ} S_w) and
    ``H0`` (∫ e^{mτ}(C_w − 1)/w²).

    For ``|w|T ≥ 1/2`` they follow from the exponentials ``e^{(m ± w)τ}`` (complex for an
    oscillation); below, from the series of C_w and S_w in w² term by term (terms fall as
    (w²T²)^k/(2k)!), so both sides are free of cancellation beyond a factor ~4.
    """
    if rp is None:
        rp = m + np.sqrt(np.maximum(np.asarray(w2, float), 0.0))
    m, w2, T, rp = np.broadcast_arrays(np.asarray(m, float), np.asarray(w2, float), np.asarray(T, float),
                                       np.asarray(rp, float))
    shape = m.shape
    m, w2, T, rp = m.ravel(), w2.ravel(), T.ravel(), rp.ravel()
    ser = np.abs(w2 * T * T) < _INT_SERIES
    out = {k: np.empty(m.size) for k in ("K0", "K1", "J0", "J1", "H0")}
    if np.any(ser):
        ws = w2[ser]
        mom = moments(m[ser], T[ser])
        if ws.size <= _MOMENT_WHOLE:
            # a few elements: the k-th term of each integral is w²ᵏ·I_j/f (its moment I_j and
            # factorial f in _INT_PLAN), all terms at once, summed in k order as below
            wk = np.cumprod(np.concatenate([np.ones((1, ws.size)),
                                            np.broadcast_to(ws, (_INT_TERMS - 1, ws.size))]), axis=0)
            jm, fac = _INT_PLAN
            terms = wk[None] * mom[jm] / fac
            acc5 = np.zeros((len(_INT_KEYS), ws.size))
            for k in range(_INT_TERMS):
                acc5 += terms[:, k]
            acc = dict(zip(_INT_KEYS, acc5, strict=True))
        else:
            acc = {k: np.zeros(ws.size) for k in out}
            wk = np.ones_like(ws)
            for k in range(_INT_TERMS):
                acc["K0"] += wk * mom[2 * k] / math.factorial(2 * k)
                acc["K1"] += wk * mom[2 * k + 1] / math.factorial(2 * k)
                acc["J0"] += wk * mom[2 * k + 1] / math.factorial(2 * k + 1)
                acc["J1"] += wk * mom[2 * k + 2] / math.factorial(2 * k + 1)
                acc["H0"] += wk * mom[2 * k + 2] / math.factorial(2 * k + 2)
                wk = wk * ws
        for k in out:
            out[k][ser] = acc[k]
    ex = ~ser
    if np.any(ex):
        Tl, w2l, ml = T[ex], w2[ex], m[ex]
        w = np.sqrt(w2l.astype(complex))
        plus = np.where(w2l > 0, rp[ex] + 0j, ml + w)
        a0, a1 = psi01(plus, Tl)
        b0, b1 = psi01(ml - w, Tl)
        c0, _ = psi01(ml, Tl)
        k0 = (0.5 * (a0 + b0)).real
        out["K0"][ex] = k0
        out["K1"][ex] = (0.5 * (a1 + b1)).real
        out["J0"][ex] = ((a0 - b0) / (2 * w)).real
        out["J1"][ex] = ((a1 - b1) / (2 * w)).real
        out["H0"][ex] = (k0 - c0) / w2l
    return {k: v.reshape(shape) for k, v in out.items()}


def log1p_ratio(x):
    """``log(1 + x)/x`` with its limit 1 at x = 0 (x > −1)."""
    x = np.asarray(x, float)
    small = np.abs(x) < 1e-8
    xs = np.where(small, 1.0, x)
    return np.where(small, 1.0 - x / 2 + x * x / 3, np.log1p(xs) / xs)
