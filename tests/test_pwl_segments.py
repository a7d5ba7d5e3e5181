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
    assert not seg._cancelling(T)[0]

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
