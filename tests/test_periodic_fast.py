"""The fast periodic steady state (closed-form affine on-phase, averaged guess, Broyden) against
independent references: a 50-digit matrix exponential, the Radau integrator, plain brute-force
cycling, the averaged DC machine, and the reference shooting kept in the package."""

from __future__ import annotations

from pathlib import Path

import mpmath
import numpy as np
import pytest
from periodic_reference import reference_steady_state  # tests/: the reference shooting lives with the tests

from kickback import load_case
from kickback.case import Case, Clamp, Coil, Element, Motor, Supply, Switch
from kickback.circuit import Circuit
from kickback.engine import linphase
from kickback.engine.averaged import averaged_guess
from kickback.engine.linphase import LinearSolution, expm_extended
from kickback.engine.periodic import STEADY_TOL, one_cycle, scales, steady_state

CASES = Path(__file__).resolve().parent.parent / "cases"
F = 20e3


def _shockley_case(c_oss=100e-12, r_on=0.1):
    """Small invented coil (demo data): τ = L/R = 0.1 ms against a 50 µs period, so that brute
    force cycling converges in a few dozen cycles (contraction ≈ e^(−0.5))."""
    d = Element("diode", model="shockley", forward_voltage=0.9, at_current=1.0, ideality=1.8,
                series_resistance=0.05)
    sw = Switch("mosfet", on_resistance=r_on, fall_time=50e-9, capacitance=c_oss, breakdown_voltage=70.0)
    return Case("fast pwm (demo data)", Supply(24.0), Coil(1e-3, 10.0), sw, (Clamp("D", "coil", (d,)),))


def test_extended_exponential_against_50_digit_reference():
    # stiff augmented matrix of a coil (R/L = 800/s) and a 120 pF node through 80 mΩ (τ ≈ 10 ps):
    # reference exp(M·t) by mpmath at 50 digits (mpmath.expm, Taylor/Padé in arbitrary precision)
    L, R, C, ron, vs = 60e-3, 48.0, 120e-12, 0.08, 24.0
    M = np.array([[-R / L, -1.0 / L, vs / L], [1.0 / C, -1.0 / (ron * C), 0.0], [0.0, 0.0, 0.0]])
    t = 15e-6
    mpmath.mp.dps = 50
    ref = mpmath.expm(mpmath.matrix(M.tolist()) * mpmath.mpf(t))
    ref = np.array([[float(ref[i, j]) for j in range(3)] for i in range(3)])
    got = np.asarray(expm_extended(M, t), dtype=float)
    z0 = np.array([0.137, 24.7, 1.0])
    assert np.allclose(got @ z0, ref @ z0, rtol=0, atol=1e-13 * np.array([0.5, 70.0, 1.0]).max()), \
        "extended-precision exponential within 1e-13 of the 50-digit one"


@pytest.mark.parametrize("name, duty", [("valve_pwm_hold.toml", 0.3), ("fan_motor_pwm.toml", 0.6)],
                         ids=["valve", "motor"])
def test_closed_form_on_phase_matches_radau(name, duty):
    # one cycle with the affine on-phase in closed form against the same cycle integrated by
    # scipy's Radau IIA throughout at rtol 1e-10 (Hairer & Wanner, Solving ODEs II)
    c = Circuit(load_case(CASES / name))
    ss = steady_state(c, duty, F)
    x = ss.x
    fast = one_cycle(c, x, duty, F, 1e-10, keep=True)
    slow = one_cycle(c, x, duty, F, 1e-10, fast=False)
    assert any(isinstance(p.sol, LinearSolution) for p in fast[3].phases), "the closed form was used"
    sc = scales(c)
    assert np.max(np.abs(fast[0] - slow[0]) / sc) < 1e-10
    e_scale = np.max(np.abs(slow[1]))
    assert np.allclose(fast[1], slow[1], rtol=1e-7, atol=1e-9 * e_scale), "on-phase energies"


def test_fast_steady_state_equals_brute_force_cycling():
    # the periodic steady state is the limit of plain repetition (definition; Aprille & Trick,
    # Proc. IEEE 1972): cycle from rest with Radau throughout until the state stops changing
    c = Circuit(_shockley_case())
    ss = steady_state(c, 0.4, F)
    assert ss.residual <= STEADY_TOL
    sc = scales(c)
    x = np.zeros(c.ie)
    for _ in range(200):
        x1 = one_cycle(c, x, 0.4, F, 1e-8, fast=False)[0]
        done = np.max(np.abs(x1 - x) / sc) < 1e-13
        x = x1
        if done:
            break
    assert np.max(np.abs(ss.x - x) / sc) < 1e-9
    assert ss.cycle_solves < ss.brute_force_cycles


@pytest.mark.parametrize("name, duty", [("valve_pwm_hold.toml", 0.5), ("fan_motor_pwm.toml", 0.3)],
                         ids=["valve", "motor"])
def test_fast_agrees_with_reference_shooting(name, duty):
    # the reference shooting (fresh finite-difference Jacobian each Newton step, Radau only)
    c = Circuit(load_case(CASES / name))
    fast, ref = steady_state(c, duty, F), reference_steady_state(c, duty, F)
    sc = scales(c)
    # the motor's mechanical mode contracts by only ~5e-4 a cycle, which amplifies the map's
    # integration error 2000× in the fixed point; both fixed points are within that of each other
    assert np.max(np.abs(fast.x - ref.x) / sc) < 1e-8
    assert fast.energies_on == pytest.approx(ref.energies_on, rel=1e-6, abs=1e-15)
    assert fast.energies_off == pytest.approx(ref.energies_off, rel=1e-6, abs=1e-15)
    assert fast.cycle_solves < ref.cycle_solves
    assert fast.brute_force_cycles == pytest.approx(ref.brute_force_cycles, rel=0.02)


def test_fallback_when_the_affine_model_is_refused(monkeypatch):
    # with no departure tolerated the closed form is never accepted: every cycle is Radau, and the
    # steady state is the same (to the integration tolerance)
    c = Circuit(_shockley_case())
    fast = steady_state(c, 0.5, F)
    monkeypatch.setattr(linphase, "LIN_TOL", 0.0)
    monkeypatch.setattr(linphase, "ROUNDING", 0.0)
    slow = steady_state(c, 0.5, F)
    assert not any(isinstance(p.sol, LinearSolution) for p in slow.waveforms.phases)
    assert np.max(np.abs(fast.x - slow.x) / scales(c)) < 1e-9


def test_averaged_guess_against_the_averaged_machine():
    # averaged DC machine (Middlebrook & Ćuk, IEEE PESC 1976), constant-drop freewheel diode:
    # D·Vs − (1 − D)·Vd = (R + D·R_on)·Ī + k·ω̄ and k·Ī = B·ω̄ + T_L; the guess is the cycle start,
    # half an on-time's rise below the mean (triangle ripple, the on-slope (Vs − (R + R_on)·Ī − k·ω̄)/L)
    k, b, tl, rw, ron, vs, vd, duty = 0.02, 2e-5, 0.005, 2.0, 0.05, 24.0, 0.7, 0.5
    sw = Switch("mosfet", on_resistance=ron, fall_time=1e-7, capacitance=5e-10)
    case = Case("motor (demo data)", Supply(vs), Coil(2e-3, rw), sw,
                (Clamp("D", "coil", (Element("diode", model="constant-drop", forward_voltage=vd),)),),
                motor=Motor(k, inertia=2e-5, viscous_friction=b, load_torque=tl))
    c = Circuit(case)
    i, w = np.linalg.solve([[rw + duty * ron, k], [k, -b]], [duty * vs - (1 - duty) * vd, tl])
    x = averaged_guess(c, duty, F)
    assert x[c.iw] == pytest.approx(w, rel=1e-3)
    rise = (vs - (rw + ron) * i - k * w) / 2e-3 * duty / F
    assert x[0] == pytest.approx(i - 0.5 * rise, rel=1e-3)
