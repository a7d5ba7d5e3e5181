"""Detailed engine (issue 14): a ring that is over, with a snubber capacitor still draining slowly,
is stepped in strides that grow, not in thousands of short ones.

After the coil current's first zero the engine alternates closed-form attempts of the ring
(:mod:`kickback.engine.linring`) with stretches stepped by Radau. Where a leaky Shockley diode
drains its snubber capacitor at ~I_s for the rest of the run, every attempt was refused and
every stretch was 20 node periods long and took two steps: wide-range case 2352 made 2 145
attempts 17 µs apart (2.1 s CPU), the case below 18 322 (240 000 evaluations). A stretch that
took fewer than ``FEW_STEPS`` steps now doubles the next one.

Reference, written here: the node equations of the invented demo circuit below (coil L, R from
the supply to the switch node; switch capacitance C_sw, ideal switch off at t = 0; across the
coil a Shockley diode in series with C_s, and a resistor R_p), Kirchhoff's laws (C. K. Alexander
and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 6–8) with the diode's law
i_d = I_s·(exp(u/(n·V_T)) − 1) (A. S. Sedra and K. C. Smith, Microelectronic Circuits, ch. 4;
I_s from V_f at I_f, V_T = kT/q at 298.15 K, BIPM SI brochure 2019):

    L·di/dt = V_s − v − R·i
    C_sw·dv/dt = i − i_d(v − V_s − v_c) − (v − V_s)/R_p
    C_s·dv_c/dt = i_d(v − V_s − v_c)

from the on-state (v = 0, i = V_s/R, v_c = −V_s: the diode carries no current at rest), solved
with scipy.integrate.solve_ivp (Radau, rtol 1e-10, analytic Jacobian) to the engine's time bound.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from kickback import load_case, simulate

VS, L, R, CSW, VF, IF, N, CS, RP = 8.0, 3.5e-3, 0.75, 4e-12, 0.45, 4.0, 2.0, 1e-4, 4.0
CASE = f"""
title = "demo: leaky snubber diode draining its capacitor after the ring (demo data)"
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
type = "capacitor"
capacitance = "{CS!r} F"
[[clamp]]
name = "R"
across = "coil"
[[clamp.element]]
type = "resistor"
resistance = "{RP!r} Ω"
"""
K_B, Q_E = 1.380649e-23, 1.602176634e-19  # [J/K], [C] exact (SI 2019)


def _reference(t_end):
    nvt = N * K_B * 298.15 / Q_E
    i_s = IF / math.expm1(VF / nvt)

    def rhs(t, y):
        i, v, vc = y
        d = i_s * math.expm1((v - VS - vc) / nvt)
        return [(VS - v - R * i) / L, (i - d - (v - VS) / RP) / CSW, d / CS]

    def jac(t, y):
        i, v, vc = y
        g = i_s * math.exp((v - VS - vc) / nvt) / nvt
        return [[-R / L, -1.0 / L, 0.0], [1.0 / CSW, (-g - 1.0 / RP) / CSW, g / CSW], [0.0, g / CS, -g / CS]]

    def ev10(t, y):
        return y[0] - 0.1 * VS / R
    ev10.direction = -1

    def ev_peak(t, y):
        return rhs(t, y)[1]
    ev_peak.direction = -1

    sol = integrate.solve_ivp(rhs, (0.0, t_end), [VS / R, 0.0, -VS], method="Radau", rtol=1e-10,
                              atol=[1e-12, 1e-10, 1e-10], jac=jac, events=[ev10, ev_peak])
    assert sol.status == 0, sol.message
    return sol


def test_draining_snubber_is_stepped_in_growing_strides():
    res = simulate(load_case(CASE))
    w, f = res.waveforms, res.figures
    # before: 240 000 evaluations (18 322 closed-form attempts); now ~2 300
    assert w.n_rhs < 20_000
    sol = _reference(f.end_time_s)
    t10, peaks = sol.t_events
    v_peaks = [float(y[1]) for y in sol.y_events[1]]
    # within the engine's tolerance (rtol 1e-5)
    assert f.peak_voltage_V == pytest.approx(max(v_peaks), rel=1e-5)
    assert f.to_10_percent_s == pytest.approx(float(t10[0]), rel=1e-5)
    # the run ends at its time bound with the capacitor still draining through the diode's
    # reverse current (I_s ≈ 1.3 mA: ~3.6 V over the run): its voltage and the node's there
    c = w.circuit
    k = next(iter(c.icap.values()))
    assert w.y_end[k] == pytest.approx(float(sol.y[2, -1]), rel=1e-5)
    assert w.y_end[1] == pytest.approx(float(sol.y[1, -1]), rel=1e-5)
    # the capacitor really drains over the run (the stretches past the ring matter)
    assert abs(float(sol.y[2, -1]) - float(np.max(sol.y[2]))) > 0.1


class _FakeRunner:
    """A runner whose every stretch reaches its end in one step (no ring left to resolve)."""

    def __init__(self):
        self.t, self.phases, self.stretches = 0.0, [], []

    def run(self, name, t_stop, events, record):
        from types import SimpleNamespace

        self.stretches.append(t_stop - self.t)
        self.phases.append(SimpleNamespace(t_steps=[self.t, t_stop]))
        self.t = t_stop
        return SimpleNamespace(status=0)


def test_stride_doubles_the_last_stretch_not_the_attempts_length():
    # the attempts first ask for a few picoseconds (the node leaving a knee), then for twenty ring
    # periods: the first long stretch is the twenty periods, not 2⁸ times them (wide-range case
    # 5834 stepped 0.06 s of a 12 kHz ring in one go and ran out of evaluations); from there a
    # stretch of few steps doubles the next (the rule above)
    from kickback.engine.ringsteps import stepped_ring

    asks = [1.8e-11] * 8 + [1.6e-3] * 4
    runner = _FakeRunner()
    it = iter(asks)
    stepped_ring(runner, lambda: (False, False, next(it)), [], None, t_bound=1.0,
                 ended=lambda: len(runner.stretches) == len(asks))
    got = runner.stretches
    for k in range(1, 8):  # the short ones double among themselves
        assert got[k] == pytest.approx(max(1.8e-11, 2.0 * got[k - 1]), rel=1e-12)
    assert got[8] == pytest.approx(1.6e-3, rel=1e-12)
    assert got[9:] == pytest.approx([3.2e-3, 6.4e-3, 1.28e-2], rel=1e-12)
