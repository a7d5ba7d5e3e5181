"""Figures (kickback.figures): crossing and duration helpers, release time, on-state findings.

Expected values are computed here: the helpers on synthetic signals with a known answer (linear
ramps, a triangle wave from scipy.signal.sawtooth whose time above a level is analytic); the
simulated release time from the first-order RL decay against a constant clamp voltage,
i(t) = (i0 + Vc/R)·e^{−tR/L} − Vc/R (C. K. Alexander and M. N. O. Sadiku, Fundamentals of
Electric Circuits, ch. 7); the on-state clamp current from the DC circuit solved by hand (nodal
analysis, the same book ch. 3). All component values are invented.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
from scipy import signal

from kickback import simulate
from kickback.case import Case, Checks, Clamp, Coil, Element, Supply, Switch
from kickback.figures import _duration_above, first_crossing_below


def _close(got, want, rtol, what, atol=0.0):
    assert got is not None, f"{what}: no value reported (expected {want:.10g})"
    got, want = float(got), float(want)
    assert abs(got - want) <= max(rtol * abs(want), atol), (
        f"{what}: got {got:.12g}, expected {want:.12g} "
        f"(error {abs(got - want):.3g}, allowed rtol {rtol:g}" + (f", atol {atol:g}" if atol else "") + ")")


# ============================================================================ first_crossing_below
def test_crossing_of_a_falling_ramp():
    """x = 1 − t on a coarse grid falls below 0.25 at t = 0.75 (derived; linear, so exact)."""
    t = np.linspace(0.0, 1.0, 9)
    _close(first_crossing_below(t, 1.0 - t, 0.25), 0.75, 1e-14, "crossing of a ramp")
    _close(first_crossing_below(t, 1.0 - t, 0.3), 0.7, 1e-14, "crossing between samples")


def test_crossing_is_the_last_fall():
    """A signal that dips below, rises again and then falls: the last fall counts (DESIGN §6:
    'stays below'). Piecewise linear through the samples, crossing of 0.5 at 2.5 (derived)."""
    t = np.array([0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0])
    x = np.array([1.0, 0.2, 0.1, 0.9, 1.0, 0.0, 0.0])
    _close(first_crossing_below(t, x, 0.5), 2.5, 1e-14, "last fall below 0.5")


def test_crossing_uses_magnitude():
    """A negative (ringing) current counts by its magnitude: −1 → 0 crosses |x| = 0.4 at 0.6 (derived)."""
    t = np.linspace(0.0, 1.0, 5)
    _close(first_crossing_below(t, t - 1.0, 0.4), 0.6, 1e-14, "crossing of |x|")


def test_crossing_of_a_sampled_exponential():
    """e^{−t/τ} sampled finely reaches 0.1 at τ·ln 10 (derived); linear interpolation between
    samples 1e-4·τ apart errs by ≲ Δt²/(8τ)."""
    tau = 2e-3
    t = np.linspace(0.0, 10 * tau, 100_001)
    _close(first_crossing_below(t, np.exp(-t / tau), 0.1), tau * math.log(10.0), 1e-8, "exponential crossing")


def test_no_crossing_when_the_signal_ends_above():
    """Still above the level at the last sample: no crossing (DESIGN §6: a time that does not occur is None)."""
    t = np.linspace(0.0, 1.0, 5)
    assert first_crossing_below(t, 2.0 - t, 0.5) is None


# ============================================================================ _duration_above
def _triangle(periods, per_ramp, rng):
    """Triangle wave ±1 with period 1 (scipy.signal.sawtooth, width 0.5) sampled at its corners
    and zero crossings plus random points between them, so that linear interpolation is exact."""
    corners = np.arange(0.0, periods + 1e-12, 0.25)
    inner = rng.uniform(0.0, periods, size=periods * 2 * per_ramp)
    t = np.unique(np.concatenate([corners, inner]))
    return t, signal.sawtooth(2 * np.pi * t, width=0.5)


@pytest.mark.parametrize(("level", "fraction"), [
    pytest.param(0.0, 1.0, id="level-0-always-above"),
    pytest.param(0.3, 0.7, id="level-0.3"),
    pytest.param(0.95, 0.05, id="level-0.95"),
    pytest.param(1.5, 0.0, id="level-above-amplitude"),
])
def test_duration_above_on_a_triangle(level, fraction):
    """A ±1 triangle spends the fraction (1 − a) of its time with |x| > a (derived: each linear
    ramp from −1 to 1 is above |a| over (1 − a) of its length); 5 periods."""
    rng = np.random.default_rng(20240611)
    t, x = _triangle(5, 7, rng)
    _close(_duration_above(t, x, level), 5.0 * fraction, 1e-12, f"time with |x| > {level}", atol=1e-12)


def test_duration_above_with_a_sign_change_inside_a_step():
    """x linear from −1 to +1 over one step is above |x| = 0.3 for 0.7 of it (derived: |x| ≤ 0.3
    for x in [−0.3, 0.3], 0.3 of the step)."""
    _close(_duration_above(np.array([0.0, 1.0]), np.array([-1.0, 1.0]), 0.3), 0.7, 1e-12,
           "time above 0.3 across a zero crossing")


def test_crossing_below_with_a_sign_change_inside_a_step():
    """x = 0.6, −0.6, 0.1 at t = 0, 1, 2 (linear between): |x| drops below 0.5 for good at
    t = 1 + 0.1/0.7 (derived: x = −0.6 + 0.7(t − 1) = −0.5)."""
    got = first_crossing_below(np.array([0.0, 1.0, 2.0]), np.array([0.6, -0.6, 0.1]), 0.5)
    _close(got, 1.0 + 0.1 / 0.7, 1e-12, "last fall below 0.5 after a sign change")


def test_duration_above_single_pulse():
    """A trapezoid 0 → 1 over [0, 1], flat to 2, back to 0 at 3: above 0.5 for 0.5 + 1 + 0.5 = 2 (derived)."""
    t = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    x = np.array([0.0, 1.0, 1.0, 0.0, 0.0])
    _close(_duration_above(t, x, 0.5), 2.0, 1e-14, "trapezoid above 0.5")


def test_duration_above_with_subnormal_steps():
    """A current that decays to subnormal values (1e-310 A and below) after a pulse: the steps
    between them must not overflow the crossing quotient (warnings are errors here), and the time
    above 0.5 is that of the trapezoid, 2 (derived as above), the tail adding nothing."""
    t = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    x = np.array([0.0, 1.0, 1.0, 0.0, 1e-310, 3e-310, -2e-310])
    _close(_duration_above(t, x, 0.5), 2.0, 1e-14, "trapezoid above 0.5, subnormal tail")
    # level 2e-310: the pulse's three steps (3, to 1e-300), half of 1e-310 → 3e-310 and the part
    # 1/5 of 3e-310 → −2e-310 above 2e-310 (derived): 3.7
    _close(_duration_above(t, x, 2e-310), 3.7, 1e-12, "level 2e-310: the tail counts")


# ============================================================================ simulated release time
VS, L, R = 24.0, 0.08, 30.0  # [V], [H], [Ω] — invented coil
VD, VZ = 0.7, 24.0  # [V] constant-drop diode and ideal Zener


def _dz_case(release_current=0.2, release_delay=3e-3, max_release_time=None):
    clamp = Clamp("D1+Z1", "coil", (Element("diode", name="D1", model="constant-drop", forward_voltage=VD),
                                     Element("zener", name="Z1", voltage=VZ)))
    return Case("D+Z release (invented)", Supply(VS),
                Coil(L, R, release_current=release_current, release_delay=release_delay),
                Switch("ideal"), (clamp,), Checks(max_release_time=max_release_time))


def _rl_time_to(i_level, i0, vc):
    """First time i(t) = (i0 + Vc/R)e^{−tR/L} − Vc/R reaches i_level (Alexander & Sadiku ch. 7):
    t = (L/R)·ln((i0 + Vc/R)/(i_level + Vc/R))."""
    return L / R * math.log((i0 + vc / R) / (i_level + vc / R))


@pytest.fixture(scope="module")
def dz_result():
    return simulate(_dz_case())


def _local_step(w, t):
    """Width [s] of the sample interval of the waveforms that holds time t."""
    k = int(np.searchsorted(w.t, t))
    return float(w.t[min(k, w.t.size - 1)] - w.t[max(k - 1, 0)])


def test_release_time_first_order_rl(dz_result):
    """release_s = time for i to fall to 0.2 A + 3 ms delay, i0 = Vs/R = 0.8 A, Vc = Vd + Vz.

    Tolerance (DESIGN §8: times to about one step), here made sharp: a chord of
    i(t) = A e^{−t/τ} − Vc/R over a sample interval Δt lies at most Δt²/8·|i''| above the curve,
    which shifts the crossing by Δt²/(8τ) (derived: |i''|/|i'| = 1/τ; ×1.5 for the change of
    i'' over the interval), plus 1e-6 relative for the solve (DESIGN §4).
    """
    f = dz_result.figures
    i0 = VS / R
    _close(f.initial_current_A, i0, 1e-12, "on-state current of an ideal switch")
    t_cross = _rl_time_to(0.2, i0, VD + VZ)
    step = _local_step(dz_result.waveforms, t_cross)
    tau = L / R
    assert step < 0.1 * tau, f"sample interval {step:.3g} s at the crossing is not small against L/R"
    _close(f.release_s, t_cross + 3e-3, 0.0, "release time", atol=1.5 * step**2 / (8 * tau) + 1e-6 * t_cross)
    assert f.release_s > 3e-3, "the mechanical delay is added"
    assert not f.findings, f"no findings expected for a diode + Zener clamp, got {f.findings}"


def test_release_time_as_accurate_as_the_event_times(dz_result):
    """The release crossing as accurate as the 1 % time, 1e-6 relative (DESIGN §4: figures within
    ~1e-6 of a tight solve; Alexander & Sadiku ch. 7 closed form)."""
    f = dz_result.figures
    i0 = VS / R
    _close(f.to_1_percent_s, _rl_time_to(0.01 * i0, i0, VD + VZ), 1e-6, "time to 1 % (event)")
    _close(f.release_s - 3e-3, _rl_time_to(0.2, i0, VD + VZ), 1e-6, "release crossing")


def test_release_delay_is_added_exactly():
    """Changing release_delay from 3 ms to 0 moves release_s by exactly 3 ms (DESIGN §6)."""
    a = simulate(_dz_case(release_delay=0.0)).figures.release_s
    b = simulate(_dz_case(release_delay=3e-3)).figures.release_s
    _close(b - a, 3e-3, 1e-12, "release delay")


def test_release_current_above_initial_current():
    """release_current 1 A > i0 = 0.8 A: the armature never pulls in, release None and a finding
    (DESIGN §6: a time that does not occur is null); a release limit then fails."""
    res = simulate(_dz_case(release_current=1.0, max_release_time=12e-3))
    f = res.figures
    assert f.release_s is None, f"release time {f.release_s} for a coil that never pulls in"
    assert any("release current" in msg for msg in f.findings), f"findings: {f.findings}"
    row = [c for c in res.checks if c.quantity == "release time"]
    assert len(row) == 1 and row[0].passed is False and row[0].value is None, f"release check: {row}"


# ============================================================================ lone Zener finding
def test_lone_zener_across_coil_conducts_in_on_state():
    """A lone Zener across the coil is forward biased while the switch is on (DESIGN §3).

    derived by nodal analysis at sw (Alexander & Sadiku ch. 3): MOSFET R_on = 0.1 Ω to ground,
    coil R = 30 Ω from +24 V, Zener forward (0.7 V + r_d = 5 Ω) from + to sw:
        (Vs − v)/R + (Vs − 0.7 − v)/r_d = v/R_on.
    The chain current (from sw to +, DESIGN §3 orientation) is −(Vs − 0.7 − v)/r_d.
    """
    ron, rd, vf = 0.1, 5.0, 0.7  # vf: the default forward drop, common practice, no source
    case = Case("lone Zener (invented)", Supply(VS), Coil(L, R), Switch("mosfet", on_resistance=ron),
                (Clamp("Z1", "coil", (Element("zener", name="Z1", voltage=33.0, dynamic_resistance=rd),)),))
    f = simulate(case).figures
    v = (VS / R + (VS - vf) / rd) / (1 / R + 1 / rd + 1 / ron)
    i_zener = (VS - vf - v) / rd
    _close(f.initial_current_A, (VS - v) / R, 1e-12, "coil on-state current")
    _close(f.clamps[0].on_state_current_A, -i_zener, 1e-12, "Zener on-state current (from sw to +)")
    msgs = [m for m in f.findings if "'Z1'" in m and "while the switch is on" in m]
    assert len(msgs) == 1, f"expected one on-state finding for Z1, got {f.findings}"
    stated = re.search(r"conducts ([0-9.eE+-]+) A", msgs[0])
    assert stated, f"the finding states the current in A: {msgs[0]!r}"
    _close(float(stated.group(1)), i_zener, 5e-3, "current stated in the finding (3 digits)")


def test_diode_zener_clamp_does_not_conduct_in_on_state(dz_result):
    """With the series diode the clamp blocks Vs in the on-state: no current, no finding (DESIGN §3)."""
    c = dz_result.figures.clamps[0]
    assert c.on_state_current_A == 0.0, f"on-state clamp current {c.on_state_current_A}"
    _close(c.elements[0].standoff_voltage_V, VS, 1e-12, "diode standoff = Vs (ideal switch at 0 V)")
