"""An unclamped coil ringing with the switch capacitance, against the series RLC's closed form.

Source of every expected value, computed in this file: the underdamped series RLC with the switch
open (C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 8, "step response
of a series RLC circuit"): with y = (i, v − Vs), L·i' = Vs − R·i − v and C·v' = i,

    y(t) = e^{−αt} (A cos ωt + B sin ωt),  α = R/2L,  ω = √(1/LC − α²),

A = y(0), B = (y'(0) + α·y(0))/ω. The oscillating energy W = ½L·i² + ½C·(v − Vs)² obeys
W' = −R·i² (multiply the two equations by i and v − Vs and add), so the energy in the coil
resistance up to t is W(0) − W(t), and the supply delivers Vs·∫i = Vs·C·(v(t) − v(0)).

What is checked are the figures of a long ring (issue 14's lc-ring family): the release time
(the last time |i| is at the release current, DESIGN.md §6), the first current zero, the end of
the run (the oscillating energy below the rest level of kickback.conventions — 0.1 % of the start,
or ½L(I_rel/2)² with a release current, the level both engines follow — then the next current
zero, DESIGN.md §3), and the energies to that end. Invented demo values.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from kickback.case import Case, Coil, Supply, Switch
from kickback.conventions import RING_END_FRACTION
from kickback.simulation import simulate


class Ring:
    """The closed-form ring of an instant ideal switch: i(0) = Vs/R, v(0) = 0."""

    def __init__(self, vs, L, R, C):
        self.vs, self.L, self.R, self.C = vs, L, R, C
        self.alpha = R / (2 * L)
        self.omega = math.sqrt(1.0 / (L * C) - self.alpha**2)
        y0 = np.array([vs / R, -vs])
        dy0 = np.array([[-R / L, -1.0 / L], [1.0 / C, 0.0]]) @ y0
        self.A, self.B = y0, (dy0 + self.alpha * y0) / self.omega

    def y(self, t):
        wt = self.omega * t
        return math.exp(-self.alpha * t) * (self.A * math.cos(wt) + self.B * math.sin(wt))

    def i(self, t):
        return self.y(t)[0]

    def energy(self, t):
        i, dv = self.y(t)
        return 0.5 * self.L * i * i + 0.5 * self.C * dv * dv

    def first_zero(self):
        """First zero of i: i = e^{−αt}(A_i cos ωt + B_i sin ωt) vanishes at ωt = atan2(A_i, −B_i) mod π."""
        th = math.atan2(self.A[0], -self.B[0]) % math.pi
        return th / self.omega

    def release(self, level):
        """Last time |i| = level: the peaks of |i| lie π/ω apart, each e^{−απ/ω} of the one before."""
        a, b = self.A[0], self.B[0]
        w, al = self.omega, self.alpha
        tp = (math.atan2(w * b - al * a, al * b + w * a) % math.pi) / w  # first zero of di/dt
        peak = abs(self.i(tp))
        k = math.floor(math.log(peak / level) / (al * math.pi / w))
        t_k = tp + k * math.pi / w
        while abs(self.i(t_k + math.pi / w)) >= level:  # rounding of the log at the boundary
            t_k += math.pi / w
        while abs(self.i(t_k)) < level:
            t_k -= math.pi / w
        return brentq(lambda t: abs(self.i(t)) - level, t_k, t_k + math.pi / w, xtol=1e-15, rtol=1e-15)

    def end(self, rest, i_small):
        """The run's end: W falls to ``rest`` (W is monotone), then the next zero of i unless |i|
        is already below ``i_small`` there."""
        t_hi = math.log(self.energy(0.0) / rest) / (2 * self.alpha)  # W ≥ its envelope's floor
        lo = 0.0
        while self.energy(t_hi) > rest:
            lo, t_hi = t_hi, 2 * t_hi
        t_rest = brentq(lambda t: self.energy(t) - rest, lo, t_hi, xtol=1e-15, rtol=1e-15)
        if abs(self.i(t_rest)) <= i_small:
            return t_rest
        t0, half = self.first_zero(), math.pi / self.omega
        return t0 + math.ceil((t_rest - t0) / half) * half


@pytest.mark.parametrize(("vs", "L", "R", "C", "rel_frac"), [
    pytest.param(24.0, 0.1, 10.0, 1e-9, 0.2, id="Q1000-release"),
    pytest.param(12.0, 0.05, 2.0, 470e-12, 0.5, id="Q5000-release"),
    pytest.param(48.0, 0.2, 20.0, 2.2e-9, None, id="Q480-no-release"),
])
def test_unclamped_ring_closed_form(vs, L, R, C, rel_frac):
    """Batch engine: release, first zero, end of the ring and the energies to 1e-9 of the closed form."""
    i0 = vs / R
    rel = None if rel_frac is None else rel_frac * i0
    case = Case("ring (demo)", Supply(vs), Coil(L, R, release_current=rel), Switch("ideal", capacitance=C), ())
    f = simulate(case, engine="batch").figures
    ring = Ring(vs, L, R, C)
    e0 = 0.5 * L * i0 * i0  # the capacitor starts at 0 V (ideal switch on)
    rest = RING_END_FRACTION * e0 if rel is None else min(RING_END_FRACTION * e0, 0.5 * L * (0.5 * rel) ** 2)
    t_end = ring.end(rest, RING_END_FRACTION * i0)
    assert f.to_zero_s == pytest.approx(ring.first_zero(), rel=1e-9), "first zero of the coil current"
    if rel is None:
        assert f.release_s is None
    else:
        assert f.release_s == pytest.approx(ring.release(rel), rel=1e-9), "release: last |i| = I_rel"
    assert f.end_time_s == pytest.approx(t_end, rel=1e-9), "end: W below the rest level, then a current zero"
    i_end, dv_end = ring.y(t_end)
    assert f.resistance_energy_J == pytest.approx(ring.energy(0.0) - ring.energy(t_end), rel=1e-9)
    assert f.supply_energy_J == pytest.approx(vs * C * (dv_end + vs), rel=1e-9, abs=1e-12 * e0)
    assert f.left_in_capacitors_J == pytest.approx(0.5 * C * (dv_end + vs) ** 2, rel=1e-9)
    assert abs(f.energy_balance_error) <= 1e-9


@pytest.mark.parametrize(("vs", "L", "R", "C", "rel_frac"), [
    pytest.param(24.0, 0.1, 10.0, 1e-9, 0.2, id="Q1000-release"),
    pytest.param(12.0, 0.05, 2.0, 470e-12, 0.5, id="Q5000-release"),
    pytest.param(24.0, 1.0, 1.0, 18.6e-12, 0.3, id="Q2e5-release"),  # issue 14's 1 H / 1 Ω / 18.6 pF draw
])
def test_detailed_release_on_a_long_ring(vs, L, R, C, rel_frac):
    """Detailed engine: the release time of the same rings to 1e-6 of the closed form (issue 14: its
    closed-form ring was sampled ever more sparsely and the release read off the samples missed the
    last peak of |i| above I_rel, 1.2-1.6 % early; kickback.engine.linring_samples now adds that
    peak and its crossing as samples)."""
    rel = rel_frac * vs / R
    case = Case("ring (demo)", Supply(vs), Coil(L, R, release_current=rel), Switch("ideal", capacitance=C), ())
    f = simulate(case, engine="detailed").figures
    assert f.release_s == pytest.approx(Ring(vs, L, R, C).release(rel), rel=1e-6), "release: last |i| = I_rel"
