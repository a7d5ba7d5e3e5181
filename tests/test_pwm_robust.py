"""The periodic steady state on cases that stalled or failed it (issue 14: [drive] cases drawn over
the ranges engineers use): a node time constant of 1e-17 s beside a millisecond on-phase, a
stiff breakdown knee met at the turn-off instant t = D·T, discontinuous conduction with an LC
ring left at turn-on. Every expected value comes from the exact exponential solution of the
piecewise-linear coil equation written here (the fixed point i* = B/(1 − A) of the one-cycle
affine map), not from kickback.

Source of the exponential segments: the first-order RL step response, i(t) = I∞ + (i0 − I∞)·e^(−t/τ)
(any circuits text, e.g. C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits,
ch. 7); the damped LC ring of a series RLC from rest: the same text, ch. 8.
"""

from __future__ import annotations

import math

from kickback.case import Case, Clamp, Coil, Element, Supply, Switch
from kickback.circuit import Circuit
from kickback.engine.linphase import LinearSolution
from kickback.engine.periodic import STEADY_TOL, steady_state


def _closed_form(ph) -> bool:
    sol = getattr(ph.sol, "sol", ph.sol)  # an off phase is integrated in its own clock
    return isinstance(sol, LinearSolution)


def test_stiff_node_beside_long_on_phase_is_solved_in_closed_form():
    # ideal switch (its on-state regularised to ~1e-7 Ω) with 1 pF: a node mode near −1e17/s
    # beside the coil's −1e4/s; LAPACK gives the slow eigenvalue only to ~eps·‖A‖ (5e-5 relative
    # met), so the closed-form on-phase was refused and Radau stepped through it (3.6 s)
    L, R, RP, VS = 1e-3, 10.0, 20.0, 24.0
    f, d = 5e3, 0.6
    case = Case("stiff node (demo data)", Supply(VS), Coil(L, R), Switch("ideal", capacitance=1e-12),
                (Clamp("R", "coil", (Element("resistor", resistance=RP),)),))
    ss = steady_state(Circuit(case), d, f)
    t_on, t_off = d / f, (1 - d) / f
    # on: L·i' = Vs − R·i (node at 0); off: the resistor across the coil takes the coil current,
    # L·i' = −(R + Rp)·i. Fixed point of i* → i_p = Vs/R + (i* − Vs/R)·a_on → i*' = i_p·a_off
    a_on, a_off = math.exp(-R * t_on / L), math.exp(-(R + RP) * t_off / L)
    i_star = VS / R * (1 - a_on) * a_off / (1 - a_on * a_off)
    i_peak = VS / R + (i_star - VS / R) * a_on
    # the 1 pF node and the regularisation move these by ~C·Rp·(R+Rp)/L ≈ 6e-7 relative
    assert abs(ss.x[0] - i_star) <= 2e-6 * i_peak
    assert abs(ss.x_turnoff[0] - i_peak) <= 2e-6 * i_peak
    assert ss.residual <= STEADY_TOL
    on = [p for p in ss.waveforms.phases if p.name == "on"]
    off = [p for p in ss.waveforms.phases if p.name == "off"]
    assert on and all(_closed_form(p) for p in on), "the stiff on-phase is solved in closed form"
    assert off and _closed_form(off[-1]), "the off phase (a linear decay) is solved in closed form"


def test_breakdown_knee_at_the_turn_off_instant():
    # a MOSFET without a fall time whose 1.5 pF node is pinned at its breakdown with no slope
    # (regularised to ~1e-7 Ω): integrated in the cycle's clock, the knee was met at
    # t = D·T ≈ 1.4e-4 s, where steps below 3e-19 s are not representable ("required step size
    # is less than spacing between numbers")
    L, R, RON, VS, VBR = 6e-3, 0.15, 0.036, 80.0, 365.0
    f, d = 5.5e3, 0.79
    case = Case("breakdown pinned (demo data)", Supply(VS), Coil(L, R),
                Switch("mosfet", on_resistance=RON, capacitance=1.5e-12, breakdown_voltage=VBR))
    ss = steady_state(Circuit(case), d, f)
    t_on, t_off = d / f, (1 - d) / f
    # on: L·i' = Vs − (R + Ron)·i; off (node held at the breakdown): L·i' = Vs − Vbr − R·i
    i_on, k = VS / (R + RON), (VBR - VS) / R
    a_on, a_off = math.exp(-(R + RON) * t_on / L), math.exp(-R * t_off / L)
    # the node first charges from Ron·i_p to Vbr in t_c = C·(Vbr − Ron·i_p)/i_p (28 ps) with the
    # coil current nearly constant: against a node at Vbr at once, the coil keeps
    # Δ = ∫(v − Vbr)/L dt = C·(Vbr − Ron·i_p)²/(2·L·i_p) more current (the ½·C·V² the node
    # takes, charge conservation at constant current). 1/(1 − A) ≈ 185 amplifies it to 9e-6.
    C = 1.5e-12
    i_peak = i_on
    for _ in range(3):
        delta = C * (VBR - RON * i_peak) ** 2 / (2 * L * i_peak)
        # i* = −k + (i_on·(1 − a_on) + i*·a_on + Δ + k)·a_off  →  B/(1 − A) with A = a_on·a_off
        i_star = (-k + (i_on * (1 - a_on) + delta + k) * a_off) / (1 - a_on * a_off)
        i_peak = i_on + (i_star - i_on) * a_on
    assert i_star > 0  # the current flows all cycle: the node is at the breakdown all the off time
    assert abs(ss.x[0] - i_star) <= 1e-6 * i_peak
    assert abs(ss.x_turnoff[0] - i_peak) <= 1e-6 * i_peak
    assert ss.residual <= STEADY_TOL


def test_discontinuous_conduction_with_a_ring_left_at_turn_on():
    # the coil current reaches zero every cycle through a diode + TVS across the coil, and the
    # 1 pF node rings with the coil until turn-on: the cycle map oscillates in the start
    # current (slope ~0.9 in places). Newton's method from the averaged model (which has no
    # solution here) jumped between the ring's swings and gave up after 25 steps.
    L, R, RON, VS, VD, RS, VZ = 0.027, 41.0, 0.09, 4.76, 0.95, 0.003, 3.56
    C = 1e-12
    f, d = 34e3, 0.44
    diode = Element("diode", model="constant-drop", forward_voltage=VD, series_resistance=RS)
    case = Case("discontinuous (demo data)", Supply(VS), Coil(L, R),
                Switch("mosfet", on_resistance=RON, capacitance=C),
                (Clamp("D", "coil", (diode, Element("tvs", voltage=VZ))),))
    ss = steady_state(Circuit(case), d, f)
    t_on, t_off = d / f, (1 - d) / f
    assert ss.residual <= STEADY_TOL
    i_on = VS / (R + RON)
    a_on = math.exp(-(R + RON) * t_on / L)
    i0 = float(ss.x[0])
    # on-phase from the computed start: the exact exponential (the node discharge at turn-on
    # moves the coil current by C·v/… ≈ 1e-12 A)
    i_peak = i_on + (i0 - i_on) * a_on
    assert abs(ss.x_turnoff[0] - i_peak) <= 1e-6 * i_peak
    # off: L·i' = −(Vd + Vz) − (R + Rs)·i reaches zero at t_z, well inside the off time
    vc, rr = VD + VZ, R + RS
    t_z = L / rr * math.log((i_peak + vc / rr) / (vc / rr))
    assert t_z < 0.9 * t_off
    # from rest at the clamp level, the series R-L-C ring's current never exceeds
    # Vc/(L·ω_d) (ω_d² = 1/(L·C) − (R/2L)²): the start current is within it
    w_d = math.sqrt(1.0 / (L * C) - (R / (2 * L)) ** 2)
    assert abs(i0) <= vc / (L * w_d)
    assert i_peak > 50 * vc / (L * w_d)  # so the check on i_peak is not a trivial one
