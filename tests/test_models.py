"""Device laws of kickback.models checked against formulas and independent solutions.

Every expected value is computed here from a formula or by a general-purpose library (scipy,
sympy), never copied from the program's output. Sources:

- Physical constants: BIPM, The International System of Units (SI), 9th ed., 2019 (exact k and
  q); the same values from scipy.constants.
- Diode exponential law with series resistance: A. S. Sedra and K. C. Smith, Microelectronic
  Circuits, ch. 4; references solved with scipy.optimize.brentq, and in closed form with the
  Lambert W function (scipy.special.lambertw, sympy.LambertW at 40 digits).
- Linearised switching (linear current fall): N. Mohan, T. M. Undeland and W. P. Robbins,
  Power Electronics, 3rd ed., ch. 2.
- Varistor power law i = I1·(v/V1)^α: L. M. Levinson and H. R. Philipp, "Zinc oxide varistors —
  a review", Am. Ceram. Soc. Bull. 65(4), 1986.

All component values are invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy
from scipy import constants, optimize, special

from kickback.case import Element
from kickback.models import (
    ConstantDropDiode,
    LinearPieces,
    Resistor,
    ShockleyDiode,
    Varistor,
    breakdown_element,
    element_law,
    shockley_from_terminal_point,
    thermal_voltage,
)
from kickback.models.switch import switch_law

# k and q exact since the 2019 SI redefinition (BIPM SI brochure, 9th ed.)
K_BOLTZMANN = 1.380649e-23  # [J/K]
Q_ELEMENTARY = 1.602176634e-19  # [C]


def _close(got, want, rtol, what, atol=0.0):
    got, want = float(got), float(want)
    assert abs(got - want) <= max(rtol * abs(want), atol), (
        f"{what}: got {got:.15g}, expected {want:.15g} "
        f"(error {abs(got - want):.3g}, allowed rtol {rtol:g}" + (f", atol {atol:g}" if atol else "") + ")")


# ============================================================================ thermal voltage
def test_thermal_voltage_at_25_degc():
    """V_T = kT/q at 298.15 K is 25.693 mV (BIPM SI brochure: exact k and q)."""
    vt = thermal_voltage(298.15)
    _close(vt, K_BOLTZMANN * 298.15 / Q_ELEMENTARY, 1e-15, "V_T from the exact SI constants")
    _close(vt, constants.k * 298.15 / constants.e, 1e-15, "V_T from scipy.constants")
    _close(vt, 25.693e-3, 0.0, "V_T rounded to 25.693 mV", atol=0.5e-6)


@pytest.mark.parametrize("temperature", [pytest.param(233.15, id="-40degC"), pytest.param(398.15, id="125degC")])
def test_thermal_voltage_is_proportional_to_temperature(temperature):
    """V_T = kT/q is linear in T (BIPM SI brochure)."""
    _close(thermal_voltage(temperature), thermal_voltage(298.15) * temperature / 298.15, 1e-14,
           f"V_T at {temperature} K")


# ============================================================================ Shockley diode
# (n, I_s [A], R_s [Ω]) — invented
DIODES = [
    pytest.param(1.9, 2e-9, 0.05, id="n1.9-Is2n-Rs50m"),
    pytest.param(1.0, 1e-14, 0.8, id="n1-Is10f-Rs0.8"),
    pytest.param(1.3, 5e-6, 0.01, id="n1.3-Is5u-Rs10m"),
    pytest.param(1.8, 1e-12, 0.0, id="n1.8-Is1p-Rs0"),
]
VT = K_BOLTZMANN * 298.15 / Q_ELEMENTARY


def _brentq_forward_current(n, i_s, r_s, v):
    """Root in i of v = n V_T ln(1 + i/I_s) + R_s i for v > 0 (scipy.optimize.brentq).

    derived: the junction and R_s both take a positive share of v, so 0 < i ≤ v/R_s and
    i ≤ I_s·expm1(v/(n V_T)) (doubled for a bracket that survives rounding).
    """
    a = n * VT
    hi = v / r_s if r_s > 0 else 2.0 * i_s * math.expm1(v / a)
    return optimize.brentq(lambda i: a * math.log1p(i / i_s) + r_s * i - v, 0.0, hi, xtol=1e-300, rtol=1e-15)


def _brentq_reverse_current(n, i_s, r_s, v):
    """Current at v < 0, solved for the junction voltage u (scipy.optimize.brentq).

    derived: i = I_s·expm1(u/(n V_T)) and v = u + R_s i; since i < 0, v < u < 0. Solving for u
    keeps the digits of i + I_s that a solve in i near −I_s would lose.
    """
    a = n * VT
    u = optimize.brentq(lambda x: x + r_s * i_s * math.expm1(x / a) - v, v, 0.0, xtol=1e-300, rtol=1e-15)
    return i_s * math.expm1(u / a)


@pytest.mark.parametrize(("n", "i_s", "r_s"), DIODES)
def test_shockley_current_inverts_voltage_forward(n, i_s, r_s):
    """current(voltage(i)) = i from 1 pA to 100 A (derived: the two are inverse laws).

    Floor: the explicit form ends in "− I_s", so at i ≪ I_s a few ulps of I_s remain (derived).
    """
    d = ShockleyDiode(n, i_s, r_s, VT)
    i = np.logspace(-12, 2, 57)
    back = d.current(d.voltage(i))
    excess = np.abs(back - i) - (1e-10 * i + 1e-14 * i_s)
    k = int(np.argmax(excess))
    assert excess[k] <= 0, (f"current(voltage({i[k]:.3g} A)) = {back[k]:.15g} A (allowed 1e-10 relative "
                            f"+ 1e-14·I_s)")


@pytest.mark.parametrize(("n", "i_s", "r_s"), DIODES)
@pytest.mark.parametrize("v", [-1e-3, -0.05, -0.3], ids=["-1mV", "-50mV", "-0.3V"])
def test_shockley_voltage_inverts_current_reverse(n, i_s, r_s, v):
    """voltage(current(v)) = v at mild reverse voltages, where i + I_s still has digits (derived)."""
    d = ShockleyDiode(n, i_s, r_s, VT)
    i = float(d.current(v))
    assert -i_s <= i < 0, f"reverse current {i:.3g} A must lie in [-I_s, 0)"
    _close(d.voltage(i), v, 0.0, f"voltage(current({v} V))", atol=1e-9)


def _diode_points(voltages, usable):
    """(n, I_s, R_s, v) parameter sets for which ``usable(n, i_s, r_s, v)`` holds."""
    return [pytest.param(*p.values, v, id=f"{p.id}-{v:g}V") for p in DIODES for v in voltages
            if usable(*p.values, v)]


# derived: without R_s the current exceeds a float once v/(nV_T) > ~709
FORWARD_POINTS = _diode_points([0.05, 0.3, 0.6, 0.9, 2.0, 10.0, 60.0],
                               lambda n, i_s, r_s, v: r_s > 0 or v / (n * VT) < 700)


@pytest.mark.parametrize(("n", "i_s", "r_s", "v"), FORWARD_POINTS)
def test_shockley_current_matches_brentq_forward(n, i_s, r_s, v):
    """Current at v > 0 against brentq on v = nV_T ln(1 + i/I_s) + R_s i (Sedra & Smith ch. 4; scipy)."""
    d = ShockleyDiode(n, i_s, r_s, VT)
    _close(d.current(v), _brentq_forward_current(n, i_s, r_s, v), 1e-11, f"current at {v} V")


@pytest.mark.parametrize(("n", "i_s", "r_s"), DIODES)
@pytest.mark.parametrize("v", [-1e-3, -0.05, -0.3, -2.0, -50.0], ids=lambda v: f"{v:g}V")
def test_shockley_current_matches_brentq_reverse(n, i_s, r_s, v):
    """Reverse current against brentq in the junction-voltage form (derived; scipy)."""
    d = ShockleyDiode(n, i_s, r_s, VT)
    _close(d.current(v), _brentq_reverse_current(n, i_s, r_s, v), 1e-12, f"reverse current at {v} V",
           atol=1e-15 * i_s)


def _lambertw_current(n, i_s, r_s, v):
    """Closed form with Lambert W (Banwell & Jayakumar, Electron. Lett. 36(4), 2000; derived from
    v = nV_T ln(1 + i/I_s) + R_s i):  i = (a/R_s)·W((R_s I_s/a)·exp((v + R_s I_s)/a)) − I_s, a = nV_T.
    Evaluated by scipy.special.lambertw."""
    a = n * VT
    z = r_s * i_s / a * math.exp((v + r_s * i_s) / a)
    return a / r_s * float(special.lambertw(z).real) - i_s


def _sympy_current(n, i_s, r_s, v, digits=40):
    """The same closed form in sympy with 40-digit arithmetic (no overflow at any voltage)."""
    f = sympy.Float
    a = f(n, digits) * f(K_BOLTZMANN, digits) * f(298.15, digits) / f(Q_ELEMENTARY, digits)
    i_s_, r_s_ = f(i_s, digits), f(r_s, digits)
    z = r_s_ * i_s_ / a * sympy.exp((f(v, digits) + r_s_ * i_s_) / a)
    return float((a / r_s_ * sympy.LambertW(z) - i_s_).evalf(digits))


RS_DIODES = [p for p in DIODES if p.values[2] > 0]


# derived: exp((v + R_s I_s)/(nV_T)) must stay below the float limit (~e^709)
LAMBERTW_POINTS = _diode_points([0.3, 0.7, 1.0, 5.0, 20.0],
                                lambda n, i_s, r_s, v: r_s > 0 and (v + r_s * i_s) / (n * VT) < 700)


@pytest.mark.parametrize(("n", "i_s", "r_s", "v"), LAMBERTW_POINTS)
def test_shockley_current_matches_scipy_lambertw(n, i_s, r_s, v):
    """Explicit current against scipy.special.lambertw where its argument does not overflow."""
    d = ShockleyDiode(n, i_s, r_s, VT)
    _close(d.current(v), _lambertw_current(n, i_s, r_s, v), 1e-11, f"current at {v} V vs lambertw")


@pytest.mark.parametrize(("n", "i_s", "r_s"), RS_DIODES)
@pytest.mark.parametrize("v", [0.5, 0.85, 3.0, 80.0], ids=lambda v: f"{v:g}V")
def test_shockley_current_matches_sympy_lambertw(n, i_s, r_s, v):
    """Explicit current against sympy.LambertW at 40 digits (also beyond float overflow of exp)."""
    d = ShockleyDiode(n, i_s, r_s, VT)
    _close(d.current(v), _sympy_current(n, i_s, r_s, v), 1e-12, f"current at {v} V vs sympy")


@pytest.mark.parametrize(("n", "i_s", "r_s"), DIODES)
def test_shockley_scalar_versions_agree_with_arrays(n, i_s, r_s):
    """current_at/voltage_at (scalar) equal current/voltage (array) point by point (derived: same law)."""
    d = ShockleyDiode(n, i_s, r_s, VT)
    for v in [-5.0, -0.2, -1e-4, 0.0, 1e-4, 0.4, 0.8, 1.5, 30.0]:
        _close(d.current_at(v), d.current(np.array([v]))[0], 1e-13, f"current_at({v})", atol=1e-30)
    for i in [-0.5 * i_s, 1e-12, 1e-6, 1e-2, 1.0, 100.0]:
        _close(d.voltage_at(i), d.voltage(np.array([i]))[0], 1e-14, f"voltage_at({i})", atol=1e-18)


@pytest.mark.parametrize(("n", "i_s"), [pytest.param(1.8, 1e-12, id="n1.8-Is1p"),
                                        pytest.param(1.0, 3e-15, id="n1-Is3f")])
@pytest.mark.parametrize("v", [-0.5, 0.2, 0.65, 0.9], ids=lambda v: f"{v:g}V")
def test_shockley_without_series_resistance_is_the_plain_exponential(n, i_s, v):
    """R_s = 0: i = I_s·(exp(v/(nV_T)) − 1) (Sedra & Smith ch. 4)."""
    d = ShockleyDiode(n, i_s, 0.0, VT)
    want = i_s * math.expm1(v / (n * VT))
    _close(d.current(v), want, 1e-13, f"current at {v} V")
    _close(d.current_at(v), want, 1e-13, f"current_at {v} V")
    if v > 0:
        _close(d.voltage(want), v, 1e-13, f"voltage at the current of {v} V")


def test_shockley_without_series_resistance_overflows_to_inf():
    """R_s = 0 at 50 V: the exponential exceeds a float; both versions give +inf, without a warning
    (derived: exp(50/(1.8·0.0257)) ≈ 10^470)."""
    d = ShockleyDiode(1.8, 1e-12, 0.0, VT)
    assert d.current_at(50.0) == math.inf, "scalar current at 50 V with R_s = 0"
    assert float(d.current(50.0)) == math.inf, "array current at 50 V with R_s = 0"


# ---------------------------------------------------------------- terminal point → (n, I_s)
# (forward_voltage [V], at_current [A], R_s [Ω]) — invented terminal points
TERMINAL_POINTS = [
    pytest.param(0.85, 1.0, 0.05, id="0.85V-at-1A-Rs50m"),
    pytest.param(0.72, 0.01, 0.8, id="0.72V-at-10mA-Rs0.8"),
    pytest.param(1.1, 5.0, 0.0, id="1.1V-at-5A-Rs0"),
]


@pytest.mark.parametrize(("vf", "i_f", "r_s"), TERMINAL_POINTS)
@pytest.mark.parametrize("n", [1.0, 1.9], ids=["n1", "n1.9"])
def test_terminal_point_given_ideality(vf, i_f, r_s, n):
    """Given n: I_s = I_f/expm1((V_f − R_s I_f)/(nV_T)); the diode passes through the point
    (Sedra & Smith ch. 4)."""
    n_out, i_s = shockley_from_terminal_point(vf, i_f, ideality=n, series_resistance=r_s, v_t=VT)
    assert n_out == n, f"ideality must be passed through, got {n_out}"
    _close(i_s, i_f / math.expm1((vf - r_s * i_f) / (n * VT)), 1e-13, "saturation current")
    d = ShockleyDiode(n_out, i_s, r_s, VT)
    _close(d.voltage_at(i_f), vf, 1e-13, "terminal voltage at the terminal current")
    _close(d.current_at(vf), i_f, 1e-10, "terminal current at the terminal voltage")


@pytest.mark.parametrize(("vf", "i_f", "r_s"), TERMINAL_POINTS)
@pytest.mark.parametrize("i_s", [1e-12, 2e-9], ids=["Is1p", "Is2n"])
def test_terminal_point_given_saturation_current(vf, i_f, r_s, i_s):
    """Given I_s: n = (V_f − R_s I_f)/(V_T ln(1 + I_f/I_s)), and the diode passes through the point."""
    n, i_s_out = shockley_from_terminal_point(vf, i_f, saturation_current=i_s, series_resistance=r_s, v_t=VT)
    assert i_s_out == i_s, f"saturation current must be passed through, got {i_s_out}"
    _close(n, (vf - r_s * i_f) / (VT * math.log1p(i_f / i_s)), 1e-13, "ideality")
    d = ShockleyDiode(n, i_s_out, r_s, VT)
    _close(d.voltage_at(i_f), vf, 1e-13, "terminal voltage at the terminal current")
    _close(d.current_at(vf), i_f, 1e-10, "terminal current at the terminal voltage")


@pytest.mark.parametrize(("vf", "i_f", "r_s"), TERMINAL_POINTS)
def test_terminal_point_round_trip(vf, i_f, r_s):
    """n → I_s → n returns the ideality (derived: both forms solve the same equation)."""
    _, i_s = shockley_from_terminal_point(vf, i_f, ideality=1.7, series_resistance=r_s, v_t=VT)
    n, _ = shockley_from_terminal_point(vf, i_f, saturation_current=i_s, series_resistance=r_s, v_t=VT)
    _close(n, 1.7, 1e-12, "ideality after the round trip")


@pytest.mark.parametrize("kwargs", [
    pytest.param({"ideality": 1.5, "series_resistance": 1.0}, id="series-drop-exceeds-vf"),
    pytest.param({}, id="neither-n-nor-Is"),
])
def test_terminal_point_rejects_impossible_input(kwargs):
    """A series drop ≥ V_f (0.85 V at 1 A with 1 Ω) or no second parameter cannot give a diode (derived)."""
    with pytest.raises(ValueError):
        shockley_from_terminal_point(0.85, 1.0, v_t=VT, **kwargs)


# ============================================================================ LinearPieces
# (v_fwd, r_fwd, v_rev, r_rev) — invented
FINITE_PIECES = [
    pytest.param(LinearPieces(24.0, 1.5, -0.7, 1.5), id="zener-24V"),
    pytest.param(LinearPieces(0.0, 10.0, 0.0, 10.0), id="resistor-10ohm"),
    pytest.param(LinearPieces(33.0, 0.4, -33.0, 0.6), id="bidirectional-33V"),
]


@pytest.mark.parametrize("p", FINITE_PIECES)
def test_pieces_current_inverts_voltage(p):
    """current(voltage(i)) = i on both sides (derived: v = v_on + r·i solved for i)."""
    i = np.array([-7.0, -0.3, -1e-6, 1e-6, 0.2, 5.0])
    np.testing.assert_allclose(p.current(p.voltage(i)), i, rtol=1e-12, atol=1e-14,
                               err_msg="current(voltage(i)) must return i")
    for x in i:
        _close(p.voltage_at(float(x)), p.voltage(x), 1e-15, f"voltage_at({x})")


@pytest.mark.parametrize("p", FINITE_PIECES)
def test_pieces_hold_zero_current_inside_band(p):
    """Inside [v_rev, v_fwd], ends included, no current flows (derived: definition of the band)."""
    v = np.linspace(p.v_rev, p.v_fwd, 11)
    assert np.all(p.current(v) == 0.0), f"current inside the band: {p.current(v)}"
    assert all(p.current_at(float(x)) == 0.0 for x in v), "scalar current inside the band"
    assert all(p.slope_at(float(x)) == 0.0 for x in v[1:-1]), "conductance inside the band"


@pytest.mark.parametrize("p", FINITE_PIECES)
def test_pieces_linear_outside_band(p):
    """Beyond the band: i = (v − v_on)/r, slope 1/r (derived)."""
    dv = 2.5
    _close(p.current(p.v_fwd + dv), dv / p.r_fwd, 1e-14, "forward current")
    _close(p.current(p.v_rev - dv), -dv / p.r_rev, 1e-14, "reverse current")
    _close(p.slope_at(p.v_fwd + dv), 1 / p.r_fwd, 1e-14, "forward slope")
    _close(p.slope_at(p.v_rev - dv), 1 / p.r_rev, 1e-14, "reverse slope")


@pytest.mark.parametrize("p", FINITE_PIECES + [
    pytest.param(LinearPieces(24.0, 0.0, -0.7, 0.0), id="ideal-zener"),
    pytest.param(LinearPieces(0.7, 0.05, -math.inf, 0.0), id="blocking-diode"),
])
def test_pieces_current_at_agrees_with_current(p):
    """Scalar current_at equals the array current on a grid across both thresholds (same law)."""
    grid = np.linspace(-40.0, 40.0, 161)
    want = p.current(grid)
    got = np.array([p.current_at(float(v)) for v in grid])
    np.testing.assert_array_equal(got, want, err_msg="current_at vs current")


def test_vertical_pieces_give_infinite_current():
    """Zero resistance: any voltage beyond the onset drives ±inf (derived: vertical segment)."""
    p = LinearPieces(24.0, 0.0, -0.7, 0.0)
    assert float(p.current(24.001)) == math.inf, "array current above a vertical forward piece"
    assert float(p.current(-0.701)) == -math.inf, "array current below a vertical reverse piece"
    assert p.current_at(24.001) == math.inf, "scalar current above a vertical forward piece"
    assert p.current_at(-0.701) == -math.inf, "scalar current below a vertical reverse piece"
    assert p.slope_at(25.0) == math.inf and p.slope_at(-1.0) == math.inf, "conductance of a vertical piece"
    assert float(p.current(24.0)) == 0.0 and float(p.current(-0.7)) == 0.0, "at the onset itself: no current"


def test_pieces_regularised_by_r_min():
    """current(v, r_min) replaces a zero resistance by r_min: i = (v − v_on)/r_min (derived)."""
    p = LinearPieces(24.0, 0.0, -0.7, 0.0)
    _close(p.current(25.0, r_min=0.5), 2.0, 1e-14, "forward, r_min 0.5 Ω")
    _close(p.current(-1.7, r_min=0.5), -2.0, 1e-14, "reverse, r_min 0.5 Ω")
    q = LinearPieces(24.0, 2.0, -0.7, 2.0)
    _close(q.current(25.0, r_min=0.5), 0.5, 1e-14, "a resistance above r_min is kept")


def test_blocking_pieces_never_conduct_backwards():
    """v_rev = −inf: no reverse current at any voltage; the voltage at a negative current is −inf."""
    p = LinearPieces(0.7, 0.05, -math.inf, 0.0)
    assert np.all(p.current(np.array([-1e6, -5.0, 0.0, 0.7])) == 0.0), "a blocking element carries no reverse current"
    assert float(p.voltage(-1.0)) == -math.inf, "no finite voltage drives a reverse current"


@pytest.mark.parametrize(("p", "want"), [
    pytest.param(LinearPieces(24.0, 1.5, -0.7, 1.5), 0.0, id="band-contains-0"),
    pytest.param(LinearPieces(5.0, 1.0, 2.0, 1.0), 2.0, id="band-above-0"),
    pytest.param(LinearPieces(-1.0, 1.0, -2.0, 1.0), -1.0, id="band-below-0"),
])
def test_pieces_voltage_at_zero_current(p, want):
    """At zero current the voltage is 0 clipped into the band (the point of the band nearest 0)."""
    _close(p.voltage(0.0), want, 0.0, "voltage at zero current")
    _close(p.voltage_at(0.0), want, 0.0, "scalar voltage at zero current")


def test_pieces_sum_is_series_connection():
    """a + b carries the same current with the voltages added (Kirchhoff's voltage law, derived)."""
    a = LinearPieces(0.7, 0.1, -math.inf, 0.0)
    b = LinearPieces(24.0, 1.5, -0.7, 1.5)
    s = a + b
    assert s == LinearPieces(24.7, 1.6, -math.inf, 1.5), f"field-wise sum, got {s}"
    i = np.array([1e-3, 0.5, 3.0])
    np.testing.assert_allclose(s.voltage(i), a.voltage(i) + b.voltage(i), rtol=1e-15,
                               err_msg="series voltage = sum of the element voltages")
    _close(s.current(30.0), (30.0 - 24.7) / 1.6, 1e-14, "series chain current")


# ============================================================================ Zener / TVS / varistor
@pytest.mark.parametrize(("kind", "bidirectional", "vf", "rev_onset"), [
    pytest.param("Zener", False, None, -0.7, id="zener-default-0.7V-forward"),
    pytest.param("TVS", False, 1.1, -1.1, id="tvs-unidirectional-1.1V-forward"),
    pytest.param("TVS", True, None, -33.0, id="tvs-bidirectional"),
])
def test_breakdown_element_orientation(kind, bidirectional, vf, rev_onset):
    """Breakdown at +V_Z; unidirectional forward conduction at −V_f (0.7 V default: common practice,
    no source), bidirectional at −V_Z; dynamic resistance on both sides (derived: v = V + r·i)."""
    vz, rd = 33.0, 2.0
    law = breakdown_element(vz, rd, bidirectional=bidirectional, forward_voltage=vf, kind=kind)
    assert law.band == (rev_onset, vz), f"zero-current band, got {law.band}"
    _close(law.current(vz + 3.0), 3.0 / rd, 1e-14, "breakdown current")
    _close(law.current(rev_onset - 3.0), -3.0 / rd, 1e-14, "reverse-side current")
    assert float(law.current(0.5 * (rev_onset + vz))) == 0.0, "no current inside the band"
    assert float(law.current(rev_onset + 1e-3)) == 0.0, "no current just inside the reverse onset"
    assert kind in law.description, f"description names the kind: {law.description!r}"


@pytest.mark.parametrize(("etype", "bidirectional", "rev_onset"), [
    pytest.param("zener", True, -0.7, id="zener-ignores-bidirectional"),
    pytest.param("tvs", True, -15.0, id="tvs-bidirectional"),
    pytest.param("tvs", False, -0.7, id="tvs-unidirectional"),
])
def test_factory_breakdown_orientation(etype, bidirectional, rev_onset):
    """A Zener is unidirectional (DESIGN §3: only a bidirectional TVS conducts either way at ±V)."""
    law = element_law(Element(etype, voltage=15.0, dynamic_resistance=1.0, bidirectional=bidirectional))
    assert law.band == (rev_onset, 15.0), f"band of a {etype}, got {law.band}"


VARISTORS = [
    pytest.param(39.0, 30.0, 1e-3, id="39V-at-1mA-alpha30"),
    pytest.param(430.0, 25.0, 1e-3, id="430V-at-1mA-alpha25"),
    pytest.param(18.0, 12.0, 1e-2, id="18V-at-10mA-alpha12"),
]


@pytest.mark.parametrize(("v1", "alpha", "i1"), VARISTORS)
def test_varistor_power_law(v1, alpha, i1):
    """i = I1·sign(v)·|v/V1|^α through (V1, I1) (Levinson & Philipp 1986)."""
    law = Varistor(v1, alpha, i1)
    _close(law.current(v1), i1, 1e-14, "current at V1")
    _close(law.current(1.1 * v1), i1 * 1.1**alpha, 1e-12, "current at 1.1·V1")
    _close(law.current(0.5 * v1), i1 * 0.5**alpha, 1e-12, "current at V1/2")
    _close(law.voltage(i1), v1, 1e-14, "voltage at I1")
    assert float(law.current(0.0)) == 0.0 and float(law.voltage(0.0)) == 0.0, "origin"


@pytest.mark.parametrize(("v1", "alpha", "i1"), VARISTORS)
def test_varistor_odd_symmetry_and_inverse(v1, alpha, i1):
    """i(−v) = −i(v) and voltage/current are inverse (derived from the odd power law)."""
    law = Varistor(v1, alpha, i1)
    v = np.linspace(0.2, 1.3, 12) * v1
    np.testing.assert_array_equal(law.current(-v), -law.current(v), err_msg="odd symmetry of the current")
    i = np.array([-50.0, -1.0, -1e-6, 1e-9, 1e-3, 2.0, 100.0])
    np.testing.assert_allclose(law.current(law.voltage(i)), i, rtol=1e-11, err_msg="current(voltage(i))")
    np.testing.assert_allclose(law.voltage(law.current(v)), v, rtol=1e-13, err_msg="voltage(current(v))")


def test_factory_varistor_defaults_to_1ma():
    """The varistor `voltage` key is the voltage at 1 mA (DESIGN §5)."""
    law = element_law(Element("varistor", voltage=56.0, exponent=28.0))
    _close(law.current(56.0), 1e-3, 1e-14, "current at the rated voltage")


def test_factory_passive_and_constant_drop():
    """Resistor v = R·i; constant-drop diode v = V_f + R_s·i above V_f, blocks below (derived)."""
    r = element_law(Element("resistor", resistance=47.0))
    assert isinstance(r, Resistor)
    _close(r.current(9.4), 0.2, 1e-14, "resistor current")
    _close(r.current(-9.4), -0.2, 1e-14, "resistor reverse current")
    d = element_law(Element("diode", model="constant-drop", forward_voltage=0.9, series_resistance=0.1))
    assert isinstance(d, ConstantDropDiode)
    _close(d.current(1.4), 5.0, 1e-13, "constant-drop diode current")
    assert float(d.current(-300.0)) == 0.0 and d.i_floor == 0.0, "a diode blocks reverse voltage"
    assert element_law(Element("capacitor", capacitance=1e-6)) is None, "a capacitor is a state, not a law"


def test_factory_shockley_from_terminal_point():
    """A Shockley diode element passes through its terminal point (DESIGN §5; Sedra & Smith ch. 4)."""
    d = element_law(Element("diode", forward_voltage=0.85, at_current=1.0, ideality=1.9, series_resistance=0.05))
    _close(d.voltage_at(1.0), 0.85, 1e-13, "terminal voltage")


def test_factory_shockley_temperature():
    """A given junction temperature sets V_T = kT/q (BIPM SI brochure)."""
    d = element_law(Element("diode", ideality=1.5, saturation_current=1e-9, temperature=348.15))
    _close(d.a, 1.5 * K_BOLTZMANN * 348.15 / Q_ELEMENTARY, 1e-14, "n·V_T at 75 °C")


# ============================================================================ switch
def test_current_limit_falls_linearly():
    """I_lim(t) = I_on·max(0, 1 − t/t_f) (Mohan, Undeland & Robbins ch. 2, linearised switching)."""
    sw = switch_law("mosfet", on_resistance=0.05, fall_time=200e-9)
    t = np.array([0.0, 50e-9, 100e-9, 150e-9, 200e-9, 400e-9])
    np.testing.assert_allclose(sw.current_limit(t, 0.8), [0.8, 0.6, 0.4, 0.2, 0.0, 0.0], rtol=1e-14, atol=1e-16,
                               err_msg="linear fall of the channel current")
    _close(sw.current_limit(100e-9, 0.8), 0.4, 1e-14, "scalar time")


@pytest.mark.parametrize("kind", ["ideal", "bjt", "mosfet"])
def test_instant_switch_has_no_channel_current(kind):
    """fall_time = 0: the channel current is zero from t = 0 on (DESIGN §3, instant switch)."""
    sw = switch_law(kind, on_resistance=0.05, saturation_voltage=0.2)
    assert np.all(sw.current_limit(np.array([0.0, 1e-9, 1.0]), 1.0) == 0.0), "instant turn-off"
    assert "instant" in sw.description, sw.description


def test_channel_current_is_min_of_on_law_and_limit():
    """Channel current = min(v/R_on, I_lim(t)) for a MOSFET (Mohan et al. ch. 2; derived)."""
    sw = switch_law("mosfet", on_resistance=0.05, fall_time=200e-9)
    # at 100 ns the limit is 0.4 A; 10 mV drives 0.2 A, 1 V would drive 20 A
    _close(sw.channel_current(0.01, 100e-9, 0.8), 0.2, 1e-13, "on-state law below the limit")
    _close(sw.channel_current(1.0, 100e-9, 0.8), 0.4, 1e-13, "limit below the on-state law")
    got = sw.channel_current(np.array([0.005, 0.5, 30.0]), np.array([0.0, 150e-9, 250e-9]), 0.8)
    np.testing.assert_allclose(got, [0.1, 0.2, 0.0], rtol=1e-13, atol=1e-16, err_msg="array version")


def test_channel_is_off_after_the_fall_even_below_ground():
    """Once the fall has ended the gate is off: no channel current at any node voltage, a
    negative one included (the body diode, a separate law, takes that; Mohan et al. ch. 2 —
    the linearised turn-off ends with the channel open). It had followed v/R_on below 0 V."""
    sw = switch_law("mosfet", on_resistance=0.05, fall_time=200e-9)
    got = sw.channel_current(np.array([-0.7, -0.01, 5.0]), np.array([200e-9, 1e-3, 1.0]), 0.8)
    assert np.all(got == 0.0), f"channel after the fall: {got}"
    _close(sw.channel_current(-0.01, 100e-9, 0.8), -0.2, 1e-13, "during the fall the channel still conducts")


def test_bjt_channel_current_limited_after_saturation():
    """BJT: vertical at V_CE(sat) (any current above it), the fall limits it (derived)."""
    sw = switch_law("bjt", saturation_voltage=0.2, fall_time=100e-9)
    _close(sw.channel_current(5.0, 25e-9, 2.0), 1.5, 1e-13, "limit above V_sat")
    assert float(sw.channel_current(0.1, 25e-9, 2.0)) == 0.0, "below V_sat the BJT carries nothing"


@pytest.mark.parametrize(("kind", "v", "want"), [
    pytest.param("mosfet", 62.0, (62.0 - 60.0) / 0.4, id="mosfet-avalanche"),
    pytest.param("mosfet", 59.9, 0.0, id="mosfet-below-breakdown"),
    pytest.param("mosfet", -0.5, 0.0, id="mosfet-above-body-diode"),
    pytest.param("mosfet", -1.2, (-1.2 + 0.7) / 0.05, id="mosfet-body-diode-default-0.7V"),
    pytest.param("bjt", 62.0, (62.0 - 60.0) / 0.4, id="bjt-avalanche"),
    pytest.param("bjt", -5.0, 0.0, id="bjt-no-reverse-path"),
    pytest.param("ideal", -5.0, 0.0, id="ideal-no-reverse-path"),
])
def test_off_state_avalanche_and_body_diode(kind, v, want):
    """Off state: V_BR + r_av·i above breakdown (DESIGN §3); a MOSFET body diode below −V_bd with
    R_on (0.7 V default: common practice, no source)."""
    sw = switch_law(kind, on_resistance=0.05, breakdown_voltage=60.0, avalanche_resistance=0.4)
    _close(sw.off_state.current(v), want, 1e-13, f"{kind} off-state current at {v} V", atol=1e-15)
    _close(sw.off_state.current_at(v), want, 1e-13, f"{kind} scalar off-state current at {v} V", atol=1e-15)


def test_body_diode_voltage_given():
    """A given body-diode drop replaces the default (DESIGN §3)."""
    sw = switch_law("mosfet", on_resistance=0.1, body_diode_voltage=0.9)
    _close(sw.off_state.current(-1.1), -2.0, 1e-13, "body diode at −1.1 V with 0.9 V drop and 0.1 Ω")


def test_switch_without_breakdown_never_avalanches():
    """No breakdown voltage: no off-state current at any positive voltage (DESIGN §5)."""
    sw = switch_law("mosfet", on_resistance=0.05)
    assert float(sw.off_state.current(1e6)) == 0.0, "no avalanche without a breakdown voltage"


def test_ideal_avalanche_is_vertical():
    """Zero avalanche resistance: the node is held at V_BR (exact ideal limit, DESIGN §3)."""
    sw = switch_law("ideal", breakdown_voltage=60.0)
    assert sw.off_state.current_at(60.0 + 1e-9) == math.inf, "vertical avalanche"


def test_unknown_switch_kind():
    """Only ideal | bjt | mosfet exist (DESIGN §5)."""
    with pytest.raises(ValueError, match="igbt"):
        switch_law("igbt")
