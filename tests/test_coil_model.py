"""The saturating coil law (kickback.models.coil) against closed forms, scipy quadrature,
root finding and ODE integration."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp
from scipy.optimize import brentq

from kickback.models.coil import (
    current_from_flux,
    flux_linkage,
    incremental_inductance,
    rise_current,
    rise_time,
    stored_energy,
)

L0, I_SAT = 0.1, 0.2  # [H], [A] the issue's example coil


def test_stored_energy_of_the_issue_example():
    # W = L0·I_sat²·(ln U + 1/U − 1), U = 1 + I/I_sat (derived by u = 1 + i/I_sat in the issue);
    # L0 = 0.1 H, I_sat = 0.2 A, I = 0.12 A: U = 1.6, W = 0.004·(ln 1.6 − 0.375) = 0.38001 mJ.
    w = stored_energy(0.12, L0, I_SAT)
    assert w == pytest.approx(0.1 * 0.2**2 * (math.log(1.6) + 1 / 1.6 - 1), rel=1e-13)
    assert round(w * 1e3, 5) == 0.38001, f"W = {w * 1e3:.6f} mJ, the issue states 0.38001 mJ"


@pytest.mark.parametrize("i", [1e-7, 1e-4, 3e-3, 0.12, 0.5, 4.0, -0.12, -2.0],
                         ids=lambda x: f"i={x:g}A")
def test_stored_energy_is_the_integral_of_i_dlambda(i):
    # W = ∫0^I i' (dλ/di') di' by adaptive quadrature (scipy.integrate.quad), independent of the
    # closed form; covers the small-current series branch and both signs.
    ref, _ = quad(lambda x: x * L0 / (1 + abs(x) / I_SAT) ** 2, 0.0, abs(i), epsabs=0.0, epsrel=1e-13)
    got = stored_energy(i, L0, I_SAT)
    assert got == pytest.approx(ref, rel=1e-11), f"W({i} A) = {got:.15g} J, quadrature {ref:.15g} J"


def test_stored_energy_linear_limit_and_below_half_lambda_i():
    i = np.array([0.0, 0.05, 0.3, 1.0])
    # linear coil (i_sat = inf): ½·L·i² exactly
    assert np.allclose(stored_energy(i, L0), 0.5 * L0 * i**2, rtol=1e-15, atol=0)
    # a very large i_sat approaches the linear law (W = ½ L i² (1 − 4/3·i/I_sat + …))
    assert stored_energy(0.3, L0, 1e9) == pytest.approx(0.5 * L0 * 0.09, rel=1e-8)
    # saturating λ(i) is concave, so W = λ·I − ∫λ di < ½·λ·I and ½·L_inc·I² < W < ½·L0·I²
    for x in i[1:]:
        w = stored_energy(x, L0, I_SAT)
        assert w < 0.5 * flux_linkage(x, L0, I_SAT) * x
        assert 0.5 * incremental_inductance(x, L0, I_SAT) * x * x < w < 0.5 * L0 * x * x


@pytest.mark.parametrize("lam", [-0.0199, -0.012, -1e-6, 0.0, 2e-5, 0.01, 0.019, 0.01999],
                         ids=lambda x: f"lambda={x:g}Wb")
def test_current_from_flux_inverts_flux_linkage_both_signs(lam):
    # reference: the root of λ(i) − λ by Brent's method (scipy.optimize.brentq)
    ref = 0.0 if lam == 0 else brentq(lambda i: flux_linkage(i, L0, I_SAT) - lam, -1e4, 1e4, xtol=1e-15,
                                      rtol=1e-15, maxiter=500)
    got = current_from_flux(lam, L0, I_SAT)
    assert got == pytest.approx(ref, rel=1e-9, abs=1e-15)
    assert flux_linkage(got, L0, I_SAT) == pytest.approx(lam, rel=1e-13, abs=1e-18)


def test_current_from_flux_beyond_the_flux_limit_is_infinite():
    # λ(i) → ±L0·I_sat as i → ±∞, so no finite current carries |λ| >= L0·I_sat = 0.02 Wb
    limit = L0 * I_SAT
    got = current_from_flux(np.array([limit, 0.03, -limit]), L0, I_SAT)
    assert got.tolist() == [math.inf, math.inf, -math.inf]
    assert current_from_flux(0.03, L0) == pytest.approx(0.3, rel=1e-15)  # linear coil: λ/L


@pytest.mark.parametrize("i", [-0.5, -0.1, 0.02, 0.2, 0.7], ids=lambda x: f"i={x:g}A")
def test_incremental_inductance_is_the_derivative(i):
    # central difference of λ(i), step h = 1e-5 A (truncation error O(h²) ~ 1e-10 relative)
    h = 1e-5
    ref = (flux_linkage(i + h, L0, I_SAT) - flux_linkage(i - h, L0, I_SAT)) / (2 * h)
    assert incremental_inductance(i, L0, I_SAT) == pytest.approx(ref, rel=1e-8)
    assert incremental_inductance(I_SAT, L0, I_SAT) == pytest.approx(L0 / 4, rel=1e-15)  # (1 + 1)² = 4


V, R = 24.0, 40.0  # [V], [Ω]: final current 0.6 A = 3·I_sat


@pytest.mark.parametrize("i", [1e-6, 0.05, 0.3, 0.55, 0.5999], ids=lambda x: f"i={x:g}A")
def test_rise_time_is_the_integral_of_dlambda_over_v_minus_ri(i):
    # t(i) = ∫ dλ/(V − R i) = ∫ L_inc(i')/(V − R i') di' by scipy.integrate.quad
    ref, _ = quad(lambda x: L0 / (1 + x / I_SAT) ** 2 / (V - R * x), 0.0, i, epsabs=0.0, epsrel=1e-12, limit=200)
    assert rise_time(i, V, R, L0, I_SAT) == pytest.approx(ref, rel=1e-10)


def test_rise_time_linear_limit_and_unreachable_current():
    i = np.array([0.0, 0.1, 0.4, 0.59])
    # linear RL: t = −(L/R)·ln(1 − i·R/V)
    assert np.allclose(rise_time(i, V, R, L0), -(L0 / R) * np.log1p(-i * R / V), rtol=1e-14, atol=0)
    assert rise_time(0.6, V, R, L0, I_SAT) == math.inf
    with pytest.raises(ValueError, match="i >= 0"):
        rise_time(-0.1, V, R, L0, I_SAT)


def test_rise_current_matches_ode_integration():
    # dλ/dt = V − R·i(λ), i(λ) = λ/(L0 − λ/I_sat) written here; Radau at rtol 1e-11 (scipy)
    t = np.linspace(0.0, 8e-3, 81)
    sol = solve_ivp(lambda _t, y: [V - R * y[0] / (L0 - y[0] / I_SAT)], (0.0, t[-1]), [0.0], t_eval=t,
                    method="Radau", rtol=1e-11, atol=1e-16)
    ref = sol.y[0] / (L0 - sol.y[0] / I_SAT)
    got = rise_current(t, V, R, L0, I_SAT)
    assert np.max(np.abs(got - ref)) < 1e-8 * (V / R), f"max deviation {np.max(np.abs(got - ref)):.3g} A"
    # the linear coil is the textbook i = (V/R)(1 − e^(−tR/L))
    assert np.allclose(rise_current(t, V, R, L0), V / R * -np.expm1(-t * R / L0), rtol=1e-14, atol=0)
    assert rise_current(-1e-3, V, R, L0, I_SAT) == 0.0


def test_rise_current_inverts_rise_time():
    i = np.linspace(0.0, 0.59, 40)
    back = rise_current(rise_time(i, V, R, L0, I_SAT), V, R, L0, I_SAT)
    assert np.max(np.abs(back - i)) < 1e-12


@pytest.mark.parametrize("args, match", [((0.1, 0.0, 0.2), "L0 must be > 0"), ((0.1, 0.1, -1.0), "i_sat must be")],
                         ids=["zero-L0", "negative-isat"])
def test_bad_parameters_raise(args, match):
    with pytest.raises(ValueError, match=match):
        flux_linkage(*args)
