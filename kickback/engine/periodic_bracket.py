"""The shooting's helpers for a cycle map that forgets some of its states: which ones (their
difference-Jacobian column is below its noise), the residual the step control watches, and the
fixed point by bracketing where the map depends on one state only.

References
----------
R. P. Brent, Algorithms for Minimization without Derivatives, Prentice-Hall 1973, ch. 4.
"""

from __future__ import annotations

import math

import numpy as np

from kickback.circuit import Circuit
from kickback.errors import SolverError

#: a state whose finite-difference Jacobian column (scaled) stays below this is one the cycle map
#: forgets (a node discharged through the switch at turn-on): the noise of a 1e-6 difference of
#: two cycle solves at rtol 1e-8 is ~1e-3
FORGOTTEN = 1e-2
#: a state whose own slope in the cycle map is 1 within this is *held* (the difference noise of
#: its diagonal entry is ~1e-6; a slope this close to 1 leaves Newton's step undefined anyway)
HELD_SLOPE = 1e-3


def forgotten(jm: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """Mask of the states the map forgets: their scaled column stays below :data:`FORGOTTEN`."""
    return np.max(np.abs(jm) * scale[None, :] / scale[:, None], axis=0) <= FORGOTTEN


def one_kept_flips(jm, scale: np.ndarray, f: np.ndarray, f_prev: np.ndarray) -> bool:
    """The map depends on one state only, and its residual changed sign over the last step."""
    if jm is None:
        return False
    kept = np.flatnonzero(~forgotten(jm, scale))
    return kept.size == 1 and f[kept[0]] * f_prev[kept[0]] < 0


def merit(f: np.ndarray, scale: np.ndarray, jm: np.ndarray | None) -> float:
    """Residual the step control asks to decrease: over the states the cycle map depends on.

    A state the map forgets (a capacitive node discharged through the switch within
    picoseconds of turn-on: its Jacobian column is nil) follows the others exactly, but may swing
    steeply with them (the phase of an LC ring at the end of the period); counting it would make
    the step control reject good steps."""
    r = np.abs(f) / scale
    if jm is not None:
        col = np.max(np.abs(jm) * scale[None, :] / scale[:, None], axis=0)
        kept = col > FORGOTTEN
        if np.any(kept):
            r = r[kept]
    return float(np.max(r))


def bracketed_root(c: Circuit, duty: float, frequency: float, rtol: float, scale: np.ndarray, jm, history,
                   one_cycle, tol: float):
    """The fixed point by bracketing, where the cycle map depends on one state only (the coil
    current; the node is forgotten at turn-on) and Newton's method did not settle: in
    discontinuous conduction an LC ring left over at turn-on makes the map oscillate in the
    current (slope near 1 in places), and Newton steps jump between its swings. Two cycles of
    the iteration whose residuals have opposite signs bracket a fixed point; Brent's method
    finds it. ``one_cycle`` is the cycle map (:func:`kickback.engine.periodic.one_cycle`), ``tol``
    the relative residual a fixed point must meet. Returns (x, E_on, E_off, runner, residual,
    cycle solves) or None.

    References
    ----------
    R. P. Brent, Algorithms for Minimization without Derivatives, Prentice-Hall 1973, ch. 4.
    """
    from scipy.optimize import brentq

    if jm is None or not history:
        return None
    n = c.ie
    col = np.max(np.abs(jm) * scale[None, :] / scale[:, None], axis=0)
    kept = np.flatnonzero(col > FORGOTTEN)
    if kept.size != 1:
        return None
    k = int(kept[0])
    pos = [float(x[k]) for x, f in history if f[k] > 0]
    neg = [float(x[k]) for x, f in history if f[k] < 0]
    if not pos or not neg:
        return None
    a, b = min(((p, q) for p in pos for q in neg), key=lambda pq: abs(pq[0] - pq[1]))
    base = np.array(history[-1][0], dtype=float)
    solves = 0

    def g(s):
        nonlocal solves
        xx = base.copy()
        xx[k] = s
        solves += 1
        return float(one_cycle(c, xx, duty, frequency, rtol, energies=False)[0][k] - s)

    try:
        root = brentq(g, min(a, b), max(a, b), xtol=1e-3 * tol * scale[k],
                      rtol=4 * np.finfo(float).eps, maxiter=200)  # scipy's least rtol
    except (ValueError, RuntimeError, SolverError):
        return None
    x = base.copy()
    x[k] = root
    for _ in range(2):  # the forgotten states follow the kept one
        x1 = one_cycle(c, x, duty, frequency, rtol, energies=False)[0]
        solves += 1
        x[np.arange(n) != k] = x1[np.arange(n) != k]
    x1, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=True)
    solves += 1
    resid = float(np.max(np.abs(x1 - x) / scale))
    if not resid <= tol:
        return None
    return x, e_on, e_off, runner, resid, solves


def held_state(jm, scale: np.ndarray) -> int | None:
    """The state the cycle map carries over unchanged, where its Jacobian was taken (a capacitor
    held behind a blocking diode: it drains by a fixed charge each cycle and is topped up only
    below some voltage): its scaled column is the unit vector, to :data:`HELD_SLOPE` on the diagonal
    and :data:`FORGOTTEN` off it. None when
    there is not exactly one."""
    if jm is None:
        return None
    col = np.abs(jm) * scale[None, :] / scale[:, None]
    n = jm.shape[0]
    held = [k for k in range(n) if abs(jm[k, k] - 1.0) <= HELD_SLOPE
            and np.all(np.delete(col[:, k], k) <= FORGOTTEN)]
    return held[0] if len(held) == 1 else None


def held_root(c: Circuit, duty: float, frequency: float, rtol: float, scale: np.ndarray, jm, history,
              one_cycle, tol: float):
    """The fixed point in a held state ``k`` (:func:`held_state`) by bracketing.

    Its residual is ``F(s) = T(s) − D``: a fixed drain ``D`` per cycle (where nothing tops it up,
    F is flat at −D and Newton's step is undefined) and a top-up ``T(s)`` that grows as the
    capacitor starts below the clamp's knee (exponentially for a Shockley diode). The root of
    ``ln(T(s)/D)``, bracketed by two cycles of the iteration with residuals of opposite signs, is
    found by Brent's method (nearly linear for a Shockley diode); the other states are held at
    the best cycle's, then follow. The bracket, not a Newton step, bounds the distance to the
    fixed point. Returns as :func:`bracketed_root`, or None.
    """
    from scipy.optimize import brentq

    k = held_state(jm, scale)
    if k is None or not history:
        return None
    n = c.ie
    others = np.arange(n) != k
    pts = [(float(x[k]), float(f[k])) for x, f in history]
    pos = [p for p in pts if p[1] > 0]
    neg = [p for p in pts if p[1] < 0]
    if not pos or not neg:
        return None
    drain = max(-f for _, f in neg)
    lo, hi = max(pos), min(neg)
    if not lo[0] < hi[0]:
        return None
    # the cycle whose other states are best settled
    base = np.array(min(history, key=lambda xf: float(np.max(np.abs(xf[1][others]) / scale[others])))[0])
    solves = 0

    def residual(s):
        nonlocal solves
        xx = base.copy()
        xx[k] = s
        solves += 1
        return float(one_cycle(c, xx, duty, frequency, rtol, energies=False)[0][k] - s)

    try:
        root = brentq(lambda s: math.log(max(residual(s) + drain, 1e-12 * drain) / drain), lo[0], hi[0],
                      xtol=1e-3 * tol * scale[k], rtol=4 * np.finfo(float).eps, maxiter=100)
    except (ValueError, RuntimeError, SolverError):
        return None
    x = base.copy()
    x[k] = root
    for _ in range(3):  # the other states follow the held one
        x1 = one_cycle(c, x, duty, frequency, rtol, energies=False)[0]
        solves += 1
        if float(np.max(np.abs(x1 - x)[others] / scale[others])) <= tol:
            break
        x[others] = x1[others]
    x1, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=True)
    solves += 1
    resid = float(np.max(np.abs(x1 - x) / scale))
    if not resid <= tol:
        return None
    return x, e_on, e_off, runner, resid, solves

