"""Radau IIA (3 stages, order 5) for stiff ODEs, compiled with numba: kickback's own integrator.

The user's right-hand side, Jacobian and event functions take ``(t, y, params)`` — float64
arrays, ``params`` a 1-D parameter array — and are compiled with :func:`njit_rhs`,
:func:`njit_jac` and :func:`njit_events` (fixed signatures). The stepping loop receives them as
first-class function values, so ONE compiled loop serves every problem and is cached on disk; a
circuit becomes one ``rhs`` that reads its elements from ``params``. ``compiled=False`` runs the
same loop as plain Python (for debugging; the functions' ``.py_func`` are called; the small
numeric helpers stay compiled); ``NUMBA_DISABLE_JIT=1`` makes everything plain Python.

The algorithm, its sources and its constants are described in ``radau5_core`` and
``radau5_tableau``; this module checks the arguments, compiles, and wraps the outcome in a
:class:`Radau5Result` whose ``status``/``message`` say why a run stopped (never a silent NaN).

References
----------
E. Hairer and G. Wanner, Solving Ordinary Differential Equations II, 2nd ed., Springer 1996,
§IV.5, §IV.8.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np
from numba import types

from kickback.engine import radau5_core as _core
from kickback.engine.radau5_dense import DenseSolution
from kickback.engine.radau5_jit import jit
from kickback.engine.radau5_tableau import dense_eval
from kickback.errors import KickbackError

RHS_SIGNATURE = types.float64[::1](types.float64, types.float64[::1], types.float64[::1])
JAC_SIGNATURE = types.float64[:, ::1](types.float64, types.float64[::1], types.float64[::1])
EVENTS_SIGNATURE = RHS_SIGNATURE
_LOOP_SIGNATURE = (types.FunctionType(RHS_SIGNATURE), types.FunctionType(JAC_SIGNATURE),
                   types.FunctionType(EVENTS_SIGNATURE), types.float64, types.float64, types.float64[::1],
                   types.float64[::1], types.float64[::1], types.float64[::1], types.float64, types.float64,
                   types.int64, types.int64[::1], types.int64[::1], types.float64, types.int64, types.float64)

MESSAGES = {
    _core.ST_DONE: "the end of the interval was reached",
    _core.ST_EVENT: "a terminal event occurred",
    _core.ST_TOO_MANY: "too many steps",
    _core.ST_UNDERFLOW: "step size underflow",
    _core.ST_BAD_START: "the right-hand side is not finite at the start",
    _core.ST_FIXED_FAILED: "the Newton iteration did not converge at the fixed step size",
}
REASONS = {
    _core.R_NONE: "the accepted steps shrank below the resolution of t (the solution may be unbounded there)",
    _core.R_NEWTON: "the Newton iteration diverged or converged too slowly",
    _core.R_ERROR: "the local error stayed above the tolerance",
    _core.R_NONFINITE: "the right-hand side became non-finite",
    _core.R_SINGULAR: "the Newton matrix is singular",
    _core.R_RESIDUAL: "the collocation residual stayed large with a kept Jacobian",
}


class IntegratorArgumentError(KickbackError, ValueError):
    """A wrong argument to :func:`solve` (shape, sign or type); the message names it."""


def njit_rhs(fn):
    """Compile ``fn(t, y, params) -> dydt`` (float64 arrays) for :func:`solve`, cached."""
    return jit(fn, signature=RHS_SIGNATURE)


def njit_jac(fn):
    """Compile ``fn(t, y, params) -> dfdy`` (n × n, C order) for :func:`solve`, cached."""
    return jit(fn, signature=JAC_SIGNATURE)


def njit_events(fn):
    """Compile ``fn(t, y, params) -> g`` (one value per event) for :func:`solve`, cached."""
    return jit(fn, signature=EVENTS_SIGNATURE)


def _no_events(t, y, p):
    return np.zeros(0)


_NO_EVENTS = None
_LOOP = None


def _compiled():
    global _LOOP, _NO_EVENTS
    if _LOOP is None:
        _NO_EVENTS = njit_events(_no_events)
        _LOOP = jit(_core.integrate_loop, signature=_LOOP_SIGNATURE)
    return _LOOP, _NO_EVENTS


@dataclass(frozen=True)
class Radau5Result:
    """Outcome of :func:`solve`.

    Attributes
    ----------
    status : int
        0 end reached, 1 terminal event, < 0 failure (see ``message``).
    message : str
        What stopped the run, and for a failure why.
    t : ndarray
        [time unit of the problem] accepted step ends, t[0] the start.
    y : ndarray
        State at ``t``, shape (n, len(t)).
    t_events, y_events : tuple of ndarray
        Per event: the times of its zeros in order, and the states there (k × n).
    counts : dict
        nfev, njev, nlu, n_accepted, n_rejected, n_newton_fail, n_residual_reject, n_newton_iter.
    """

    status: int
    message: str
    t: np.ndarray
    y: np.ndarray
    t_events: tuple
    y_events: tuple
    counts: dict
    h: np.ndarray
    dense: np.ndarray

    @property
    def success(self) -> bool:
        return self.status >= 0

    def dense_output(self) -> DenseSolution:
        """The run's collocation polynomials, callable at one time or an array of times
        (like scipy's ``OdeSolution``)."""
        return DenseSolution(self.t, self.y, self.h, self.dense)

    def sol(self, t: float) -> np.ndarray:
        """State at time ``t`` from the collocation polynomial of the step holding it."""
        if not self.t[0] <= t <= self.t[-1]:
            raise IntegratorArgumentError(f"t = {t!r} is outside the solved interval [{self.t[0]}, {self.t[-1]}]")
        k = max(1, int(np.searchsorted(self.t, t, side="left")))
        out = np.empty(self.y.shape[0])
        dense_eval.py_func((t - self.t[k - 1]) / self.h[k], self.y[:, k - 1], self.dense[k], out)
        return out


def _plain(fn):
    return getattr(fn, "py_func", fn)


def _check_shapes(rhs, jac, events, t0, y0, p, m):
    """Call each function once at the start: the compiled loop does not check bounds, so a
    wrong output shape must be caught here."""
    n = y0.size
    shapes = [("rhs", rhs, (n,)), ("jac", jac, (n, n))] + ([("events", events, (m,))] if events is not None else [])
    for name, fn, shape in shapes:
        try:
            out = np.asarray(fn(t0, y0.copy(), p.copy()))
        except Exception as exc:  # the user's function, any failure: say which one
            raise IntegratorArgumentError(f"{name}(t0, y0, params) failed: {exc}") from exc
        if out.shape != shape:
            raise IntegratorArgumentError(f"{name}(t0, y0, params) has shape {out.shape}, expected {shape}")


def solve(rhs, jac, t_span, y0, params=None, *, rtol=1e-6, atol=1e-9, first_step: float | None = None,
          max_step: float = np.inf, max_steps: int = 100_000, events=None, directions=None, terminal=None,
          fixed_step: float | None = None, residual_check: int = 2, newton_tol: float | None = None,
          compiled: bool = True) -> Radau5Result:
    """Integrate y' = rhs(t, y, params) from t_span[0] to t_span[1] with Radau IIA (order 5).

    Parameters
    ----------
    rhs, jac : callable
        ``rhs(t, y, params)`` → dy/dt, ``jac(t, y, params)`` → ∂f/∂y (n × n), compiled with
        :func:`njit_rhs` / :func:`njit_jac` (plain functions are accepted with ``compiled=False``).
    t_span : (float, float)
        Start and end time, end > start.
    y0 : array_like
        Initial state (n,).
    params : array_like, optional
        1-D float parameter array handed to every function.
    rtol : float or array_like
        Relative tolerance, scalar or one per component (the error scale of component i is
        atol_i + rtol_i·|y_i|; entries are floored at 100·ε).
    atol : float or array_like
        Absolute tolerance, scalar or one per component.
    first_step, max_step : float, optional
        Initial step (default: chosen from two slopes) and largest step.
    max_steps : int
        Accepted steps allowed before giving up.
    events : callable, optional
        ``events(t, y, params)`` → array of m event values (compiled with :func:`njit_events`).
    directions, terminal : array_like, optional
        Per event: +1 rising zeros only, −1 falling only, 0 both; and whether the zero ends the run.
    fixed_step : float, optional
        Constant step without error control (order studies).
    residual_check : int
        0: no check. 1: a step converged with a Jacobian kept from an earlier step
        must have a collocation residual :math:`Z - h(A \\otimes I)F(Z)` within the error
        tolerance, else the Jacobian is refreshed and the step repeated (what ``radau_check.py``
        adds to scipy). 2 (default): every step takes one more Newton correction with the Jacobian at its
        end point, which must be within the tolerance, else the step is halved — this also catches
        a Jacobian evaluated at the step's start that is already wrong inside the step (a law
        switching within it); the accepted end Jacobian serves the next step.
    newton_tol : float, optional
        κ·Tol of the Newton stopping rule in units of the error scale; default
        max(10·ε/rtol, min(0.03, √rtol)) with the largest entry of ``rtol``.
    compiled : bool
        False runs the same loop as plain Python (slow; for debugging).

    Returns
    -------
    Radau5Result
    """
    t0, t1 = (float(v) for v in t_span)
    y0 = np.array(y0, dtype=float).ravel()
    n = y0.size
    if not (np.isfinite(t0) and np.isfinite(t1) and t1 > t0):
        raise IntegratorArgumentError(f"t_span must be finite with end > start, got {t_span!r}")
    if n == 0 or not np.all(np.isfinite(y0)):
        raise IntegratorArgumentError("y0 must be a non-empty finite vector")
    atol_v = np.array(np.broadcast_to(np.asarray(atol, dtype=float), (n,)), dtype=float)
    try:
        rtol_v = np.array(np.broadcast_to(np.asarray(rtol, dtype=float), (n,)), dtype=float)
    except ValueError as exc:
        raise IntegratorArgumentError(f"rtol must be a scalar or one entry per component ({n}): {exc}") from exc
    if not (np.all(rtol_v > 0) and np.all(atol_v > 0)):
        raise IntegratorArgumentError("every rtol and atol must be > 0")
    rtol_v = np.maximum(rtol_v, 100 * np.finfo(float).eps)
    p = np.array(np.zeros(0) if params is None else params, dtype=float).ravel()
    m = 0
    if events is not None:
        if directions is None and terminal is None:
            raise IntegratorArgumentError("events need directions or terminal (one entry per event)")
        m = len(directions) if directions is not None else len(terminal)
    ev_dir = np.zeros(m, np.int64) if directions is None else np.asarray(directions, dtype=np.int64).ravel()
    ev_term = np.zeros(m, np.int64) if terminal is None else np.asarray(terminal, dtype=np.int64).ravel()
    if ev_dir.size != m or ev_term.size != m:
        raise IntegratorArgumentError("directions and terminal need one entry per event")
    _check_shapes(rhs, jac, events, t0, y0, p, m)
    if residual_check not in (0, 1, 2):
        raise IntegratorArgumentError(f"residual_check must be 0, 1 or 2, got {residual_check!r}")
    if newton_tol is None:
        r_max = float(np.max(rtol_v))
        newton_tol = max(10 * np.finfo(float).eps / r_max, min(0.03, r_max ** 0.5))
    args = (t0, t1, y0, p, rtol_v, atol_v, float(first_step or 0.0), float(max_step), int(max_steps),
            ev_dir, ev_term, float(fixed_step or 0.0), int(residual_check), float(newton_tol))
    if compiled and numba.config.DISABLE_JIT:
        compiled = False  # NUMBA_DISABLE_JIT=1: every function is plain Python
    if compiled:
        for name, fn in (("rhs", rhs), ("jac", jac), ("events", events)):
            if fn is not None and not hasattr(fn, "py_func"):
                raise IntegratorArgumentError(f"{name} is a plain Python function: compile it with njit_{name} "
                                              "(or pass compiled=False)")
        loop, no_events = _compiled()
        out = loop(rhs, jac, events if events is not None else no_events, *args)
    else:
        ev = _plain(events) if events is not None else _no_events
        out = _core.integrate_loop(_plain(rhs), _plain(jac), ev, *args)
    status, ts, hs, ys, dc, ev_i, ev_t, ev_y, cnt = out
    message = MESSAGES[int(status)]
    if status < 0:
        message += f" at t = {ts[-1]:.6g}"
        reason = REASONS.get(int(cnt[_core.REASON]), "")
        if reason and status != _core.ST_TOO_MANY:
            message += f" ({reason})"
        elif status == _core.ST_TOO_MANY:
            message += f" ({int(max_steps)} accepted)"
    names = ("nfev", "njev", "nlu", "n_accepted", "n_rejected", "n_newton_fail", "n_residual_reject",
             "n_newton_iter")
    counts = {k: int(cnt[i]) for i, k in enumerate(names)}
    t_events = tuple(ev_t[ev_i == k] for k in range(m))
    y_events = tuple(ev_y[ev_i == k] for k in range(m))
    return Radau5Result(int(status), message, ts, ys.T.copy(), t_events, y_events, counts, hs, dc)
