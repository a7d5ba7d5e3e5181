"""Detailed engine (issue 14): after the ring's energy has fallen below its level, the search
for the coil current's last zero runs in closed form where the ring is affine.

The turn-off run ends on a zero of the coil current once the oscillating energy is below its
rest level. That last stretch was always stepped by Radau; where a snubber capacitor drains
through the coil (a leaky diode's I_s) while the node still rings, that was 19 000 steps
(wide-range case 5834: 6.2 -> 4.2 s CPU). It now first tries the closed-form ring
(:mod:`kickback.engine.linring`), which looks for the zero alone, and steps where that is
refused (in strides, as the ring before it).

Reference, written here: the node equations of the invented demo circuit below (coil L, R from
the supply to the switch node; switch capacitance C_sw, ideal switch off at t = 0; across the
coil a Shockley diode with a resistor R_s and a capacitor C_s in series), Kirchhoff's laws
(C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 6–8):

    L·di/dt = V_s − v − R·i,   C_sw·dv/dt = i − i_c,   C_s·dv_c/dt = i_c,

with the chain current at u = v − V_s − v_c in closed form, i_c = (n·V_T/R_s)·ω(ln(I_s·R_s/(n·V_T))
+ (u + I_s·R_s)/(n·V_T)) − I_s (ω the Wright omega function, ω(z) = W(e^z): the Shockley law
n·V_T·ln(1 + i/I_s) + R_s·i = u solved for i; A. S. Sedra and K. C. Smith, Microelectronic
Circuits, ch. 4; R. M. Corless and D. J. Jeffrey, "The Wright ω function", 2002), I_s from V_f at
I_f, V_T = kT/q at 298.15 K (SI brochure 2019); from the on-state (v = 0, i = V_s/R, no chain
current: v_c = −V_s), solved with scipy.integrate.solve_ivp (Radau, rtol 1e-11).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, special

from kickback import load_case, simulate

VS, L, R, CSW, VF, IF, N, RS, CS = 39.67, 5.18e-5, 3.1, 1.06e-10, 0.705, 9.0, 1.16, 1.85, 1.38e-7
CASE = f"""
title = "demo: snubber ring ending on a zero of the coil current (demo data)"
[supply]
voltage = "{VS!r} V"
[coil]
inductance = "{L!r} H"
resistance = "{R!r} Ω"
[switch]
type = "ideal"
capacitance = "{CSW!r} F"
[[clamp]]
name = "S"
across = "coil"
[[clamp.element]]
type = "diode"
model = "shockley"
forward_voltage = "{VF!r} V"
at_current = "{IF!r} A"
ideality = {N!r}
[[clamp.element]]
type = "resistor"
resistance = "{RS!r} Ω"
[[clamp.element]]
type = "capacitor"
capacitance = "{CS!r} F"
"""
K_B, Q_E = 1.380649e-23, 1.602176634e-19  # [J/K], [C] exact (SI 2019)
NVT = N * K_B * 298.15 / Q_E
I_S = IF / math.expm1(VF / NVT)  # the diode alone at V_f (R_s is a separate element)


def _chain(u):
    z = math.log(I_S * RS / NVT) + (u + I_S * RS) / NVT
    return NVT / RS * float(np.real(special.wrightomega(z))) - I_S


def _reference(t_end):
    def rhs(t, y):
        i, v, vc, _ = y
        ic = _chain(v - VS - vc)
        return [(VS - v - R * i) / L, (i - ic) / CSW, ic / CS, R * i * i]

    def zero(t, y):
        return y[0]

    def top(t, y):
        return rhs(t, y)[1]
    top.direction = -1
    sol = integrate.solve_ivp(rhs, (0.0, 1.5 * t_end), [VS / R, 0.0, -VS, 0.0], method="Radau", rtol=1e-11,
                              atol=[1e-13, 1e-10, 1e-10, 1e-16], events=[zero, top], dense_output=True)
    assert sol.status == 0, sol.message
    return sol


def test_last_zero_of_the_coil_current_in_closed_form():
    res = simulate(load_case(CASE))
    w, f = res.waveforms, res.figures
    sol = _reference(f.end_time_s)
    zeros = sol.t_events[0]
    assert zeros.size >= 2  # the current rings through zero more than once before the end
    # the run ends on a zero of the coil current (its closed-form root): one of the reference's
    k = int(np.argmin(np.abs(zeros - f.end_time_s)))
    assert f.end_time_s == pytest.approx(float(zeros[k]), rel=1e-6)
    assert k >= 1  # not the first zero: the search ran past the ring's end of energy
    # the figures within the engine's tolerance (rtol 1e-5)
    assert f.peak_voltage_V == pytest.approx(max(float(y[1]) for y in sol.y_events[1]), rel=1e-5)
    assert f.resistance_energy_J == pytest.approx(float(sol.sol(f.end_time_s)[3]), rel=1e-5)
    assert w.y_end[1] == pytest.approx(float(sol.sol(f.end_time_s)[1]), rel=1e-5)
    # the last stretch was solved in closed form (a phase of the ring's closed-form solution)
    from kickback.engine.linring import RingSolution
    assert isinstance(w.phases[-1].sol, RingSolution)
