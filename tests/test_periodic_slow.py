"""The shooting's acceptance at the cycle integration's noise and the slow motor speed's chord iteration
(kickback.engine.periodic_settle), against closed forms written here.

The slow case is a random valid case of the wide-range generator (demo data): a DC motor winding
switched by a MOSFET with no clamp (its avalanche takes the turn-off), an electromechanical time
constant J·R/(k² + R·B) ≈ 29 s against a 4 ms period, the coil current reaching zero every cycle.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from kickback.case import Case, Coil, Drive, Motor, Supply, Switch
from kickback.circuit import Circuit
from kickback.engine.averaged import averaged_guess
from kickback.engine.periodic import CYCLE_RTOL, STEADY_TOL, steady_state
from kickback.engine.periodic_settle import NOISE_CAP, accepted
from kickback.pwmfigures import pwm_figures

VS, L, R = 61.93063905408951, 0.017214071815749927, 5.074533336801208
RON, CSW, VBR = 0.12844217800857388, 1.5981920587589443e-12, 189.98456493050043
K, J, B = 0.004610123813073127, 0.00013969027235024735, 6.682446641112229e-07
F, DUTY = 251.72433149150808, 0.7377643151675803


def _case():
    sw = Switch("mosfet", on_resistance=RON, capacitance=CSW, breakdown_voltage=VBR)
    return Case("slow motor (demo data)", Supply(VS), Coil(L, R), sw, (),
                drive=Drive(F, (DUTY,)), motor=Motor(K, inertia=J, viscous_friction=B))


def _closed_form_speed(duty=DUTY):
    """The speed where the cycle-averaged torque k·⟨i⟩ meets the friction B·ω (no load torque).

    Discontinuous conduction, the current from zero at turn-on: on, L·di/dt = Vs − k·ω − (R + R_on)·i,
    i = I∞·(1 − e^(−t/τ1)); off, the node held at the avalanche voltage until the current is zero,
    L·di/dt = −A − R·i with A = V_BR − Vs + k·ω (first-order RL circuit, any circuits text, e.g.
    Hayt & Kemmerly, Engineering Circuit Analysis, ch. 8; the DC machine's k·ω and k·i from
    Fitzgerald & Kingsley, Electric Machinery, ch. on DC machines). Neglected: the node
    capacitance's charge (C·V_BR ≈ 3e-10 C against ⟨i⟩·T ≈ 5e-3 C) and the LC ring it leaves after
    the avalanche (its current at the next turn-on ≈ 1e-4 A, worth ~5e-5 of the charge).
    """
    t_on, period = duty / F, 1.0 / F

    def mean_current(w):
        emf = K * w
        i_inf, tau1 = (VS - emf) / (R + RON), L / (R + RON)
        i_off = i_inf * (1.0 - math.exp(-t_on / tau1))
        q_on = i_inf * (t_on - tau1 * (1.0 - math.exp(-t_on / tau1)))
        a, tau2 = VBR - VS + emf, L / R
        t_zero = tau2 * math.log1p(i_off * R / a)
        assert t_zero < period - t_on  # the current reaches zero within the cycle
        q_off = tau2 * i_off - a / R * t_zero
        return (q_on + q_off) / period

    return brentq(lambda w: K * mean_current(w) - B * w, 0.0, VS / K, xtol=1e-9, rtol=1e-14)


@pytest.fixture(scope="module")
def slow():
    c = Circuit(_case())
    ss = steady_state(c, DUTY, F)
    return c, ss, pwm_figures(ss)


def test_slow_speed_against_the_averaged_torque_balance(slow):
    c, ss, pf = slow
    w_ref = _closed_form_speed()
    # far from the averaged model's guess (it assumes a current that flows all cycle)
    assert abs(float(averaged_guess(c, DUTY, F)[c.iw]) - w_ref) > 0.3 * w_ref
    # the closed form neglects the LC ring after the avalanche (~5e-5 of the charge, see there;
    # 2e-5 measured)
    assert pf.mean_speed_rad_s == pytest.approx(w_ref, rel=1e-4)
    assert float(ss.x[c.iw]) == pytest.approx(w_ref, rel=1e-4)
    # at a periodic steady state the speed returns to its start: J·Δω = ∫(k·i − B·ω)dt = 0 over
    # the cycle, so k·⟨i⟩ = B·⟨ω⟩ (Newton's second law for the rotor); to the accuracy of the
    # sampled cycle's quadrature of ⟨i⟩ (a current with a kink at zero each cycle: ~1e-6)
    assert pf.mean_torque_Nm == pytest.approx(B * pf.mean_speed_rad_s, rel=1e-5)


def test_slow_residual_is_reported(slow):
    c, ss, pf = slow
    # the residual reported is every state's, the noisy forgotten node included: at most the
    # noise cap, and the speed's own drift within the fixed point's tolerance
    assert ss.residual <= NOISE_CAP
    assert pf.residual == ss.residual
    assert 0.0 < ss.contraction < 1.0


def test_accepted_rule():
    scale = np.array([1.0, 10.0, 100.0])
    x = np.array([0.5, 7.0, 50.0])
    jm = np.array([[0.5, 0.0, 0.1], [0.2, 0.0, 0.0], [0.0, 0.0, 0.99]])  # state 1 forgotten (nil column)
    tol, rtol = STEADY_TOL, CYCLE_RTOL
    f = np.array([1e-10, 3e-9 * 10.0, 1e-10 * 100.0])
    dx = np.array([1e-10, 3e-9 * 10.0, 4e-9 * 100.0])
    # the forgotten node at 3e-9 < rtol·|x|/scale = 7e-9, the slow state's step 4e-9 < 5e-9
    assert accepted(f, dx, x, scale, jm, rtol, tol)
    # a kept state's residual is not loosened to rtol·|x|: 2e-9 of its scale fails (rtol·|x| = 5e-9)
    assert not accepted(f + np.array([2e-9, 0.0, 0.0]), dx, x, scale, jm, rtol, tol)
    # only to a noise the iteration has shown in it, and never past the cap
    assert accepted(f + np.array([2e-9, 0.0, 0.0]), dx, x, scale, jm, rtol, tol, np.array([3e-9, 0.0, 0.0]))
    assert not accepted(f + np.array([2e-5, 0.0, 0.0]), dx, x, scale, jm, rtol, tol, np.array([1.0, 0.0, 0.0]))
    # nor its step past the integration's accuracy (6e-9 > rtol·|x|/scale = 5e-9)
    assert not accepted(f, dx * np.array([1.0, 1.0, 1.5]), x, scale, jm, rtol, tol)
    # the forgotten state past rtol·|x|: only with noise shown, and never past the cap
    big = f + np.array([0.0, 1e-6 * 10.0, 0.0])
    assert not accepted(big, dx, x, scale, jm, rtol, tol)
    assert accepted(big, dx, x, scale, jm, rtol, tol, np.array([0.0, 2e-6, 0.0]))
    assert not accepted(f + np.array([0.0, 2e-5 * 10.0, 0.0]), dx, x, scale, jm, rtol, tol,
                        np.array([0.0, 1.0, 0.0]))
    # without a Jacobian every state is kept
    assert not accepted(f, dx, x, scale, None, rtol, tol)


def test_slow_speed_at_a_low_duty():
    # the same motor at duty 0.3 (built here, not drawn by the generator): a shorter on-time, the
    # speed's fixed point at 0.31 of its scale. Its closed-form off phase's sampling grid rounded an
    # ulp past the period ("a sample in no phase", kickback.engine.linphase) once the steady state
    # was found; the closed form above is the reference
    c = Circuit(_case())
    pf = pwm_figures(steady_state(c, 0.3, F))
    w_ref = _closed_form_speed(0.3)
    # the LC ring's current at turn-on the closed form neglects is worth ~1e-4 of the smaller
    # charge per cycle at this duty (9.5e-5 measured)
    assert pf.mean_speed_rad_s == pytest.approx(w_ref, rel=3e-4)
    assert pf.mean_torque_Nm == pytest.approx(B * pf.mean_speed_rad_s, rel=2e-5)


def test_slow_speed_when_chord_cycles_fail(monkeypatch):
    # a cycle of the chord iteration whose integration gives up (on main 5fffa3f one cycle of this
    # case, near the root, stepped its off phase's LC ring past the evaluation limit, and the
    # shooting fell back to a step from the first guess: "did not converge"). Here the first
    # cheap cycle within 1e-3 of the root fails, and so does its retry: the shooting must go on
    # from the chord's best state and still meet the closed form above
    from kickback.engine import periodic
    from kickback.errors import SolverError

    w_ref = _closed_form_speed()
    real = periodic.one_cycle
    failed = []

    def one_cycle(c, x, *args, **kw):
        if len(failed) < 2 and not kw.get("keep") and abs(float(x[c.iw]) / w_ref - 1.0) < 1e-3:
            failed.append(float(x[c.iw]))
            raise SolverError("injected: the cycle integration gave up")
        return real(c, x, *args, **kw)

    monkeypatch.setattr(periodic, "one_cycle", one_cycle)
    c = Circuit(_case())
    pf = pwm_figures(steady_state(c, DUTY, F))
    assert len(failed) == 2  # the cycle and its retry
    assert pf.mean_speed_rad_s == pytest.approx(w_ref, rel=1e-4)
    assert pf.residual <= NOISE_CAP
