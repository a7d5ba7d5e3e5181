"""Repetitive switching: periodic steady state by shooting against closed forms and brute force."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from kickback import load_case, simulate
from kickback.case import Case, Clamp, Coil, Element, Supply, Switch
from kickback.circuit import Circuit
from kickback.cli import main
from kickback.engine.periodic import one_cycle, steady_state
from kickback.models.thermal import foster_periodic
from kickback.pwmfigures import pwm_figures

CASES = Path(__file__).resolve().parent.parent / "cases"
L, R, VS, F = 1e-3, 10.0, 24.0, 20e3


def _case(vd=0.0, fall=0.0):
    d = Element("diode", model="constant-drop", forward_voltage=vd)
    sw = Switch("ideal", fall_time=fall)
    return Case("pwm (demo data)", Supply(VS), Coil(L, R), sw, (Clamp("D", "coil", (d,)),))


def _exact_extremes(duty, vd):
    """Steady state of the two exponential segments (derived, first-order RL):
    on: i → Vs/R with τ = L/R from i_min; off: i → −Vd/R from i_max."""
    T, tau = 1 / F, L / R
    a_on, a_off = math.exp(-duty * T / tau), math.exp(-(1 - duty) * T / tau)
    # i_max = Vs/R + (i_min − Vs/R)·a_on ; i_min = −Vd/R + (i_max + Vd/R)·a_off
    i_max = (VS / R * (1 - a_on) + a_on * (-vd / R * (1 - a_off))) / (1 - a_on * a_off)
    i_min = -vd / R + (i_max + vd / R) * a_off
    return i_min, i_max


@pytest.mark.parametrize("duty, vd", [(0.5, 0.0), (0.25, 0.7), (0.8, 0.7)], ids=["D0.5", "D0.25-diode", "D0.8-diode"])
def test_ripple_against_exponential_segments(duty, vd):
    pf = pwm_figures(steady_state(Circuit(_case(vd)), duty, F))
    i_min, i_max = _exact_extremes(duty, vd)
    assert pf.min_current_A == pytest.approx(i_min, rel=1e-7)
    assert pf.max_current_A == pytest.approx(i_max, rel=1e-7)
    assert pf.ripple_A == pytest.approx(i_max - i_min, rel=1e-5)
    assert pf.residual <= 1e-9


def _exact_phase_integrals(duty, vd):
    """∫ i dt and ∫ i² dt of each phase of the exact exponential PWM waveform (first-order RL, ideal
    switch, constant-drop freewheel diode; derived): on i = Vs/R + (i_min − Vs/R)·e^(−t/τ),
    off i = −Vd/R + (i_max + Vd/R)·e^(−t/τ); ∫(a + b·e^(−t/τ)) = a·t + b·τ·(1 − e^(−t/τ)) and
    ∫(a + b·e^(−t/τ))² = a²t + 2abτ(1 − e^(−t/τ)) + b²τ/2·(1 − e^(−2t/τ))."""
    T, tau = 1 / F, L / R
    i_min, i_max = _exact_extremes(duty, vd)

    def ints(a, b, t):
        e1, e2 = -math.expm1(-t / tau), -math.expm1(-2 * t / tau)
        return a * t + b * tau * e1, a * a * t + 2 * a * b * tau * e1 + b * b * tau / 2 * e2

    return ints(VS / R, i_min - VS / R, duty * T), ints(-vd / R, i_max + vd / R, (1 - duty) * T)


@pytest.mark.parametrize("duty, vd", [(0.5, 0.0), (0.25, 0.7), (0.8, 0.7)], ids=["D0.5", "D0.25-diode", "D0.8-diode"])
def test_switch_and_freewheel_averages_with_an_instant_switch(duty, vd):
    # the switch carries the on phase, the diode the off phase; the sample at the switching instant
    # used to hand half a step of switch current to the diode (0.1–0.9 % off)
    (m_on, s_on), (m_off, s_off) = _exact_phase_integrals(duty, vd)
    T = 1 / F
    pf = pwm_figures(steady_state(Circuit(_case(vd)), duty, F))
    el = pf.elements[0]
    assert pf.switch_mean_A == pytest.approx(m_on / T, rel=3e-8), "switch mean"
    assert pf.switch_rms_A == pytest.approx(math.sqrt(s_on / T), rel=3e-8), "switch RMS"
    assert el["mean_A"] == pytest.approx(m_off / T, rel=3e-8), "freewheel mean"
    assert el["rms_A"] == pytest.approx(math.sqrt(s_off / T), rel=3e-8), "freewheel RMS"
    assert pf.mean_current_A == pytest.approx((m_on + m_off) / T, rel=3e-8), "coil mean"
    assert pf.rms_current_A == pytest.approx(math.sqrt((s_on + s_off) / T), rel=3e-8), "coil RMS"
    # the same integrals by scipy quad on the closed form (a second route to the reference)
    from scipy.integrate import quad

    i_min, _ = _exact_extremes(duty, vd)
    tau = L / R
    q = quad(lambda t: VS / R + (i_min - VS / R) * math.exp(-t / tau), 0, duty * T, epsabs=0, epsrel=1e-13)[0]
    assert q == pytest.approx(m_on, rel=1e-11)


def test_ripple_long_time_constant_limit():
    # τ ≫ T: ΔI → V·D·(1−D)/(L·f) (Batarseh & Harb, Power Electronics, §4.5); here τ/T = 2000
    case = Case("slow (demo data)", Supply(VS), Coil(1.0, 10.0), Switch("ideal"),
                (Clamp("D", "coil", (Element("diode", model="constant-drop", forward_voltage=0.0),)),))
    pf = pwm_figures(steady_state(Circuit(case), 0.4, F))
    assert pf.ripple_A == pytest.approx(VS * 0.4 * 0.6 / (1.0 * F), rel=2e-3)


def test_crossover_loss_half_v_i_tf():
    # linear current fall into a clamped node: E = ½·V·I·t_f per cycle (Mohan, Undeland & Robbins, ch. 2)
    tf = 200e-9
    pf = pwm_figures(steady_state(Circuit(_case(0.7, tf)), 0.5, F))
    expect = 0.5 * (VS + 0.7) * pf.max_current_A * tf
    assert pf.crossover_energy_J == pytest.approx(expect, rel=1e-4)
    assert pf.crossover_loss_W == pytest.approx(expect * F, rel=1e-4)


def test_shooting_matches_brute_force_cycling():
    c = Circuit(_case(0.7))
    ss = steady_state(c, 0.3, F)
    x = np.array([c.coil_state(0.0)])
    n = ss.brute_force_cycles
    for _ in range(n + 5):
        x = one_cycle(c, x, 0.3, F, 1e-9)[0]
    assert x[0] == pytest.approx(ss.x[0], rel=1e-8)
    # fewer cycle solves than plain repetition needs
    assert ss.cycle_solves < n


def test_foster_periodic_square_wave():
    # one stage under a square power wave, periodic: T_peak = P·R·(1 − a_on)/(1 − a_on·a_off) (derived)
    r, tau, p0, T, duty = 3.0, 2e-4, 10.0, 1e-4, 0.4
    t = np.linspace(0, T, 40001)
    p = np.where(t <= duty * T, p0, 0.0)
    rise = foster_periodic(t, p, [r], [tau])
    a_on, a_off = math.exp(-duty * T / tau), math.exp(-(1 - duty) * T / tau)
    assert rise.max() == pytest.approx(p0 * r * (1 - a_on) / (1 - a_on * a_off), rel=1e-3)
    assert rise[0] == pytest.approx(rise[-1], rel=1e-9), "periodic"


def test_demo_pwm_case_and_cli(tmp_path):
    res = simulate(load_case(CASES / "valve_pwm_hold.toml"))
    assert len(res.pwm) == 2 and res.passed
    a, b = res.pwm
    assert a.mean_current_A < b.mean_current_A, "more duty, more current"
    # the final turn-off starts from the periodic state at the turn-off instant of the duty with the
    # highest current there: the cycle's own current at t = D·T (the coil current still rises a little
    # during the 60 ns fall, so the cycle's maximum lies just above it)
    cyc = b.cycle
    i_turnoff = float(np.interp(0.5 / 20e3, cyc.t, cyc.i_coil))
    assert res.figures.initial_current_A == pytest.approx(i_turnoff, rel=1e-6)
    assert i_turnoff <= b.max_current_A <= i_turnoff * (1 + 1e-3)
    out = CliRunner().invoke(main, ["run", str(CASES / "valve_pwm_hold.toml"), "--json"])
    assert out.exit_code == 0
    d = json.loads(out.stdout)
    assert [p["duty"] for p in d["pwm"]] == [0.3, 0.5] and "ripple_A" in d["pwm"][0]


def test_averages_in_discontinuous_conduction():
    # diode + Zener clamp: the current reaches zero in the off phase and stays there (derived, first-order
    # RL): on i = I∞·(1 − e^(−t/τ)) from zero; off i = (i_max + Vc/R)·e^(−t/τ) − Vc/R to its zero at
    # t_z = τ·ln(1 + R·i_max/Vc); the clamp's energy per cycle is Vc·∫i dt
    vc, duty = 20.7, 0.4
    cl = Clamp("DZ", "coil", (Element("diode", model="constant-drop", forward_voltage=0.7),
                              Element("zener", voltage=20.0)))
    case = Case("discontinuous (demo data)", Supply(VS), Coil(L, R), Switch("ideal"), (cl,))
    pf = pwm_figures(steady_state(Circuit(case), duty, F, rtol=1e-8))
    T, tau, inf = 1 / F, L / R, VS / R
    i_max = -inf * math.expm1(-duty * T / tau)
    tz = tau * math.log(1 + R * i_max / vc)
    assert tz < (1 - duty) * T, "discontinuous (the closed form assumes it)"
    q_on = inf * duty * T + inf * tau * math.expm1(-duty * T / tau)
    q_off = -(i_max + vc / R) * tau * math.expm1(-tz / tau) - vc / R * tz
    assert pf.switch_mean_A == pytest.approx(q_on / T, rel=1e-7)
    assert pf.elements[0]["mean_A"] == pytest.approx(q_off / T, rel=1e-7)
    assert pf.elements[1]["energy_J"] == pytest.approx(20.0 * q_off, rel=1e-7)
    assert pf.max_current_A == pytest.approx(i_max, rel=1e-8)


@pytest.mark.parametrize("duty", [0.3, 0.7])
def test_turn_on_discharge_is_its_own_term(duty):
    """A MOSFET with output capacitance and a constant-drop freewheel diode in continuous
    conduction: the node sits at V_s + V_f through the off phase, and at turn-on the channel
    discharges C_oss to R_on·i_min: ½·C·(V_s + V_f − R_on·i_min)² per cycle (a capacitor stepped
    through a resistance, Mohan et al., Power Electronics, ch. 24). i_min from the exact
    exponential segments of the two RL phases (fixed point of the linear one-cycle map, derived
    here). The conduction loss is what is left of the channel's on-phase energy: R_on·∫i² dt."""
    ron, coss, vf = 0.08, 120e-12, 0.7
    sw = Switch("mosfet", on_resistance=ron, capacitance=coss)
    d = Element("diode", model="constant-drop", forward_voltage=vf)
    case = Case("pwm with C_oss (demo data)", Supply(VS), Coil(L, R), sw, (Clamp("D", "coil", (d,)),))
    T = 1.0 / F
    a_on, a_off = math.exp(-duty * T * (R + ron) / L), math.exp(-(1 - duty) * T * R / L)
    i_on_inf, i_off_inf = VS / (R + ron), -vf / R
    # i_max = i_on_inf + (i_min − i_on_inf)·a_on ; i_min = i_off_inf + (i_max − i_off_inf)·a_off
    i_min = (i_off_inf * (1 - a_off) + a_off * i_on_inf * (1 - a_on)) / (1 - a_off * a_on)
    i_max = i_on_inf + (i_min - i_on_inf) * a_on
    want = 0.5 * coss * (VS + vf - ron * i_min) ** 2
    pf = pwm_figures(steady_state(Circuit(case), duty, F, rtol=1e-8))
    assert pf.turn_on_discharge_energy_J == pytest.approx(want, rel=1e-5)
    assert pf.turn_on_discharge_loss_W == pytest.approx(want * F, rel=1e-5)
    # R_on·∫i² over the on phase of the exact exponential: i = i_inf + (i_min − i_inf)·e^(−t/τ)
    tau, b = L / (R + ron), i_min - i_on_inf
    t_on = duty * T
    i2 = (i_on_inf ** 2 * t_on + 2 * i_on_inf * b * tau * (1 - math.exp(-t_on / tau))
          + b * b * tau / 2 * (1 - math.exp(-2 * t_on / tau)))
    # the closed form leaves out the ~20 ns C_oss takes to charge at turn-off, while the coil still
    # sees V_s − v: the current moves by about (V_s/L)·(C·V/i)/2 ≈ 2.5e-4 A, ~1e-3 of ∫i² at duty 0.3
    # (7e-4 found)
    assert pf.conduction_loss_W == pytest.approx(ron * i2 * F, rel=2e-3)
    assert i_max > i_min > 0  # continuous conduction: the node stays at V_s + V_f while off


@pytest.mark.parametrize("t_off", [12e-6, 20e-6], ids=["coil-current-negative", "coil-current-positive"])
def test_turn_on_discharge_bjt_ringing_node(t_off):
    """A BJT with output capacitance and no clamp: at turn-off the node rings with the coil (series
    RLC from i = (V_s − V_sat)/R, v = V_sat), and at turn-on the coil current may be negative,
    which a BJT's channel cannot carry: the channel then discharges the node only down to V_sat,
    ½·C·(V − V_sat)² (Mohan et al., Power Electronics, ch. 24: the capacitive turn-on loss). The
    state at turn-on comes from the matrix exponential of the linear off phase
    (scipy.linalg.expm), the on phase being long enough (24 L/R) to settle completely. It was
    −∞ V on-state voltage and an infinite discharge energy before."""
    from scipy.linalg import expm

    vs, lh, r, c, vsat, t_on = 24.0, 1e-3, 240.0, 10e-9, 0.3, 100e-6
    a = np.array([[-r / lh, -1.0 / lh], [1.0 / c, 0.0]])  # L·i' = V_s − v − R·i, C·v' = i
    rest = np.array([0.0, vs])
    i_t, v_t = rest + expm(a * t_off) @ (np.array([(vs - vsat) / r, vsat]) - rest)
    assert v_t > vsat and (i_t < -1e-3 if t_off < 15e-6 else i_t > 1e-3)  # the regime meant
    case = Case("BJT ringing node (demo data)", Supply(vs), Coil(lh, r),
                Switch("bjt", saturation_voltage=vsat, capacitance=c), ())
    period = t_on + t_off
    pf = pwm_figures(steady_state(Circuit(case), t_on / period, 1 / period, rtol=1e-8))
    # V_on = V_sat either way: a positive current adds only the regularising resistance's drop
    # (~1e-5 Ω × 1e-2 A here), far below the tolerance
    want = 0.5 * c * (v_t - vsat) ** 2
    assert pf.turn_on_discharge_energy_J == pytest.approx(want, rel=1e-6)
    assert pf.turn_on_discharge_loss_W == pytest.approx(want / period, rel=1e-6)
    assert math.isfinite(pf.conduction_loss_W) and pf.conduction_loss_W > 0
