"""A residual check on the Newton iteration of scipy's Radau IIA.

scipy's simplified Newton iteration stops when its corrections become small and contract. With
a Jacobian far from the true one — kept from a point where a clamp conducted (conductance
~1/r_min) while the node has since left the clamp's threshold (conductance 0) — the corrections
are tiny from the start, and an unconverged stage solution is accepted: the step then follows a
slope tens of times off the true one, and the energy ledger no longer closes. Here, after the
iteration reports convergence, the collocation equations are evaluated once more at the final
stage values; a residual larger than the local error tolerance counts as not converged, so that
the solver refreshes the Jacobian or halves the step as it does for any failed iteration.

References
----------
E. Hairer and G. Wanner, Solving Ordinary Differential Equations II, 2nd ed., Springer 1996,
§IV.8 (the simplified Newton iteration of implicit Runge–Kutta methods and its stopping rule).
"""

from __future__ import annotations

import numpy as np
from scipy.integrate._ivp import radau as _radau

from kickback.errors import SolverError

_ORIGINAL = _radau.solve_collocation_system
_NORM = _radau.norm
#: the private names of scipy's Radau module the check reads (pyproject bounds scipy to the
#: releases this was tested with; :func:`patch_applies` checks them on every run)
_NEEDED = ("solve_collocation_system", "C", "TI", "TI_REAL", "TI_COMPLEX", "MU_REAL", "MU_COMPLEX", "norm")
#: residual of the collocation equations (in units of the error scale) accepted as converged
RESIDUAL_LIMIT = 1.0


def safe_norm(x):
    """scipy's RMS norm of ``x`` without overflow: a vector of entries beyond ~1e154 (the
    correction of a diverging Newton iterate, whose trial state met a steep law) is scaled by
    its largest entry before the squares are summed, so the norm is the exact large number
    (and the iteration is read as diverging) instead of a floating-point overflow."""
    x = np.asarray(x)
    if x.size == 0:
        return 0.0
    m = np.max(np.abs(x))
    if not (np.isfinite(m) and m > 1e150):  # inf or NaN: no finite square overflows there
        return _NORM(x)
    return m * _NORM(x / m)


def checked_collocation(fun, t, y, h, Z0, scale, tol, LU_real, LU_complex, solve_lu, fresh=False, rows=None):
    """scipy's ``solve_collocation_system`` followed by a residual check (same signature, plus
    ``fresh``: the Jacobian was evaluated at this step's start, and ``rows``: the states checked
    then; None checks none).

    A Jacobian kept from an earlier step is checked on every state. A fresh one is the step
    start's, accurate there, and on a stiff state a residual far above the tolerance may stand
    for an error far below it (the correction it calls for is the residual divided by
    1 + h·|λ|): those states are not checked. But a law that switches inside the step (a Zener
    letting go as a ring swings back, wide-range case 4313) leaves the iteration with
    corrections that are tiny from the start, as a kept Jacobian does; unchecked, such a step
    held a 3.5 pF node at −0.7 V while the coil current reversed, and put −4e-12 J into the
    Zener's energy (1.2 % low against a tight solve). ``rows`` are states no stiffness hides:
    the energies, integrals of the powers that never feed back, whose collocation residual is
    their error itself (the energy at the stage values less the stage's integral of the power
    at the final stage states): the iteration's last moves of the node show there. Refused,
    scipy refreshes the Jacobian or halves the step."""
    converged, n_iter, Z, rate = _ORIGINAL(fun, t, y, h, Z0, scale, tol, LU_real, LU_complex, solve_lu)
    if not converged or (fresh and rows is None):
        return converged, n_iter, Z, rate
    F = np.array([fun(t + c * h, y + z) for c, z in zip(_radau.C, Z, strict=True)])
    if not np.all(np.isfinite(F)):
        return False, n_iter, Z, rate
    W = _radau.TI.dot(Z)
    r_real = (h / _radau.MU_REAL) * F.T.dot(_radau.TI_REAL) - W[0]
    r_cplx = (h / _radau.MU_COMPLEX) * F.T.dot(_radau.TI_COMPLEX) - (W[1] + 1j * W[2])
    if fresh:
        r_real, r_cplx, scale = r_real[rows], r_cplx[rows], scale[rows]
    res = max(safe_norm(r_real / scale), safe_norm(np.abs(r_cplx) / scale))
    return bool(res <= RESIDUAL_LIMIT), n_iter, Z, rate


def patch_applies() -> str | None:
    """Why the residual check cannot be installed in this scipy (None when it can).

    The check replaces the module-level ``solve_collocation_system`` that scipy's
    ``Radau._step_impl`` calls, and reads the method's constants; a scipy release that renames
    them would silently switch the check off, so the engine refuses to run instead.
    """
    import scipy

    missing = [name for name in _NEEDED if not hasattr(_radau, name)]
    if missing:
        return (f"scipy {scipy.__version__}'s Radau lacks {', '.join(missing)}: kickback's residual check "
                "cannot be installed (install a scipy release kickback supports, see pyproject.toml)")
    if "solve_collocation_system" not in _radau.Radau._step_impl.__code__.co_names:
        return (f"scipy {scipy.__version__}'s Radau step no longer calls solve_collocation_system: "
                "kickback's residual check cannot be installed")
    return None


_WHY_NOT = patch_applies()


class CheckedNewton:
    """Mixin for a Radau subclass: every Newton iteration that reports convergence ends with the
    residual check: on every state with a Jacobian kept from an earlier step, on the states
    ``fresh_rows`` (an index or slice; None: none) with the step start's own
    (:func:`checked_collocation`)."""

    def __init__(self, *args, fresh_rows=None, **kwargs):
        if _WHY_NOT is not None:
            raise SolverError(_WHY_NOT)
        super().__init__(*args, **kwargs)
        #: states checked on a step whose Jacobian is its own start's (see checked_collocation)
        self.fresh_rows = fresh_rows
        jac = self.jac
        self._jac_at = self.t
        if callable(jac):
            def recorded(t, y, f=None):
                self._jac_at = t
                return jac(t, y, f) if f is not None else jac(t, y)
            self.jac = recorded

    def _step_impl(self):
        def checked(*args):
            return checked_collocation(*args, fresh=self._jac_at == args[1], rows=self.fresh_rows)

        _radau.solve_collocation_system = checked
        _radau.norm = safe_norm
        try:
            return super()._step_impl()
        finally:
            _radau.solve_collocation_system = _ORIGINAL
            _radau.norm = _NORM
