"""Junction temperature through Foster networks, and pulse-power ratings moved in width."""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from kickback import load_case, simulate
from kickback.models.thermal import foster_impedance, foster_response, rectangular_equivalent, wunsch_bell_rating

CASES = Path(__file__).resolve().parent.parent / "cases"
R, TAU = (0.4, 2.0, 6.0), (1e-4, 5e-3, 0.2)


def test_rectangular_pulse_follows_the_impedance():
    # a constant power P from t = 0 raises the junction by P·Z_th(t) (JEDEC JESD51-14, Foster form);
    # the response is exact for power linear between samples, so a constant is exact on any grid
    t = np.concatenate([[0.0], np.geomspace(1e-7, 1.0, 400)])
    p = np.full_like(t, 12.0)
    rise = foster_response(t, p, R, TAU)
    assert rise == pytest.approx(12.0 * foster_impedance(t, R, TAU), rel=1e-12, abs=1e-12)
    assert foster_impedance(1e3, R, TAU) == pytest.approx(sum(R), rel=1e-12), "steady state: ΣR"


def test_pulse_then_cooling():
    # after the power stops each stage decays with its own τ (derived: T_k(t) = T_k(t1)·e^{-(t-t1)/τ_k})
    t1 = 2e-3
    t = np.linspace(0.0, 10e-3, 100001)
    p = np.where(t <= t1, 5.0, 0.0)
    rise = foster_response(t, p, R, TAU)
    k = np.searchsorted(t, 6e-3)
    stages = [5.0 * r * -math.expm1(-t1 / tau) * math.exp(-(t[k] - t1) / tau) for r, tau in zip(R, TAU, strict=True)]
    assert rise[k] == pytest.approx(sum(stages), rel=2e-4)  # the step edge spans one 0.1 µs sample
    assert np.argmax(rise) == pytest.approx(np.searchsorted(t, t1), abs=2), "the peak is at the end of the pulse"


def test_wunsch_bell():
    # P ∝ t^(-1/2): a 1 ms rating of 1.5 kW is 0.75 kW for a 4 ms pulse (Wunsch & Bell 1968)
    assert wunsch_bell_rating(1500.0, 1e-3, 4e-3) == pytest.approx(750.0, rel=1e-12)
    t = np.linspace(0, 1e-3, 1001)
    peak, width = rectangular_equivalent(t, 100.0 * (1 - t / 1e-3))  # triangle: E = ½·P·T
    assert peak == pytest.approx(100.0) and width == pytest.approx(0.5e-3, rel=1e-9)


def test_demo_brake_junction_check_and_rescaled_rating():
    case = load_case(CASES / "conveyor_brake.toml")
    res = simulate(case)
    checks = {(c.part, c.quantity): c for c in res.checks}
    el = res.figures.clamps[0].elements[0]
    pw = checks[("TVS1", "peak power")]
    assert pw.limit == pytest.approx(0.8 * 1500.0 * math.sqrt(1e-3 / el.pulse_width_s), rel=1e-12)
    tj = checks[("TVS1", "junction temperature")]
    assert tj.limit == pytest.approx(423.15)
    assert tj.value > case.checks.ambient_temperature
    assert tj.margin == pytest.approx((423.15 - tj.value) / (423.15 - case.checks.ambient_temperature))
    # more thermal resistance in the first stage, hotter junction
    tvs = case.clamps[0].elements[0]
    hot_el = replace(tvs, thermal_resistance=(0.5, 0.5, 20.0))
    hot = simulate(replace(case, clamps=(replace(case.clamps[0], elements=(hot_el,)),)))
    assert hot.figures.clamps[0].elements[0].junction_peak_K > el.junction_peak_K


def test_thermal_keys_are_checked(tmp_path):
    text = (CASES / "conveyor_brake.toml").read_text()
    p = tmp_path / "b.toml"
    p.write_text(text.replace('thermal_tau = ["1 ms", "20 ms", "2 s"]', 'thermal_tau = ["1 ms", "20 ms"]'))
    with pytest.raises(ValueError, match="2 time constants for 3 resistances"):
        load_case(p)
    p.write_text(text.replace('thermal_resistance = ["0.05 K/W", "0.5 K/W", "20 K/W"]',
                              'thermal_resistance = ["0.05 K", "0.5 K/W", "20 K/W"]'))
    with pytest.raises(ValueError, match="K/W"):
        load_case(p)


def test_foster_stages_start_and_periodic_square_wave():
    from kickback.models.thermal import foster_periodic_stages, foster_stages

    r, tau = (2.0, 5.0), (1e-4, 3e-3)
    # a stage started at T0 with no power decays as T0·e^(−t/τ) (first-order RC, any circuits text)
    t = np.linspace(0, 5e-3, 2001)
    st = foster_stages(t, np.zeros_like(t), r, tau, start=(3.0, 7.0))
    assert st[0] == pytest.approx(3.0 * np.exp(-t / tau[0]), rel=1e-12, abs=1e-300)
    assert st[1] == pytest.approx(7.0 * np.exp(-t / tau[1]), rel=1e-12)
    # square power wave P on for D·T: each stage at the end of the on part is the geometric series
    # P·R·(1 − a_on)/(1 − a_on·a_off), a = e^(−t/τ) (derived); a repeated time carries the jump exactly
    P, T, D = 10.0, 2e-4, 0.3
    ton = np.linspace(0, D * T, 50)
    toff = np.linspace(D * T, T, 80)
    tt = np.concatenate([ton, toff])
    pp = np.concatenate([np.full(ton.size, P), np.zeros(toff.size)])
    per = foster_periodic_stages(tt, pp, r, tau)
    for k in range(2):
        a_on, a_off = np.exp(-D * T / tau[k]), np.exp(-(1 - D) * T / tau[k])
        assert per[k, ton.size - 1] == pytest.approx(P * r[k] * (1 - a_on) / (1 - a_on * a_off), rel=1e-12)
        assert per[k, 0] == pytest.approx(per[k, -1], rel=1e-12), "periodic"
