"""A [drive] whose on-time never carries current at its turn-off instant: a stated reason, not a
solver failure (wide-range case 2538 of the 10⁴-case reliability run).

A 0.39 H, 1.12 kΩ coil (L/R = 348 µs) at 19.7 kHz and duty 0.126 (on 6.4 µs), a BJT with 0.35 nF
at its collector and a 382 V bidirectional TVS across the coil. Each off phase the node rings
through the coil (period 2π·√(LC) = 73 µs, longer than the PWM period of 51 µs), so the coil
current is negative at every turn-on; a BJT in saturation conducts no reverse collector current
(kickback's BJT law), and the 6.4 µs on-time adds only Vs·t_on/L = 2.8 mA. In the periodic steady
state the coil current at the turn-off instant is −0.18 mA: there is no current for the final
turn-off to interrupt, and decay times measured against it have no meaning. kickback says so
(CaseError at drive.final_turn_off, exit 2) — checked here against the periodic steady state of
the node equations solved independently.
"""

from __future__ import annotations

import math

import pytest
from scipy.integrate import solve_ivp

from kickback.caseio import load_case
from kickback.circuit import Circuit
from kickback.engine.periodic import steady_state
from kickback.errors import CaseError
from kickback.simulation import simulate

VS, L, R, VSAT = 167.94149327594766, 0.38996976267337063, 1119.6331389748757, 0.36033573899794963
C, VZ, F, DUTY = 3.5084217334433904e-10, 382.44021101434777, 19685.319805058003, 0.1256418666447491

CASE_2538 = f"""
title = "wide-range case 2538: PWM with an on-time too short to bring the coil current positive (demo data)"
[supply]
voltage = "{VS!r} V"
[coil]
inductance = "{L!r} H"
resistance = "{R!r} Ω"
[switch]
type = "bjt"
saturation_voltage = "{VSAT!r} V"
capacitance = "{C!r} F"
breakdown_voltage = "572.2570481803151 V"
rated_voltage = "417.32721555215073 V"
[[clamp]]
name = "C0"
across = "coil"
[[clamp.element]]
name = "C0E0"
type = "tvs"
voltage = "{VZ!r} V"
bidirectional = true
rated_pulse_energy = "0.012882927243229862 J"
[drive]
frequency = "{F!r} Hz"
duty = {DUTY!r}
"""


def _phase(on: bool, span: float, i: float, v: float) -> tuple[float, float]:
    """(i, v) after ``span`` seconds of one switch phase, from (i, v).

    Modes (Kirchhoff's laws, the node's capacitance C to ground): *free* — L di/dt = Vs − v − R·i,
    C dv/dt = i; *held* at a vertical law's voltage v_h — L di/dt = Vs − v_h − R·i, in closed form
    (first-order RL), until the law's current i (TVS: −i) reaches zero. The TVS (0 Ω) holds
    v = Vs ± V_Z; the saturated BJT (on phase) holds v = V_sat while i > 0 and blocks i < 0; at
    turn-on a node above V_sat is discharged to it at once. The breakdown (572 V) lies above
    Vs + V_Z = 550 V: never reached.
    """
    if on and v > VSAT:
        v = VSAT
    t = 0.0
    tau = L / R
    while t < span:
        held = None
        if on and v == VSAT and i > 0:
            held = VSAT
        elif v >= VS + VZ and i > 0:
            held = VS + VZ
        elif v <= VS - VZ and i < 0:
            held = VS - VZ
        if held is not None:
            i_inf = (VS - held) / R
            ratio = -i_inf / (i - i_inf)  # e^{−s/τ} where i(s) = 0
            s_zero = -tau * math.log(ratio) if 0 < ratio < 1 else math.inf
            s = min(s_zero, span - t)
            i = 0.0 if s == s_zero else i_inf + (i - i_inf) * math.exp(-s / tau)
            v, t = held, t + s
            continue

        def rhs(_, y):
            return [(VS - y[1] - R * y[0]) / L, y[0] / C]

        def up(_, y):
            return y[1] - (VS + VZ)

        def down(_, y):
            return y[1] - (VS - VZ)

        def sat(_, y):
            return y[1] - VSAT

        up.terminal = down.terminal = sat.terminal = True
        up.direction, down.direction, sat.direction = 1, -1, 1
        events = [up, down] + ([sat] if on else [])
        sol = solve_ivp(rhs, (t, span), [i, v], method="Radau", rtol=1e-10, atol=[1e-15, 1e-9], events=events)
        t, (i, v) = float(sol.t[-1]), sol.y[:, -1]
        if sol.status == 1:
            v = [VS + VZ, VS - VZ, VSAT][next(k for k, e in enumerate(sol.t_events) if len(e))]
    return float(i), float(v)


def _reference_turnoff_state() -> tuple[float, float]:
    """The periodic state at the turn-off instant by plain repetition of the cycle from the DC
    on-state (the ring's energy decays by R/L = 2870 s⁻¹, ~14 % a period), to 1e-12 A and 1e-6 V."""
    period = 1.0 / F
    i, v = (VS - VSAT) / R, VSAT
    for _ in range(400):
        i_next, v_next = _phase(True, DUTY * period, *_phase(False, (1 - DUTY) * period, i, v))
        if abs(i_next - i) < 1e-12 and abs(v_next - v) < 1e-6:
            return i_next, v_next
        i, v = i_next, v_next
    raise AssertionError("the reference cycle did not settle")


def test_case_2538_has_no_current_at_its_turn_off_instant():
    i_ref, v_ref = _reference_turnoff_state()
    assert i_ref < 0  # the physics: nothing to turn off (−0.18 mA)
    case = load_case(CASE_2538, source="case 2538")
    ss = steady_state(Circuit(case), DUTY, F)
    assert ss.x_turnoff[0] == pytest.approx(i_ref, abs=1e-4 * VS / R)  # scale: the DC current 0.15 A
    assert ss.x_turnoff[1] == pytest.approx(v_ref, abs=1e-4 * VS)
    with pytest.raises(CaseError) as err:
        simulate(case)
    assert err.value.key == "drive.final_turn_off"
    assert "no current for a final turn-off" in str(err.value)
