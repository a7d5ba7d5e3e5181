"""DC motor winding: back-EMF k·ω, fixed speed or mechanical model, against the DC machine equations."""

from __future__ import annotations

import numpy as np
import pytest

from kickback import load_case, simulate
from kickback.case import Case, Clamp, Coil, Element, Motor, Supply, Switch
from kickback.circuit import Circuit
from kickback.engine.periodic import steady_state
from kickback.pwmfigures import pwm_figures

D = Element("diode", model="constant-drop", forward_voltage=0.7)
K, B, TL, RW, RON, VS = 0.02, 2e-5, 0.005, 2.0, 0.05, 24.0


def _case(motor):
    sw = Switch("mosfet", on_resistance=RON, fall_time=1e-7, capacitance=5e-10)
    return Case("motor (demo data)", Supply(VS), Coil(2e-3, RW), sw, (Clamp("D", "coil", (D,)),), motor=motor)


def test_dc_on_state_solves_the_machine_equations():
    # steady DC machine: V = (R + R_on)·i + k·ω and k·i = B·ω + T_L (any electric-machines text,
    # e.g. Fitzgerald & Kingsley, Electric Machinery, ch. on DC machines)
    c = Circuit(_case(Motor(K, inertia=2e-5, viscous_friction=B, load_torque=TL)))
    i, w = np.linalg.solve([[RW + RON, K], [K, -B]], [VS, TL])
    assert c.i0 == pytest.approx(i, rel=1e-9) and c.on_speed() == pytest.approx(w, rel=1e-9)
    fixed = Circuit(_case(Motor(K, speed=800.0)))
    assert fixed.i0 == pytest.approx((VS - K * 800.0) / (RW + RON), rel=1e-9)


def test_turn_off_ledger_includes_the_back_emf():
    f = simulate(_case(Motor(K, inertia=2e-5, viscous_friction=B, load_torque=TL))).figures
    assert abs(f.energy_balance_error) < 1e-6
    assert f.motor_energy_J > 0, "the spinning rotor keeps taking energy while the current decays"
    # the back-EMF opposes the current: the decay is faster than with the clamp alone (derived)
    plain = simulate(Case("coil (demo data)", Supply(VS), Coil(2e-3, RW), _case(None).switch,
                          (Clamp("D", "coil", (D,)),))).figures
    assert f.to_zero_s < plain.to_zero_s


def test_pwm_steady_state_against_the_averaged_machine():
    # averaged DC machine under PWM (ripple small, continuous current):
    # D·Vs − (1 − D)·Vd = (R + D·R_on)·Ī + k·ω̄ and k·Ī = B·ω̄ + T_L (state-space averaging,
    # R. D. Middlebrook and S. Ćuk, IEEE PESC 1976)
    duty = 0.5
    pf = pwm_figures(steady_state(Circuit(_case(Motor(K, inertia=2e-5, viscous_friction=B, load_torque=TL))),
                                  duty, 20e3))
    i, w = np.linalg.solve([[RW + duty * RON, K], [K, -B]], [duty * VS - (1 - duty) * 0.7, TL])
    assert pf.mean_current_A == pytest.approx(i, rel=5e-3)
    assert pf.mean_speed_rad_s == pytest.approx(w, rel=5e-3)
    assert pf.mean_torque_Nm == pytest.approx(K * pf.mean_current_A, rel=1e-12)


def test_motor_section_errors(tmp_path):
    base = ('title = "m (demo data)"\n[supply]\nvoltage = "24 V"\n[coil]\ninductance = "2 mH"\n'
            'resistance = "2 Ω"\n[switch]\ntype = "ideal"\n[[clamp]]\nacross = "coil"\n[[clamp.element]]\n'
            'type = "diode"\nmodel = "constant-drop"\nforward_voltage = "0.7 V"\n[motor]\nback_emf_constant = 0.02\n')
    p = tmp_path / "m.toml"
    p.write_text(base)
    with pytest.raises(ValueError, match="fixed speed"):
        load_case(p)
    p.write_text(base + "speed = 500\nload_torque = 0.01\n")
    with pytest.raises(ValueError, match="mechanical model"):
        load_case(p)
    p.write_text(base + "speed = 500\n")
    assert load_case(p).motor.speed == 500.0
