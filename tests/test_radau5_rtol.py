"""kickback's Radau IIA (kickback.engine.radau5): a relative tolerance per component and the dense
output callable like scipy's OdeSolution, against closed forms, scipy.linalg.expm and scipy's
solve_ivp(method="Radau") run tight on the same equations."""

from __future__ import annotations

import numpy as np
import pytest
from radau5_problems import M_LIN, linear, linear_jac, rober, rober_jac, scipy_radau
from scipy.linalg import expm

from kickback.engine.radau5 import IntegratorArgumentError, njit_jac, njit_rhs, solve
from kickback.engine.radau5_dense import DenseSolution

K = 1e3  # stiffness of the forced component


@njit_rhs
def forced(t, y, p):  # y0' = -y0 (slow), y1' = -K (y1 - cos t) (stiff, forced)
    out = np.empty(2)
    out[0] = -y[0]
    out[1] = -p[0] * (y[1] - np.cos(t))
    return out


@njit_jac
def forced_jac(t, y, p):
    out = np.zeros((2, 2))
    out[0, 0] = -1.0
    out[1, 1] = -p[0]
    return out


def forced_exact(t, y1_0=0.0):
    # closed form of y' = -K (y - cos t): y = (K² cos t + K sin t)/(K² + 1) + (y(0) − K²/(K²+1)) e^{−Kt}
    k2 = K * K
    return np.array([np.exp(-t), (k2 * np.cos(t) + K * np.sin(t)) / (k2 + 1) + (y1_0 - k2 / (k2 + 1)) * np.exp(-K * t)])


def test_each_component_meets_its_own_relative_tolerance():
    # closed form above; the error of each component follows its own rtol (atol far below)
    span, y0 = (0.0, 5.0), [1.0, 0.0]
    tight = solve(forced, forced_jac, span, y0, [K], rtol=[1e-11, 1e-3], atol=1e-14)
    loose = solve(forced, forced_jac, span, y0, [K], rtol=[1e-3, 1e-11], atol=1e-14)
    both = solve(forced, forced_jac, span, y0, [K], rtol=1e-11, atol=1e-14)
    for r in (tight, loose, both):
        assert r.status == 0, r.message
    err_t = np.abs(tight.y - forced_exact(tight.t)).max(axis=1)
    err_l = np.abs(loose.y - forced_exact(loose.t)).max(axis=1)
    assert err_t[0] < 1e-9 and err_l[1] < 1e-9  # the tight component, within 100× its rtol
    # the loose one is not held to the tight tolerance: fewer steps than all components tight
    assert tight.counts["n_accepted"] < 0.7 * both.counts["n_accepted"]
    assert loose.counts["n_accepted"] < 0.9 * both.counts["n_accepted"]
    assert err_t[1] < 1e-2 and err_l[0] < 1e-2


def test_equal_entries_are_the_scalar_tolerance():
    # a vector of equal entries is the scalar rtol (same steps, same numbers), and both follow
    # scipy's Radau run tight on Robertson's problem (solve_ivp, rtol 1e-10)
    y0 = [1.0, 0.0, 0.0]
    a = solve(rober, rober_jac, (0.0, 40.0), y0, rtol=1e-7, atol=1e-12)
    b = solve(rober, rober_jac, (0.0, 40.0), y0, rtol=np.full(3, 1e-7), atol=1e-12)
    np.testing.assert_array_equal(a.t, b.t)
    np.testing.assert_array_equal(a.y, b.y)
    ref = scipy_radau(rober, rober_jac, (0.0, 40.0), y0, np.zeros(0), 1e-10, 1e-14)
    np.testing.assert_allclose(b.y[:, -1], ref.y[:, -1], rtol=1e-5, atol=1e-11)


def test_rtol_vector_of_wrong_length_or_sign_is_refused():
    with pytest.raises(IntegratorArgumentError, match="rtol"):
        solve(rober, rober_jac, (0.0, 1.0), [1.0, 0.0, 0.0], rtol=[1e-6, 1e-6])
    with pytest.raises(IntegratorArgumentError, match="rtol"):
        solve(rober, rober_jac, (0.0, 1.0), [1.0, 0.0, 0.0], rtol=[1e-6, 0.0, 1e-6])


def test_dense_output_shapes_and_values_like_scipy_odesolution():
    # y' = M y, exact expm(M t) y0 (scipy.linalg.expm); shapes as scipy's OdeSolution: a scalar
    # time gives (n,), an array of m times (n, m)
    y0 = np.array([1.0, 1.0, 1.0])
    r = solve(linear, linear_jac, (0.0, 2.0), y0, M_LIN.ravel(), rtol=1e-9, atol=1e-13)
    d = r.dense_output()
    ref = scipy_radau(linear, linear_jac, (0.0, 2.0), y0, M_LIN.ravel(), 1e-9, 1e-13, dense_output=True)
    tq = np.array([0.0, 3e-7, 1e-4, 0.37, 1.5, 2.0])
    assert d(0.37).shape == ref.sol(0.37).shape == (3,)
    assert d(tq).shape == ref.sol(tq).shape == (3, tq.size)
    exact = np.column_stack([expm(M_LIN * x) @ y0 for x in tq])
    np.testing.assert_allclose(d(tq), exact, rtol=1e-6, atol=1e-11)
    np.testing.assert_allclose(np.column_stack([d(x) for x in tq]), d(tq), rtol=0, atol=0)
    # a step end reads the step's end state
    np.testing.assert_allclose(d(r.t), r.y, rtol=1e-12, atol=1e-15)


def test_replace_tail_joins_a_stretch_integrated_again():
    # the last step integrated again from its start; the joined solution follows the closed form
    y0 = np.array([1.0, 1.0, 1.0])
    r = solve(linear, linear_jac, (0.0, 1.0), y0, M_LIN.ravel(), rtol=1e-8, atol=1e-12)
    d = r.dense_output()
    k = d.n_steps - 1
    again = solve(linear, linear_jac, (r.t[k], 1.0), r.y[:, k], M_LIN.ravel(), rtol=1e-10, atol=1e-14)
    j = d.replace_tail(k, again.dense_output())
    assert j.n_steps == k + again.dense_output().n_steps and j.ts[-1] == 1.0
    tq = np.linspace(0.5 * (r.t[k] + r.t[k + 1]), 1.0, 5)
    exact = np.column_stack([expm(M_LIN * x) @ y0 for x in tq])
    np.testing.assert_allclose(j(tq), exact, rtol=1e-7, atol=1e-12)
    with pytest.raises(ValueError, match="cannot join"):
        d.replace_tail(k - 1, again.dense_output())


def test_dense_solution_of_no_step_is_the_start():
    d = DenseSolution([0.0], np.array([[1.0], [2.0]]), [0.0], np.zeros((1, 3, 2)))
    np.testing.assert_array_equal(d(0.0), [1.0, 2.0])
    assert d(np.array([0.0, 0.0])).shape == (2, 2)
