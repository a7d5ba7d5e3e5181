"""The algebraic node's balance solved by Newton's method on the branches' conductances (issue 14).

A switch node without capacitance is solved from its current balance at every evaluation of the
rates. Brent's method spent ~15 evaluations of the branch laws on a diode's exponential, each a
series solve where a diode meets a varistor (wide-range cases 6079 and 9182: over 2 s, 80 % of it
there); Newton's method inside the same bracket, with the conductances the Jacobian uses, takes
3–5 and meets the same tolerance.

References: a Shockley diode beside a resistor, fed a current I, balances at
    v = (I + I_s)·R − n·V_T·W,  W = W((I_s·R/(n·V_T))·exp((I + I_s)·R/(n·V_T)))
(the Lambert W function, W(z·e^x) = ω(ln z + x) with the Wright ω function: T. C. Banwell and
A. Jayakumar, Electronics Letters 36(4), 2000; scipy.special.wrightomega), and a varistor
i = I₁·(v/V₁)^α beside a resistor is checked against scipy's brentq on the balance written here
(L. M. Levinson and H. R. Philipp, Am. Ceram. Soc. Bull. 65(4), 1986). Demo values.
"""

from __future__ import annotations

import math

import pytest
from scipy.optimize import brentq
from scipy.special import wrightomega

from kickback.nodebalance import solve_monotone

IS, NVT, R = 1e-9, 1.8 * 0.025693, 50.0


@pytest.mark.parametrize("current", [1e-6, 1e-3, 0.5, 20.0])
def test_diode_beside_resistor_meets_the_lambert_closed_form(current):
    calls = [0]

    def resid(v):
        calls[0] += 1
        return IS * math.expm1(v / NVT) + v / R - current

    def with_slope(v):  # one evaluation: the residual and its slope
        return resid(v), IS * math.exp(v / NVT) / NVT + 1.0 / R

    # W(z·e^x) = ω(ln z + x), the Wright ω function (no overflow of e^x); from W·e^W = z·e^x,
    # I_s·e^{v/(n·V_T)} = n·V_T·W/R, i.e. v = n·V_T·ln(n·V_T·W/(R·I_s)) (no cancellation)
    w = float(wrightomega(math.log(IS * R / NVT) + (current + IS) * R / NVT).real)
    ref = NVT * math.log(NVT * w / (R * IS))
    v = solve_monotone(resid, [], 10.0, with_slope)
    assert v == pytest.approx(ref, rel=1e-13, abs=1e-13)
    # 5–18 evaluations with the bracket's two, where Brent's method takes 11–22 (measured)
    assert calls[0] <= 20
    # and Brent's method (no slope) agrees
    assert solve_monotone(resid, [], 10.0) == pytest.approx(ref, rel=1e-13, abs=1e-13)


def test_varistor_beside_resistor_meets_brent():
    v1, i1, alpha, i = 30.0, 1e-3, 25.0, 2.0

    def resid(v):
        return math.copysign(i1 * abs(v / v1) ** alpha, v) + v / 1e3 - i

    def with_slope(v):
        return resid(v), alpha * i1 * abs(v / v1) ** (alpha - 1) / v1 + 1e-3

    ref = brentq(resid, 0.0, 100.0, xtol=1e-15, rtol=8.9e-16)
    assert solve_monotone(resid, [], 10.0, with_slope) == pytest.approx(ref, rel=1e-13)


def test_kink_and_flat_stretch():
    # a piecewise-linear law with a kink and a flat stretch (a Zener's blocking band beside a
    # leakage): Newton's steps that leave the bracket bisect, and the root is still met
    def law(v):
        return (v - 5.0) / 0.1 if v > 5.0 else 1e-12 * v

    def resid(v):
        return law(v) - 0.3

    def with_slope(v):
        return resid(v), (10.0 if v > 5.0 else 1e-12)

    assert solve_monotone(resid, [], 10.0, with_slope) == pytest.approx(5.03, rel=1e-13)


def test_an_overflowing_end_of_the_bracket():
    # a residual that is +inf at the bracket's upper end (an exponential law overflowing): the
    # chord has no root inside, Newton's method starts from the middle and still meets the root
    def resid(v):
        return math.inf if v > 50.0 else IS * math.expm1(v / NVT) - 1e-3

    def with_slope(v):
        return resid(v), (math.inf if v > 50.0 else IS * math.exp(v / NVT) / NVT)

    ref = NVT * math.log1p(1e-3 / IS)  # the diode alone at 1 mA (Shockley's law inverted)
    assert solve_monotone(resid, [], 60.0, with_slope) == pytest.approx(ref, rel=1e-13)
