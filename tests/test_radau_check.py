"""The residual check installed in scipy's Radau (kickback/engine/radau_check.py) is in effect.

A scipy release that renamed the private function or constants the check relies on would switch
it off without a word; these tests fail then (and the engine refuses to run, see
``patch_applies``). pyproject.toml bounds scipy to the releases they passed on.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import Radau, solve_ivp

from kickback.engine import radau_check
from kickback.errors import SolverError


class _Checked(radau_check.CheckedNewton, Radau):
    pass


def test_the_patch_applies_to_this_scipy():
    assert radau_check.patch_applies() is None


def test_the_check_runs_inside_scipys_step(monkeypatch):
    """The replaced collocation solve is the one scipy's step calls: a spy counts its calls on a
    stiff linear problem whose solution is exp(−1000 t) (closed form)."""
    calls = []
    original = radau_check.checked_collocation

    def spy(*args, **kwargs):
        calls.append(kwargs.get("fresh"))
        return original(*args, **kwargs)

    monkeypatch.setattr(radau_check, "checked_collocation", spy)
    sol = solve_ivp(lambda t, y: -1000.0 * y, (0.0, 0.01), [1.0], method=_Checked, rtol=1e-8, atol=1e-12,
                    jac=lambda t, y: np.array([[-1000.0]]))
    assert sol.success
    assert calls, "scipy's Radau step did not call the checked collocation solve"
    assert sol.y[0, -1] == pytest.approx(np.exp(-10.0), rel=1e-6)


def test_an_unconverged_stage_solution_is_refused():
    """A residual far above the tolerance reads as not converged: stage values of zero for
    y' = −1000 y at y = 1 leave the collocation residual h·f ≫ tol (Hairer & Wanner, §IV.8)."""
    from scipy.integrate._ivp import radau as r
    from scipy.linalg import lu_factor, lu_solve

    fun = lambda t, y: -1000.0 * y  # noqa: E731
    y, h = np.array([1.0]), 1e-3
    J = np.array([[-1000.0]])
    lu_real = lu_factor(np.eye(1) * r.MU_REAL / h - J)
    lu_cplx = lu_factor(np.eye(1) * r.MU_COMPLEX / h - J)

    def frozen(*args):  # an "iteration" that reports convergence without moving
        return True, 1, np.zeros((3, 1)), 0.0

    saved = radau_check._ORIGINAL
    radau_check._ORIGINAL = frozen
    try:
        ok, *_ = radau_check.checked_collocation(fun, 0.0, y, h, np.zeros((3, 1)), np.array([1e-9]), 1e-6,
                                                 lu_real, lu_cplx, lu_solve)
    finally:
        radau_check._ORIGINAL = saved
    assert ok is False


def test_the_engine_refuses_a_scipy_the_check_cannot_enter(monkeypatch):
    monkeypatch.setattr(radau_check, "_WHY_NOT", "scipy 9.9's Radau lacks TI: kickback's residual check ...")
    with pytest.raises(SolverError, match="residual check"):
        solve_ivp(lambda t, y: -y, (0.0, 1.0), [1.0], method=_Checked)
