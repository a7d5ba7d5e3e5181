"""Where the closed-form ring is sampled (kickback.engine.linring_samples): the times that decide a
figure read off the samples are found on the closed form, however late in the ring they fall.

Reference: the modal sum written in this file and maximised by scipy (Brent's bounded method,
R. P. Brent, Algorithms for Minimization without Derivatives, 1973, ch. 5) around each peak of a
dense evaluation — independent of the module's grid and envelope. Invented demo values.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq, minimize_scalar

from kickback.engine.linring import RingSolution
from kickback.engine.linring_samples import GRID, node_peaks, release_times

W = 2 * math.pi * 1e3  # [rad/s] a 1 ms ring


def _ring(modes, x_inf=0.0):
    """A one-state ring x(t) = x_inf + Re Σ a_k e^{λ_k t} (t0 = 0) as the closed form holds it."""
    lam = np.array([m[0] for m in modes], dtype=complex)
    amp = np.array([[m[1] for m in modes]], dtype=complex)
    z = np.zeros((0,))
    return RingSolution(0.0, np.array([x_inf + float(np.real(amp.sum()))]), 1, np.array([x_inf]), lam, amp,
                        z, np.zeros((0, 1)), np.zeros((0, 1, 1)))


def _x(modes, t, x_inf=0.0):
    return x_inf + sum((a * np.exp(lam * t)).real for lam, a in modes)


def _true_max(modes, t_end):
    """Largest value of the modal sum on [0, t_end]: each maximum of a 200-per-period evaluation
    refined by Brent's method in the offset from its left neighbour."""
    t = np.linspace(0.0, t_end, int(200 * t_end * W / (2 * math.pi)) + 1)
    x = _x(modes, t)
    best = float(np.max(x))
    for k in np.flatnonzero((x[1:-1] >= x[:-2]) & (x[1:-1] >= x[2:])) + 1:
        a, b = t[k - 1], t[k + 1]
        r = minimize_scalar(lambda u, a=a: -_x(modes, a + u), bounds=(0.0, b - a), method="bounded",
                            options={"xatol": 1e-14 * (b - a)})
        best = max(best, -float(r.fun))
    return best


def test_a_late_node_maximum_is_found():
    """A ring below its rest for its first hundred periods: a real mode (−1 at 0, 20 ms) pulls the
    node down while a slow ring of 0.5 decays at 1/s; the highest maximum is ~90 periods in, beyond
    the 20 finely sampled periods (before: only those were searched)."""
    modes = [(-50.0 + 0j, -1.0), (-1.0 + 1j * W, 0.25), (-1.0 - 1j * W, 0.25)]
    t_end = 1.0
    sol = _ring(modes)
    peaks = node_peaks(sol, (np.array([1.0]), 0.0), 0.0, t_end, 2 * math.pi / W / GRID)
    got = max(float(_x(modes, t)) for t in peaks)
    want = _true_max(modes, 0.3)  # the envelope 0.5·e^{−t} is below the maximum after 0.3 s
    assert max(peaks) > 0.05, "the maximum lies ~90 periods in"
    assert got == pytest.approx(want, rel=1e-12, abs=1e-14)


def test_a_maximum_a_hair_after_the_start_or_before_the_end_is_found():
    """The ring may start with the node still rising (the coil current's zero comes just before
    the node's maximum): A·e^{−σs}·cos(ωs − φ) peaks where tan(ωs − φ) = −σ/ω, i.e. at
    s* = (φ − atan(σ/ω))/ω; with s* a hundredth of a grid step the first sample after the start is
    already lower, and the grid's interior test missed the maximum (wide-range case 232: the peak
    7e-4 V, 1.5e-5, low). Likewise the last maximum of a node still climbing (a real mode pulling
    it up) a hundredth of a step before the ring's end."""
    sigma, amp = 50.0, 2.0
    dt = 2 * math.pi / W / GRID
    s_star = 0.01 * dt
    phi = W * s_star + math.atan(sigma / W)
    a = amp * np.exp(-1j * phi) / 2
    modes = [(-sigma + 1j * W, a), (-sigma - 1j * W, np.conj(a))]
    peaks = node_peaks(_ring(modes), (np.array([1.0]), 0.0), 0.0, 0.2, dt)
    assert max(float(_x(modes, t)) for t in peaks) == pytest.approx(float(_x(modes, s_star)), rel=1e-12)
    # climbing: −1 relaxing at 20/s under a ring of 0.01; its 30th maximum (found on the modal sum
    # by Brent's method) a hundredth of a step before the end
    modes = [(-20.0 + 0j, -1.0), (-1.0 + 1j * W, 0.005), (-1.0 - 1j * W, 0.005)]
    t = 30 * 2 * math.pi / W
    r = minimize_scalar(lambda u: -_x(modes, t + u), bounds=(-0.25 * 2 * math.pi / W, 0.25 * 2 * math.pi / W),
                        method="bounded", options={"xatol": 1e-14})
    t_max = t + float(r.x)
    t_end = t_max + 0.01 * dt
    peaks = node_peaks(_ring(modes), (np.array([1.0]), 0.0), 0.0, t_end, dt)
    # the reference's own grid has the same blind spot at its end: the refined maximum counts too
    want = max(_true_max(modes, t_end), -float(r.fun))
    assert max(float(_x(modes, t)) for t in peaks) == pytest.approx(want, rel=1e-12)


def test_the_last_release_peak_between_grid_points():
    """A lightly damped ring whose last |x| maximum at or above the level exceeds it by ~1e-4,
    less than the grid's sampling loss (2 %): that maximum and the crossing after it are the
    times returned; the reference is the closed-form |x| = e^{−αt}|cos ωt| of this ring."""
    alpha, phi = 3.0, 0.1  # the phase puts the maxima between grid points (0.1 of 0.39 rad a step)
    modes = [(-alpha + 1j * W, 0.5 * np.exp(1j * phi)), (-alpha - 1j * W, 0.5 * np.exp(-1j * phi))]
    half = math.pi / W  # x = e^{−αt} cos(ωt + φ)
    n = 137  # the 137th maximum of |x| (ωt = nπ − φ) sits 1e-4 above the level
    want_peak = (n * math.pi - phi) / W  # |cos| = 1 there; e^{−αt} moves the maximum by ~α/ω² ≈ 8e-8 s
    level = math.exp(-alpha * want_peak) * (1 - 1e-4)
    t_end = 2.0
    got = release_times(_ring(modes), 0.0, t_end, 2 * half / GRID, level)
    want_cross = brentq(lambda t: abs(float(_x(modes, t))) - level, want_peak, want_peak + half / 2, xtol=1e-16)
    assert len(got) == 2
    assert got[0] == pytest.approx(want_peak, abs=1e-6)
    assert got[1] == pytest.approx(want_cross, rel=1e-12)
    assert abs(float(_x(modes, got[0]))) >= level
