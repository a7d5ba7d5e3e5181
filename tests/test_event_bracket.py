"""A [drive] on phase with a varistor across the coil: scipy's event bracket had no sign change
(wide-range cases 3977 and 8129 of the 10⁴-case reliability run failed with "f(a) and f(b) must
have different signs"). The affine model's defect, which ends the stepped stretch of a phase,
moved by a few % with one ulp of the node voltage; scipy detected its sign change at a step's end
state and bracketed it on the dense output, one ulp away (kickback/engine/step_events.py).

Checks: the mechanism on a plain scipy solve, and both cases against references written here."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from kickback.caseio import load_case
from kickback.engine.step_events import BracketedEvent
from kickback.simulation import simulate

CASE_8129 = """
title = "wide-range case 8129: BJT with avalanche, varistor across the coil, PWM (demo data)"
[supply]
voltage = "8.438134825005333 V"
[coil]
inductance = "0.0010070947335776104 H"
resistance = "254.73231882587592 Ω"
[switch]
type = "bjt"
saturation_voltage = "0.44978044042442594 V"
capacitance = "1.0389399873953688e-09 F"
breakdown_voltage = "18.2029292570353 V"
rated_voltage = "18.088531029117448 V"
rated_avalanche_energy = "4.756017372141058e-07 J"
[[clamp]]
name = "C0"
across = "coil"
[[clamp.element]]
name = "C0E0"
type = "varistor"
voltage = "12.876219918956675 V"
exponent = 28.007028601597735
rated_energy = "4.126084306878404e-07 J"
[drive]
frequency = "155.10814633747086 Hz"
duty = 0.6669652881792406
"""

CASE_3977 = """
title = "wide-range case 3977: ideal switch, 9 nF, varistor across the coil, PWM (demo data)"
[supply]
voltage = "6.439051500887132 V"
[coil]
inductance = "0.006128649554934844 H"
resistance = "1904.251073062274 Ω"
[switch]
type = "ideal"
capacitance = "8.986292411139583e-09 F"
breakdown_voltage = "16.88254517858573 V"
avalanche_resistance = "3.6596959310796278 Ω"
rated_voltage = "11.910932867565974 V"
[[clamp]]
name = "C0"
across = "coil"
[[clamp.element]]
name = "C0E0"
type = "varistor"
voltage = "11.963659644601798 V"
exponent = 26.463511583661298
rated_energy = "3.428611109326824e-08 J"
[drive]
frequency = "21331.979876265712 Hz"
duty = 0.706873136861485
"""


def _varistor(v, v1, alpha, i1=1e-3):
    """Power law i = I₁·sign(v)·|v/V₁|^α (Levinson & Philipp, Am. Ceram. Soc. Bull. 65(4), 1986)."""
    return math.copysign(i1 * abs(v / v1) ** alpha, v)


def test_bracket_ends_carry_the_values_the_sign_change_was_seen_in():
    calls = []

    def g(t, y):
        calls.append(t)
        return float(y[0]) - 0.5

    g.terminal, g.direction = True, -1
    ev = BracketedEvent(g)
    assert ev.terminal is True and ev.direction == -1
    # a repeated time answers what it answered first, whatever state comes with it (scipy's
    # step-end state, then the dense output one ulp away)
    first = ev(0.25, np.array([0.7]))
    assert ev(0.25, np.array([np.nextafter(0.7, 1.0)])) == first
    assert calls == [0.25]
    # the oldest times are forgotten: a later call there is evaluated afresh
    for k in range(4):
        ev(1.0 + k, np.array([0.0]))
    assert ev(0.25, np.array([0.9])) == pytest.approx(0.4)
    # a smooth event is located as before: y' = −y from 1 reaches 1/2 at ln 2 (closed form)
    sol = solve_ivp(lambda t, y: -y, (0, 3), [1.0], method="Radau", rtol=1e-10, atol=1e-14,
                    events=BracketedEvent(g))
    assert sol.status == 1
    assert sol.t_events[0][0] == pytest.approx(math.log(2.0), rel=1e-8)


def test_case_8129_against_the_node_equations():
    # the on-time (4.3 ms) is ~1000 L/R: the periodic state at turn-off is the DC on-state
    # i0 = (Vs − V_sat)/R; the turn-off is instant (no fall time): the node charges its 1.04 nF
    # from V_sat with the coil current and the varistor's, up to the BJT's avalanche at V_BR
    # (0 Ω: the node is held there, Ohm's law and Kirchhoff's current law), then the coil current
    # decays in closed form, L di/dt = Vs − V_BR − R·i, until the avalanche current
    # i + i_var(Vs − V_BR) is zero. Avalanche energy: V_BR·∫(i + i_var) dt over the hold.
    vs, L, R, vsat = 8.438134825005333, 0.0010070947335776104, 254.73231882587592, 0.44978044042442594
    c, vbr, v1, alpha = 1.0389399873953688e-09, 18.2029292570353, 12.876219918956675, 28.007028601597735
    i0 = (vs - vsat) / R

    def rhs(t, y):
        i, v = y
        return [(vs - v - R * i) / L, (i + _varistor(vs - v, v1, alpha)) / c]

    def at_breakdown(t, y):
        return y[1] - vbr

    at_breakdown.terminal, at_breakdown.direction = True, 1
    sol = solve_ivp(rhs, (0, 1e-3), [i0, vsat], method="Radau", rtol=1e-11, atol=[1e-18, 1e-15],
                    events=at_breakdown)
    t1, i1 = float(sol.t_events[0][0]), float(sol.y_events[0][0][0])
    tau, i_inf, i_rel = L / R, (vbr - vs) / R, -_varistor(vs - vbr, v1, alpha)
    t_hold = tau * math.log((i1 + i_inf) / (i_rel + i_inf))
    e_av = vbr * (-i_inf * t_hold + (i1 + i_inf) * tau * (1 - math.exp(-t_hold / tau)) - i_rel * t_hold)

    res = simulate(load_case(CASE_8129, source="case 8129"))
    f = res.figures
    assert f.initial_current_A == pytest.approx(i0, rel=1e-6)
    assert f.peak_voltage_V == pytest.approx(vbr, rel=1e-9)
    assert f.avalanche_energy_J == pytest.approx(e_av, rel=1e-4)
    # the coil current is zero where the hold ends (within the node's swing of ~1e-9 A after it)
    assert f.to_zero_s == pytest.approx(t1 + t_hold, rel=1e-4)
    assert abs(f.energy_balance_error) < 1e-5


def test_case_3977_against_the_node_equations():
    # ideal switch: while on, the node is at 0 V and i rises to Vs/R in closed form; off, the node
    # (8.99 nF) charges with the coil current and the varistor's, the avalanche (16.9 V + 3.66 Ω·i)
    # never reached; the periodic state by plain repetition of the cycle (the off-phase ends well
    # within the coil's decay: the map contracts by ~e^{-4} a cycle) to 1e-16 A
    vs, L, R, c = 6.439051500887132, 0.006128649554934844, 1904.251073062274, 8.986292411139583e-09
    v1, alpha, vbr, rav = 11.963659644601798, 26.463511583661298, 16.88254517858573, 3.6596959310796278
    period = 1 / 21331.979876265712
    t_on = 0.706873136861485 * period
    tau = L / R

    def rhs(t, y):
        i, v = y
        i_av = (v - vbr) / rav if v > vbr else 0.0
        return [(vs - v - R * i) / L, (i + _varistor(vs - v, v1, alpha) - i_av) / c]

    tight = dict(method="Radau", rtol=1e-11, atol=[1e-18, 1e-14])
    i_on = 0.0
    for _ in range(30):
        i_off = vs / R + (i_on - vs / R) * math.exp(-t_on / tau)
        nxt = float(solve_ivp(rhs, (0, period - t_on), [i_off, 0.0], **tight).y[0, -1])
        if abs(nxt - i_on) < 1e-16:
            break
        i_on = nxt

    def tenth(t, y):
        return y[0] - 0.1 * i_off

    tenth.terminal = True
    t10 = float(solve_ivp(rhs, (0, 1e-3), [i_off, 0.0], events=tenth, **tight).t_events[0][0])

    f = simulate(load_case(CASE_3977, source="case 3977")).figures
    assert f.initial_current_A == pytest.approx(i_off, rel=1e-6)
    assert f.to_10_percent_s == pytest.approx(t10, rel=1e-5)
    assert f.peak_voltage_V <= vs * (1 + 1e-6)  # overdamped (R > 2·√(L/C)): the node never passes Vs
