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



#: a residual that keeps its sign and shrinks by a ratio in this band per Newton step, in one
#: state only, is read as an exponential top-up (:func:`topup_root`)
TOPUP_RATIO = (0.15, 0.85)
#: the probe past the fixed point: this many apparent e-folds of the top-up beyond the last cycle
TOPUP_PROBE = 15.0
TOPUP_MAX = 16


def topup_state(history, scale: np.ndarray) -> int | None:
    """The state ``k`` whose residual alone is left, kept its sign over the last two cycles and
    shrank by a steady ratio in :data:`TOPUP_RATIO` while the state moved towards it: Newton's
    method creeping up an exponential (a capacitor topped up through a Shockley diode each cycle:
    the top-up falls e-fold per ``n·V_T`` of its start voltage, each step takes off a fixed
    fraction). None otherwise."""
    if len(history) < 2:
        return None
    (x0, f0), (x1, f1) = history[-2], history[-1]
    r0, r1 = np.abs(f0) / scale, np.abs(f1) / scale
    k = int(np.argmax(r1))
    if int(np.argmax(r0)) != k or f0[k] * f1[k] <= 0 or (x1[k] - x0[k]) * f0[k] <= 0:
        return None
    others = np.arange(len(scale)) != k
    if np.any(r0[others] > 1e-3 * r0[k]) or np.any(r1[others] > 1e-3 * r1[k]):
        return None
    ratio = r1[k] / r0[k]
    return k if TOPUP_RATIO[0] < ratio < TOPUP_RATIO[1] else None


def topup_root(c: Circuit, duty: float, frequency: float, rtol: float, scale: np.ndarray, history,
               one_cycle, tol: float, final_from: float = 1e-6):
    """The fixed point of a state topped up exponentially each cycle (:func:`topup_state`).

    Its residual is ``F(s) = T(s) − D``: a top-up ``T`` falling as ``exp(−s/a)`` and a fixed drain
    ``D`` (Newton's method takes off a fixed fraction of ``F`` per step). One cycle
    :data:`TOPUP_PROBE` apparent e-folds past the last one, where the top-up is nil, gives ``D``
    and the far end of a bracket; a safeguarded secant on ``g(s) = ln((F(s) + D)/D)``, which is
    linear in ``s`` where ``T`` is exponential and has the same root as ``F``, closes it in a few
    cycles; bisection wherever the secant leaves the bracket. The other states follow at each
    cycle. Done when the distance to the root estimated from the secant's slope, or the bracket,
    is below ``tol`` of the state's scale; a cycle after one whose residual is below
    ``final_from`` is solved in full (energies, kept), as it is expected to be the last. Returns
    as :func:`bracketed_root`, or None (no sign change at the probe, or not closed in
    :data:`TOPUP_MAX` cycles): the shooting then goes on as before.

    References
    ----------
    R. P. Brent, Algorithms for Minimization without Derivatives, Prentice-Hall 1973, ch. 4
    (a secant step kept inside a bracket, bisection otherwise).
    """
    k = topup_state(history, scale)
    if k is None:
        return None
    n = c.ie
    others = np.arange(n) != k
    (xa, fa), (xb, fb) = history[-2], history[-1]
    sign = 1.0 if fb[k] > 0 else -1.0
    sa, sb = float(xa[k]), float(xb[k])
    efold = (sb - sa) / math.log(fa[k] / fb[k])  # signed: the direction of the root
    base = np.array(xb, dtype=float)
    solves = 0
    last = None

    def cycle(s, full=False, follow=True):
        nonlocal solves, last
        xx = base.copy()
        xx[k] = s
        solves += 1
        got = one_cycle(c, xx, duty, frequency, rtol, keep=full, energies=full)
        x1 = got[0]
        if follow:
            base[others] = x1[others]  # the other states follow
        last = (xx, got if full else None)
        return sign * float(x1[k] - s), float(np.max(np.abs(x1 - xx) / scale))

    try:
        far = sb + TOPUP_PROBE * efold
        f_far, _ = cycle(far, follow=False)
        if not f_far < 0:
            return None
        drain = -f_far
        near = sb  # the bracket: F > 0 at `near`, < 0 at `far`
        pts = [(sa, math.log1p(sign * fa[k] / drain)), (sb, math.log1p(sign * fb[k] / drain))]
        xtol = tol * scale[k]  # as the Newton step of the shooting
        full = False  # the cycle is expected to be the last: solved in full (energies, kept)
        for _ in range(TOPUP_MAX):
            (s0, g0), (s1, g1) = pts[-2], pts[-1]
            s = s1 - g1 * (s1 - s0) / (g1 - g0) if g1 != g0 else math.nan
            lo, hi = min(near, far), max(near, far)
            if not lo < s < hi:
                s = 0.5 * (near + far)
            f, resid = cycle(s, full)
            if f > 0:
                near = s
            elif f < 0:
                far = s
            if f > -drain:
                g = math.log1p(f / drain)
                slope = (g - g1) / (s - s1) if s != s1 else math.nan
                pts.append((s, g))
                if resid <= tol and (abs(g / slope) <= xtol if slope == slope and slope != 0 else False):
                    break
            if f == 0.0 or abs(far - near) <= xtol:
                break
            full = resid <= final_from
        else:
            return None
    except (ValueError, ZeroDivisionError, SolverError):
        return None
    x = last[0]
    if last[1] is not None:
        x1, e_on, e_off, runner = last[1]
    else:
        x1, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=True)
        solves += 1
    r = np.abs(x1 - x) / scale
    resid = float(np.max(r))
    # the other states were only followed, not solved for: settled far below the tolerance, the
    # distance to their fixed point stays within it even where the map contracts them slowly
    if not (resid <= tol and float(np.max(r[others])) <= 1e-2 * tol):
        return None
    return x, e_on, e_off, runner, resid, solves
