"""The closed-form segment functions on every evaluation path (one branch for a whole array —
the fast paths — and mixed arrays), against mpmath quadratures and mpmath's own functions.

References
----------
F. Johansson et al., mpmath: a Python library for arbitrary-precision floating-point arithmetic
(``mpmath.quad`` tanh-sinh quadrature, ``mpmath.cosh``/``sinh``/``cos``/``sin`` at 40 digits).
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest

from kickback.engine.pwl_functions import cosh_sinhc, modal_integrals, moments

mpmath.mp.dps = 40


def _cw_sw(w2, t):
    """C_w(t) = cosh(w t) and S_w(t) = sinh(w t)/w for w² of either sign (cos, sin/ν for w² < 0)."""
    w2 = mpmath.mpf(w2)
    if w2 > 0:
        w = mpmath.sqrt(w2)
        return mpmath.cosh(w * t), mpmath.sinh(w * t) / w
    if w2 < 0:
        nu = mpmath.sqrt(-w2)
        return mpmath.cos(nu * t), mpmath.sin(nu * t) / nu
    return mpmath.mpf(1), t


def _rel(a, ref):
    return abs(mpmath.mpf(float(a)) - ref) / max(abs(ref), mpmath.mpf(1e-300))


# (m [1/s], w² [1/s²], τ [s]) per element: series (|w²τ²| < 1e-3), oscillating, hyperbolic
SERIES = [(-3.0, 2.0, 1e-3), (-1e4, -5e1, 2e-3), (-2.5e5, 1e6, 1e-5)]
OSC = [(-2e3, -4e8, 1e-4), (-10.0, -1e10, 3e-5), (-5e2, -2.5e7, 2e-3)]
HYP = [(-5e4, 1e9, 1e-4), (-2e6, 3.9e12, 2e-6), (-1e3, 9e5, 5e-3)]


@pytest.mark.parametrize("rows", [SERIES, OSC, HYP, SERIES[:1], OSC[:1], HYP[:1], SERIES + OSC + HYP],
                         ids=["series", "osc", "hyp", "series1", "osc1", "hyp1", "mixed"])
def test_cosh_sinhc_every_path(rows):
    # e^{mτ}·C_w(τ) and e^{mτ}·S_w(τ), evaluated in mpmath at 40 digits (closed forms of cosh/sinh)
    m, w2, tau = (np.array(c) for c in zip(*rows, strict=True))
    ec, es = cosh_sinhc(m, w2, tau)
    for k, (mk, wk, tk) in enumerate(rows):
        c, s = _cw_sw(wk, mpmath.mpf(tk))
        e = mpmath.exp(mpmath.mpf(mk) * tk)
        assert _rel(ec[k], e * c) < 1e-13
        assert _rel(es[k], e * s) < 1e-13


@pytest.mark.parametrize("n_el", [1, 2, 5])
def test_moments_against_quadrature(n_el):
    # I_n = ∫0^T τ^n e^{mτ} dτ by mpmath.quad; |mT| ≤ 1 (the series), beyond (the recurrences)
    rng = np.random.default_rng(7 + n_el)
    u = np.concatenate([rng.uniform(-1.0, 0.0, n_el), [-7.5, -60.0]])
    T = 10.0 ** rng.uniform(-7, -2, u.size)
    mom = moments(u / T, T)
    for j in range(u.size):
        Tj = mpmath.mpf(T[j])
        uj = mpmath.mpf(u[j] / T[j]) * Tj
        for n in (0, 1, 7, 18):
            # on θ = τ/T (mpmath.quad on [0, T] itself loses digits for T of microseconds)
            ref = Tj ** (n + 1) * mpmath.quad(lambda th, n=n, uj=uj: th**n * mpmath.exp(uj * th), [0, 1])
            assert _rel(mom[n, j], ref) < 1e-13, (j, n)


@pytest.mark.parametrize("rows", [SERIES + [(-40.0, -3e3, 5e-3), (-1e2, 4e3, 4e-3)], [(-3.0, 2.0, 1e-3)]],
                         ids=["several", "one"])
def test_modal_integrals_against_quadrature(rows):
    # K0, K1 = ∫ τ^j e^{mτ} C_w, J0, J1 = ∫ τ^j e^{mτ} S_w, H0 = ∫ e^{mτ}(C_w − 1)/w², by mpmath.quad
    # (the series in w² is taken where |w²|T² < 1/4: every row here)
    m, w2, T = (np.array(c) for c in zip(*rows, strict=True))
    r = modal_integrals(m, w2, T)
    for k, (mk, wk, Tk) in enumerate(rows):
        mk = mpmath.mpf(mk)

        def f(kind, t, mk=mk, wk=wk):
            c, s = _cw_sw(wk, t)
            e = mpmath.exp(mk * t)
            return {"K0": e * c, "K1": t * e * c, "J0": e * s, "J1": t * e * s,
                    "H0": e * (c - 1) / mpmath.mpf(wk)}[kind]

        for kind in ("K0", "K1", "J0", "J1", "H0"):
            Tm = mpmath.mpf(Tk)
            ref = Tm * mpmath.quad(lambda th, kind=kind, Tm=Tm: f(kind, th * Tm), [0, 1])  # on θ = τ/T
            assert _rel(r[kind][k], ref) < 1e-12, (k, kind)
