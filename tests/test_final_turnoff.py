"""The final turn-off after a [drive]: it starts from the full periodic steady state at the
turn-off instant (current, motor speed, junction stages), checked against references written here."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.linalg import expm

from kickback import simulate
from kickback.case import Case, Checks, Clamp, Coil, Drive, Element, Motor, Supply, Switch

# an invented fan-like motor (demo data): 24 V, 2 mH, 2 Ω, k = 0.02 V·s/rad, J = 2e-5 kg·m²
VS, L, R, K, J, B, TL, VD, F = 24.0, 2e-3, 2.0, 0.02, 2e-5, 2e-5, 0.005, 0.7, 20e3


def _motor_case(duty):
    d = Element("diode", model="constant-drop", forward_voltage=VD)
    return Case("final turn-off (demo data)", Supply(VS), Coil(L, R), Switch("ideal"), (Clamp("D", "coil", (d,)),),
                drive=Drive(F, (duty,), True), motor=Motor(K, inertia=J, viscous_friction=B, load_torque=TL))


def _affine(on: bool):
    """x' = A·x + b for x = (i, ω): the DC machine (Fitzgerald & Kingsley, Electric Machinery,
    DC machines) with an ideal switch (on: the coil sees Vs) or the constant-drop freewheel diode
    conducting (off: the coil sees −Vd)."""
    a = np.array([[-R / L, -K / L], [K / J, -B / J]])
    b = np.array([(VS if on else -VD) / L, -TL / J])
    return a, b


def _flow(on: bool, t: float):
    """Exact map x → e^{At}·x + ∫e^{As}b ds of one phase, by the augmented matrix exponential
    (C. Van Loan, IEEE Trans. Autom. Control 23(3), 1978)."""
    a, b = _affine(on)
    m = np.zeros((3, 3))
    m[:2, :2], m[:2, 2] = a, b
    e = expm(m * t)
    return e[:2, :2], e[:2, 2]


def _reference(duty):
    """Periodic state at the turn-off instant (fixed point of the exact one-cycle map, continuous
    conduction), then the turn-off integrated tightly by scipy (DOP853, rtol 1e-12) with the energies
    as extra states, to the current zero."""
    T = 1 / F
    p_on, q_on = _flow(True, duty * T)
    p_off, q_off = _flow(False, (1 - duty) * T)
    # at turn-off: x_off = P_on·(P_off·x_off + q_off) + q_on
    x_off = np.linalg.solve(np.eye(2) - p_on @ p_off, p_on @ q_off + q_on)
    assert (p_off @ x_off + q_off)[0] > 0, "continuous conduction (the closed form assumes it)"

    def rhs(t, y):
        i, w = y[0], y[1]
        return [(-VD - R * i - K * w) / L, (K * i - B * w - TL) / J, R * i * i, VD * i, K * w * i]

    i0 = x_off[0]
    evs = []
    for frac in (0.1, 0.01, 0.0):
        def g(t, y, frac=frac):
            return y[0] - frac * i0
        g.direction = -1
        g.terminal = frac == 0.0
        evs.append(g)
    sol = solve_ivp(rhs, (0, 1.0), [x_off[0], x_off[1], 0, 0, 0], method="DOP853", rtol=1e-12,
                    atol=[1e-15, 1e-12, 1e-18, 1e-18, 1e-18], events=evs)
    t10, t1, t0 = (float(e[0]) for e in sol.t_events)
    return x_off, t10, t1, t0, sol.y_events[2][0][2:]


@pytest.mark.parametrize("duty", [0.3, 0.9], ids=["D0.3", "D0.9"])
def test_motor_final_turnoff_starts_from_the_periodic_state(duty):
    x_off, t10, t1, t0, (e_r, e_d, e_m) = _reference(duty)
    res = simulate(_motor_case(duty))
    f = res.figures
    y0 = res.waveforms.y[:, 0]
    assert f.initial_current_A == pytest.approx(x_off[0], rel=1e-8), "current at the turn-off instant"
    assert y0[res.waveforms.circuit.iw] == pytest.approx(x_off[1], rel=1e-8), "speed at the turn-off instant"
    # figures against the tight reference (a DC-equilibrium start speed put them 2–25 % off)
    assert f.to_10_percent_s == pytest.approx(t10, rel=1e-6)
    assert f.to_1_percent_s == pytest.approx(t1, rel=1e-6)
    assert f.to_zero_s == pytest.approx(t0, rel=1e-6)
    assert f.resistance_energy_J == pytest.approx(e_r, rel=1e-6)
    assert f.clamps[0].energy_J == pytest.approx(e_d, rel=1e-6)
    assert f.motor_energy_J == pytest.approx(e_m, rel=1e-6)
    assert abs(f.energy_balance_error) < 1e-6


def test_final_turnoff_takes_the_duty_with_the_highest_turnoff_current():
    case = _motor_case(0.3)
    from dataclasses import replace

    res = simulate(replace(case, drive=Drive(F, (0.3, 0.6), True)))
    x_hi = _reference(0.6)[0]
    assert res.figures.initial_current_A == pytest.approx(x_hi[0], rel=1e-8)


# --- junction temperature of the final turn-off: the periodic Foster state at the instant -------------
RON, RTH, TAUS = 0.5, (0.05, 0.4, 2.0), (20e-6, 2e-3, 0.5)


def test_final_turnoff_junction_starts_from_the_periodic_foster_state():
    # a MOSFET with R_on heats by R_on·i² in the on phase and not at all off (instant switch, the
    # clamp holds the node below breakdown); its junction at the final turn-off is ambient plus each
    # Foster stage's periodic state at that instant: the geometric series over earlier periods,
    #   T_k = (R_k/τ_k)·∫_0^{DT} p(s)·e^{−(DT − s)/τ_k} ds / (1 − e^{−T/τ_k})   (derived; JESD51-14 Foster form)
    # with p = R_on·i(s)², i(s) = I∞ + (i_min − I∞)·e^{−s/τ}, I∞ = Vs/(R + R_on), τ = L/(R + R_on).
    from scipy.integrate import quad

    duty, amb = 0.5, 313.15
    d = Element("diode", model="constant-drop", forward_voltage=VD)
    sw = Switch("mosfet", on_resistance=RON, thermal_resistance=RTH, thermal_tau=TAUS,
                max_junction_temperature=423.15)
    case = Case("junction (demo data)", Supply(VS), Coil(L, R), sw, (Clamp("D", "coil", (d,)),),
                checks=Checks(ambient_temperature=amb), drive=Drive(F, (duty,), True))
    T = 1 / F
    tau_on, tau_off = L / (R + RON), L / R
    i_inf = VS / (R + RON)
    a_on, a_off = math.exp(-duty * T / tau_on), math.exp(-(1 - duty) * T / tau_off)
    # i_max = I∞ + (i_min − I∞)·a_on, i_min = −Vd/R + (i_max + Vd/R)·a_off (exponential segments)
    i_max = (i_inf * (1 - a_on) + a_on * (-VD / R) * (1 - a_off)) / (1 - a_on * a_off)
    i_min = -VD / R + (i_max + VD / R) * a_off

    def p(s):
        return RON * (i_inf + (i_min - i_inf) * math.exp(-s / tau_on)) ** 2

    rise = 0.0
    for rk, tk in zip(RTH, TAUS, strict=True):
        conv = quad(lambda s, tk=tk: p(s) * math.exp(-(duty * T - s) / tk), 0, duty * T, epsabs=0, epsrel=1e-12)[0]
        rise += rk / tk * conv / -math.expm1(-T / tk)
    res = simulate(case)
    assert res.figures.initial_current_A == pytest.approx(i_max, rel=1e-8)
    # no switch power after an instant turn-off: the peak is the start
    assert res.figures.switch_junction_peak_K == pytest.approx(amb + rise, rel=1e-7, abs=1e-6)
    # and the periodic peak of the cycle is the same instant (the power is highest just before it)
    assert res.pwm[0].switch_junction_peak_K == pytest.approx(amb + rise, rel=1e-7, abs=1e-6)
    # the mean: ambient + mean power · ΣR
    mean_p = quad(p, 0, duty * T, epsabs=0, epsrel=1e-12)[0] / T
    assert res.pwm[0].switch_junction_mean_K == pytest.approx(amb + mean_p * sum(RTH), rel=1e-8)


def test_snubber_capacitor_starts_at_its_periodic_voltage():
    # RC snubber across an ideal switch, no other clamp (demo data). On: the node is held at 0 V and the
    # snubber capacitor discharges through R_s; off: the coil current runs through R_s and C,
    #   L·di/dt = Vs − (R + R_s)·i − v_c,  C·dv_c/dt = i,  node v = v_c + R_s·i   (series RLC, e.g.
    # Alexander & Sadiku, Fundamentals of Electric Circuits, ch. 8). Both phases are linear: the periodic
    # state at turn-off is the fixed point of the exact one-cycle map (augmented matrix exponential), and
    # the final turn-off's peak node voltage follows from the exact solution by a bounded scalar search.
    from scipy.optimize import minimize_scalar

    vs, ll, rr, cc, rs, f, duty = 24.0, 1e-3, 10.0, 100e-9, 100.0, 20e3, 0.3
    snub = Clamp("RC", "switch", (Element("resistor", resistance=rs), Element("capacitor", capacitance=cc)))
    case = Case("snubber PWM (demo data)", Supply(vs), Coil(ll, rr), Switch("ideal"), (snub,),
                drive=Drive(f, (duty,), True))

    def flow(a, b, t):
        m = np.zeros((3, 3))
        m[:2, :2], m[:2, 2] = a, b
        e = expm(m * t)
        return e[:2, :2], e[:2, 2]

    a_on, b_on = np.array([[-rr / ll, 0.0], [0.0, -1 / (rs * cc)]]), np.array([vs / ll, 0.0])
    a_off, b_off = np.array([[-(rr + rs) / ll, -1 / ll], [1 / cc, 0.0]]), np.array([vs / ll, 0.0])
    T = 1 / f
    p_on, q_on = flow(a_on, b_on, duty * T)
    p_off, q_off = flow(a_off, b_off, (1 - duty) * T)
    x_off = np.linalg.solve(np.eye(2) - p_on @ p_off, p_on @ q_off + q_on)

    def node(t):
        p, q = flow(a_off, b_off, t)
        x = p @ x_off + q
        return x[1] + rs * x[0]

    grid = np.linspace(0, 2e-4, 4001)
    k = int(np.argmax([node(t) for t in grid]))
    best = minimize_scalar(lambda t: -node(t), bounds=(grid[max(k - 1, 0)], grid[k + 1]), method="bounded",
                           options={"xatol": 1e-14})
    peak = max(-best.fun, node(0.0))
    res = simulate(case)
    w = res.waveforms
    assert res.figures.initial_current_A == pytest.approx(x_off[0], rel=1e-8)
    assert w.y[w.circuit.icap[0], 0] == pytest.approx(x_off[1], rel=1e-7), "capacitor voltage at turn-off"
    assert x_off[1] > 1.0, "the capacitor has not discharged at turn-off: a DC on-state start would be wrong"
    assert res.figures.peak_voltage_V == pytest.approx(peak, rel=1e-6)
    assert abs(res.figures.energy_balance_error) < 1e-6


def test_clamp_junction_of_the_final_turnoff_starts_from_its_periodic_state():
    # a constant-drop freewheel diode with a Foster network (demo data): it dissipates Vd·i in the off phase,
    # i(u) = −Vd/R + (i_max + Vd/R)·e^(−u/τ) after each turn-off (first-order RL, derived). Each stage's
    # periodic state at the turn-off instant is the off phase's convolution, carried through the on phase
    # and summed over all earlier periods (geometric series, JESD51-14 Foster form); the final turn-off adds
    # the same convolution on top of T_k0·e^(−u/τ_k). Kickback's power is sampled (linear between samples):
    # held to 1e-4 of the rise.
    from scipy.integrate import quad
    from scipy.optimize import minimize_scalar

    from kickback.case import Checks

    duty, amb, rth, taus = 0.4, 300.0, (1.0, 5.0), (50e-6, 2e-3)
    d = Element("diode", model="constant-drop", forward_voltage=VD, thermal_resistance=rth, thermal_tau=taus)
    case = Case("diode junction (demo data)", Supply(VS), Coil(1e-3, 10.0), Switch("ideal"),
                (Clamp("D", "coil", (d,)),), checks=Checks(ambient_temperature=amb), drive=Drive(F, (duty,), True))
    ll, rr, T = 1e-3, 10.0, 1 / F
    tau = ll / rr
    a_on, a_off = math.exp(-duty * T / tau), math.exp(-(1 - duty) * T / tau)
    i_max = (VS / rr * (1 - a_on) + a_on * (-VD / rr) * (1 - a_off)) / (1 - a_on * a_off)

    def p(u):
        return max(VD * (-VD / rr + (i_max + VD / rr) * math.exp(-u / tau)), 0.0)

    def conv(u, tk):
        return quad(lambda s: p(s) * math.exp(-(u - s) / tk), 0, u, epsabs=0, epsrel=1e-12)[0]

    t_off = (1 - duty) * T
    start = [rk / tk * conv(t_off, tk) * math.exp(-duty * T / tk) / -math.expm1(-T / tk)
             for rk, tk in zip(rth, taus, strict=True)]

    def rise(u):
        return sum(s0 * math.exp(-u / tk) + rk / tk * conv(u, tk) for s0, rk, tk in zip(start, rth, taus, strict=True))

    uz = tau * math.log(1 + rr * i_max / VD)
    grid = np.linspace(0, uz, 201)
    k = int(np.argmax([rise(u) for u in grid]))
    best = minimize_scalar(lambda u: -rise(u), bounds=(grid[max(k - 1, 0)], grid[min(k + 1, 200)]),
                           method="bounded", options={"xatol": 1e-13})
    expect = max(-best.fun, rise(0.0))
    res = simulate(case)
    got = res.figures.clamps[0].elements[0].junction_peak_K - amb
    assert sum(start) > 0.05 * expect, "the periodic state is a real part of the peak here"
    assert got == pytest.approx(expect, rel=1e-4)


def test_order_of_the_duties_does_not_change_the_final_turnoff():
    # the duties share one circuit; each cycle's switch power (its 1 µs fall included) must be evaluated
    # with its own turn-off current, whatever duty was solved last (a property: same case, same answer)
    d = Element("diode", model="constant-drop", forward_voltage=VD)
    sw = Switch("mosfet", on_resistance=RON, fall_time=1e-6, thermal_resistance=RTH, thermal_tau=TAUS)

    def run(duties):
        case = Case("order (demo data)", Supply(VS), Coil(L, R), sw, (Clamp("D", "coil", (d,)),),
                    drive=Drive(F, duties, True))
        return simulate(case)

    a, b = run((0.7, 0.3)), run((0.3, 0.7))
    assert a.figures.switch_junction_peak_K == pytest.approx(b.figures.switch_junction_peak_K, rel=1e-9)
    pa = {p.duty: p for p in a.pwm}
    for p in b.pwm:
        assert p.switch_rms_A == pytest.approx(pa[p.duty].switch_rms_A, rel=1e-9)
        assert p.switch_junction_peak_K == pytest.approx(pa[p.duty].switch_junction_peak_K, rel=1e-9)


@pytest.mark.parametrize("t_off", [12e-6, 10e-6], ids=["current-negative", "current-positive"])
def test_final_turnoff_with_no_current_to_interrupt_is_refused(t_off):
    """An ideal switch with output capacitance and no clamp, 0.1 µs on: the off phase rings the
    node with the coil (series RLC towards (0, V_s): L·i' = V_s − v − R·i, C·v' = i, its map by
    scipy.linalg.expm), and the on phase (node at 0) is the RL exponential toward V_s/R. The
    periodic coil current at turn-on solves the scalar fixed point of the two affine maps (derived
    here). With t_off = 12 µs the on-time leaves the current negative at the turn-off instant:
    there is nothing for a final turn-off to interrupt, so the case is refused with the reason at
    drive.final_turn_off (it was refused as "the coil carries no current" at coil). With 10 µs the
    current is positive and the final turn-off starts from it."""
    from kickback.errors import CaseError

    vs, lh, r, c, t_on = 24.0, 1e-3, 240.0, 10e-9, 0.1e-6
    a = np.array([[-r / lh, -1.0 / lh], [1.0 / c, 0.0]])
    rest = np.array([0.0, vs])
    p = expm(a * t_off)
    e_on = math.exp(-r * t_on / lh)
    # i_start = P00·i_turnoff + (−P·rest)_0 with i_turnoff = V_s/R·(1 − e_on) + e_on·i_start
    q = -(p @ rest)[0]
    i_start = (p[0, 0] * vs / r * (1 - e_on) + q) / (1 - p[0, 0] * e_on)
    i_turnoff = vs / r + (i_start - vs / r) * e_on
    period = t_on + t_off
    case = Case("short on-time (demo data)", Supply(vs), Coil(lh, r), Switch("ideal", capacitance=c), (),
                drive=Drive(1 / period, (t_on / period,), True))
    if t_off == 12e-6:
        assert i_turnoff < -1e-3  # the regime meant
        with pytest.raises(CaseError) as err:
            simulate(case)
        assert err.value.key == "drive.final_turn_off" and "coil current at the turn-off instant" in str(err.value)
    else:
        assert i_turnoff > 1e-3
        res = simulate(case, rtol=1e-8)
        assert res.figures.initial_current_A == pytest.approx(i_turnoff, rel=1e-5)
