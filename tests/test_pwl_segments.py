"""Segment-level checks of the batch engine's closed forms against scipy.

A two-state segment of a coil clamped by a diode + Zener across a node capacitance (invented
demo values: 80 mH, 30 Ω, 24 V supply, 24.7 V clamp with 1.5 Ω, 300 pF) has a node mode of
about a nanosecond and a coil decay of milliseconds. The reference is the textbook modal
solution x(τ) = p + Σ c_k e^{λ_k τ} v_k (Ogata, Modern Control Engineering, ch. 9), its
eigenvalues, eigenvectors and coefficients computed by mpmath at 50 digits (a matrix
exponential by scaling and squaring loses ~1e-10 at τ·|λ| ~ 1e6). Against it: the segment's
state, its moments ∫ξξᵀ (adaptive quadrature, scipy.integrate.quad_vec) and its first event (a
bracketing root finder, scipy.optimize.brentq).
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest
from scipy.integrate import quad_vec
from scipy.optimize import brentq

from kickback.engine.batch import _modes_of
from kickback.engine.pwl_build import build_modal
from kickback.engine.pwl_quadrature import quadrature_moments
from kickback.engine.pwl_roots import Events, first_event

L, R, VS, VCL, RD, C = 0.08, 30.0, 24.0, 24.7, 1.5, 300e-12


def _system(i0=0.8):
    """x = (i, v): L·i' = Vs − v − R·i; C·v' = i − (v − Vs − Vcl)/r_d (the clamp conducting)."""
    A = np.array([[-R / L, -1.0 / L], [1.0 / C, -1.0 / (RD * C)]])
    b0 = np.array([VS / L, (VS + VCL) / (RD * C)])
    x0 = np.array([i0, VS + VCL + RD * i0 * 0.999])  # a little off the slow manifold: both modes present
    return A, b0, x0


def _reference_state(A, b0, x0, tau):
    """x(τ) from the modal solution (eigen-decomposition in mpmath, evaluated in floats)."""
    return _modal(tuple(A.ravel()), tuple(b0), tuple(x0))(tau)


_MODAL = {}


def _modal(a, b, x):
    if (a, b, x) not in _MODAL:
        with mpmath.workdps(50):
            A = mpmath.matrix([[a[0], a[1]], [a[2], a[3]]])
            p = -(mpmath.inverse(A) * mpmath.matrix(list(b)))
            lam, V = mpmath.eig(A)
            c = mpmath.inverse(V) * (mpmath.matrix(list(x)) - p)
            pf = np.array([float(p[k]) for k in range(2)])
            lf = np.array([float(mpmath.re(v)) for v in lam])
            vf = np.array([[float(mpmath.re(V[r, k] * c[k])) for k in range(2)] for r in range(2)])

        def state(t):
            return pf + vf @ np.exp(lf * t)

        _MODAL[(a, b, x)] = state
    return _MODAL[(a, b, x)]


def _segment():
    A, b0, x0 = _system()
    seg = build_modal(x0[None], A[None], b0[None], np.zeros((1, 2)), [0, 1])
    return seg, A, b0, x0


@pytest.mark.parametrize("tau", [0.0, 2e-10, 3e-9, 1e-6, 1e-3, 2.5e-3])
def test_fast_real_pair_state_matches_the_matrix_exponential(tau):
    seg, A, b0, x0 = _segment()
    got = seg.state(np.array([tau]))[0]
    ref = _reference_state(A, b0, x0, tau)
    # scale of each state over the segment (|i| ≤ 1 A, v ≈ 50 V)
    assert np.all(np.abs(got - ref) <= 1e-12 * np.array([1.0, 50.0]))


def test_fast_real_pair_moments_in_closed_form_match_quadrature():
    seg, A, b0, x0 = _segment()
    T = np.array([2.5e-3])
    # the closed form is what is checked here: a nanosecond node mode under a millisecond decay
    # is not a cancellation (its sinh part is bounded by 1/w, not by T)
    assert not seg._cancelling(T, seg._closed_moments(T))[0]

    def xixi(t):
        xi = np.append(_reference_state(A, b0, x0, t), [1.0, t])
        return np.outer(xi, xi)

    # adaptive quadrature split where the node mode lives and where the decay does
    ref = sum(quad_vec(xixi, a, b, epsrel=1e-13, epsabs=0.0)[0]
              for a, b in ((0.0, 2e-8), (2e-8, 1e-5), (1e-5, T[0])))
    got = seg.moments(T)[0]
    d = np.sqrt(np.abs(np.diag(ref)))
    assert np.all(np.abs(got - ref) <= 1e-10 * np.outer(d, d))


def _events(seg, vth, t_end):
    """Two events on ξ = (i, v, 1, τ): the node reaching ``vth`` from above (vth − v, fires as v
    falls through it) and the end of a time window ``τ − t_end``."""
    E = np.zeros((1, 2, 3, 4))
    E[0, 0, 0] = [0.0, -1.0, vth, 0.0]
    E[0, 1, 0] = [0.0, 0.0, -t_end, 1.0]
    return Events(seg, E)


@pytest.mark.parametrize("vth", [VS + VCL + 0.5, VS + VCL + 0.05])
def test_first_event_before_a_time_window_ends(vth):
    # the node falls from Vs + Vcl + r_d·i0 towards Vs + Vcl as the current decays; the window
    # ends later than the crossing, so the crossing must be found (the window bounds the scan)
    seg, A, b0, x0 = _segment()
    t_end = 2.4e-3
    ev = _events(seg, vth, t_end)
    exps, oscs = _modes_of(seg)
    tau, fired = first_event(ev, np.array([1.0]), exps, oscs, np.zeros(1))
    ref = brentq(lambda t: vth - _reference_state(A, b0, x0, t)[1], 1e-7, t_end, xtol=1e-18, rtol=1e-15)
    assert tau[0] == pytest.approx(ref, rel=1e-11)
    assert fired[0].tolist() == [True, False]


def test_time_window_ends_first_when_the_crossing_is_later():
    seg, _, _, _ = _segment()
    t_end = 1e-4  # the node is still above the threshold then
    ev = _events(seg, VS + VCL + 0.05, t_end)
    exps, oscs = _modes_of(seg)
    tau, fired = first_event(ev, np.array([1.0]), exps, oscs, np.zeros(1))
    assert tau[0] == t_end  # a root in τ alone is exact
    assert fired[0].tolist() == [False, True]


# ------------------------------------------------------------ a lightly damped ring, in closed form
# An unclamped coil ringing with the switch capacitance after the switch has opened (invented demo
# values: 1 H, 1 Ω, 15 pF, 5 V; Q = √(L/C)/R ≈ 2.6e5): the series RLC's underdamped response
# x(t) = p + e^{−αt}(A cos ωt + B sin ωt), α = R/2L, ω = √(1/LC − α²) (C. K. Alexander and
# M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 8, "source-free series RLC").
RL, RR, RC, RVS, RV1 = 1.0, 1.0, 15e-12, 5.0, 2e4


def _ring():
    """(A, b0, x0) of the ring x = (i, v): L·i' = Vs − R·i − v, C·v' = i, from a current zero."""
    A = np.array([[-RR / RL, -1.0 / RL], [1.0 / RC, 0.0]])
    return A, np.array([RVS / RL, 0.0]), np.array([0.0, RVS + RV1])


def _ring_moments(T):
    """∫0^T ξξᵀ dτ, ξ = (i, v, 1, τ), in mpmath at 40 digits from the closed form: each entry of
    ξ is p + Re(c·e^{λτ}) (or 1, τ), so every product is a sum of τ^k e^{zτ}, k ≤ 2, whose
    integrals are elementary: ∫0^T τ^k e^{zτ} dτ = [τ^k e^{zτ}/z]_0^T − (k/z)∫0^T τ^{k−1} e^{zτ} dτ."""
    with mpmath.workdps(40):
        alpha = mpmath.mpf(RR) / (2 * RL)
        omega = mpmath.sqrt(1 / (mpmath.mpf(RL) * RC) - alpha**2)
        lam = -alpha + 1j * omega
        y0 = [mpmath.mpf(0), mpmath.mpf(RV1)]  # x0 − p, p = (0, Vs)
        Ay = [-RR / mpmath.mpf(RL) * y0[0] - y0[1] / RL, y0[0] / mpmath.mpf(RC)]
        # Re(c e^{λτ}): Re c = y0 and −α·Re c − ω·Im c = A·y0
        c = [y0[k] - 1j * (Ay[k] + alpha * y0[k]) / omega for k in range(2)]
        p = [mpmath.mpf(0), mpmath.mpf(RVS)]
        T = mpmath.mpf(T)

        def integral(k, z):
            if z == 0:
                return T ** (k + 1) / (k + 1)
            e = mpmath.exp(z * T)
            out = (e - 1) / z
            for j in range(1, k + 1):
                out = T**j * e / z - j / z * out
            return out

        # each ξ entry as {(k, z): coefficient} for τ^k e^{zτ}
        xi = []
        for n in range(2):
            xi.append({(0, 0): p[n], (0, lam): c[n] / 2, (0, mpmath.conj(lam)): mpmath.conj(c[n]) / 2})
        xi += [{(0, 0): mpmath.mpf(1)}, {(1, 0): mpmath.mpf(1)}]
        M = np.zeros((4, 4))
        for r in range(4):
            for s in range(4):
                tot = 0
                for (k1, z1), c1 in xi[r].items():
                    for (k2, z2), c2 in xi[s].items():
                        tot += c1 * c2 * integral(k1 + k2, z1 + z2)
                M[r, s] = float(mpmath.re(tot))
    return M


def test_long_light_ring_moments_in_closed_form():
    """A ring of ~3e5 periods (7 s at α = 0.5 /s) whose current is at a zero at τ = 0, T/2 and
    T: its moments are the closed form's, to 1e-10 of the mpmath reference. (A size read from
    those three samples alone took it for a cancellation and sent it to a quadrature of more
    than 10⁵ panels, which raised: issue 14, tests/test_batch.py's lc-ring property.)"""
    A, b0, x0 = _ring()
    seg = build_modal(x0[None], A[None], b0[None], np.zeros((1, 2)), [0, 1])
    omega = np.sqrt(1.0 / (RL * RC) - (RR / (2 * RL)) ** 2)
    T = np.array([2 * round(7.0 * omega / (2 * np.pi) / 2) * 2 * np.pi / omega])  # an even number of periods
    i_max = RV1 / (omega * RL)
    assert np.max(np.abs(seg.state(T[:, None] * np.array([[0.0, 0.5, 1.0]]))[0, :, 0])) < 1e-6 * i_max
    got = seg.moments(T)[0]
    ref = _ring_moments(T[0])
    d = np.sqrt(np.abs(np.diag(ref)))
    assert np.all(np.abs(got - ref) <= 1e-10 * np.outer(d, d)), np.abs(got - ref) / np.outer(d, d)


def test_quadrature_gives_up_on_one_case_alone():
    """The graded quadrature over the same ring: a case that needs more than 10⁵ panels (7 s of
    a 24 µs period) gets NaN moments, which the batch engine turns into that variant's failure,
    while a short case of the same batch keeps moments equal to the mpmath reference."""
    A, b0, x0 = _ring()
    seg = build_modal(np.array([x0, x0]), np.array([A, A]), np.array([b0, b0]), np.zeros((2, 2)), [0, 1])
    T = np.array([7.0, 2e-3])
    got = quadrature_moments(seg, T, seg.rates())
    assert np.all(np.isnan(got[0])), "the long case is given up, not integrated part way"
    ref = _ring_moments(T[1])
    d = np.sqrt(np.abs(np.diag(ref)))
    assert np.all(np.abs(got[1] - ref) <= 1e-10 * np.outer(d, d))
