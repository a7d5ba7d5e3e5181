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
#: the largest noise (relative to the state's scale) an acceptance at the noise may take: a
#: residual above it is a state still moving, not noise (:func:`_closed`, and
#: :func:`kickback.engine.periodic_settle.accepted`)
NOISE_CAP = 1e-5


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


def _state_residual(one_cycle, c: Circuit, base: np.ndarray, k: int, duty: float, frequency: float, rtol: float):
    """The cycle map's residual in state ``k`` alone, the others held at ``base``:
    s ↦ x_k(T) − s, and a one-element list counting the cycle solves it made."""
    count = [0]

    def residual(s):
        xx = base.copy()
        xx[k] = s
        count[0] += 1
        return float(one_cycle(c, xx, duty, frequency, rtol, energies=False)[0][k] - s)

    return residual, count


def _closed(one_cycle, c: Circuit, x, duty: float, frequency: float, rtol: float, scale: np.ndarray, tol: float,
            solves: int):
    """One full cycle from ``x`` (energies and the runner kept): the steady state's tuple if its
    residual is within ``tol``, else None.

    A full cycle whose residual is off by no more than :data:`NOISE_CAP` (``x`` was found with
    cheap cycles, whose steps differ: the energies join the step-size control in a full one) is
    followed once: the full cycle from its own end state, accepted within ``tol``. Failing that,
    that state's cycle is integrated once more without the energies: the two integrations of one
    cycle from one state differ by the integration's noise alone, and the full cycle is accepted
    where each state's residual is within ``tol`` plus twice that noise (never past
    :data:`NOISE_CAP`). The bracket or secant that found ``x`` bounds its distance to the fixed
    point."""
    x1, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=True)
    solves += 1
    r = np.abs(x1 - x) / scale
    resid = float(np.max(r))
    if resid <= tol:
        return x, e_on, e_off, runner, resid, solves
    if not resid <= NOISE_CAP:
        return None
    x = x1
    x1, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=True)
    solves += 1
    r = np.abs(x1 - x) / scale
    resid = float(np.max(r))
    if not resid <= tol:
        x1c = one_cycle(c, x, duty, frequency, rtol, energies=False)[0]
        solves += 1
        allow = np.minimum(tol + 2.0 * np.abs(x1 - x1c) / scale, NOISE_CAP)
        if not np.all(r <= allow):
            return None
    return x, e_on, e_off, runner, resid, solves


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
    g, count = _state_residual(one_cycle, c, base, k, duty, frequency, rtol)

    try:
        root = brentq(g, min(a, b), max(a, b), xtol=1e-3 * tol * scale[k],
                      rtol=4 * np.finfo(float).eps, maxiter=200)  # scipy's least rtol
    except (ValueError, RuntimeError, SolverError):
        return None
    x = base.copy()
    x[k] = root
    for _ in range(2):  # the forgotten states follow the kept one
        x1 = one_cycle(c, x, duty, frequency, rtol, energies=False)[0]
        count[0] += 1
        x[np.arange(n) != k] = x1[np.arange(n) != k]
    return _closed(one_cycle, c, x, duty, frequency, rtol, scale, tol, count[0])


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
    found by :func:`log_secant` (nearly linear for a Shockley diode; ``D`` read at the farthest
    drained cycle); the other states are held at the best cycle's, then follow. The bracket, not
    a Newton step, bounds the distance to the fixed point. Returns as :func:`bracketed_root`, or
    None.
    """
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
    # the drain where the top-up is surely nil: the negative cycle farthest up
    drain = -max(neg)[1]
    lo, hi = max(pos), min(neg)
    if not lo[0] < hi[0]:
        return None
    # the cycle whose other states are best settled
    base = np.array(min(history, key=lambda xf: float(np.max(np.abs(xf[1][others]) / scale[others])))[0])
    residual, count = _state_residual(one_cycle, c, base, k, duty, frequency, rtol)

    at = []

    def evaluate(s, full):
        f = residual(s)
        at.append((abs(f), s))
        return f, abs(f) / scale[k]

    try:
        if not drain > 0 or not log_secant(evaluate, pts, lo[0], hi[0], drain, 1e-3 * tol * scale[k], tol,
                                           -1.0, 100):
            return None
    except (ValueError, ZeroDivisionError, SolverError):
        return None
    x = base.copy()
    x[k] = min(at)[1]
    for _ in range(3):  # the other states follow the held one
        x1 = one_cycle(c, x, duty, frequency, rtol, energies=False)[0]
        count[0] += 1
        if float(np.max(np.abs(x1 - x)[others] / scale[others])) <= tol:
            break
        x[others] = x1[others]
    return _closed(one_cycle, c, x, duty, frequency, rtol, scale, tol, count[0])


#: a residual that keeps its sign and shrinks by a ratio in this band per Newton step, in one
#: state only, is read as an exponential top-up (:func:`topup_root`)
TOPUP_RATIO = (0.15, 0.85)
#: the probe past the fixed point: this many apparent e-folds of the top-up beyond the last cycle
TOPUP_PROBE = 15.0
TOPUP_MAX = 16
#: a held state's residual within this of its own value is zero: the rounding a cycle's
#: integration leaves in a state that barely moves (a few dozen ulps of it)
ROUNDING = 64 * np.finfo(float).eps


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
        pts = [(sa, sign * float(fa[k])), (sb, sign * float(fb[k])), (far, f_far)]
        if not log_secant(cycle, pts, sb, far, -f_far, tol * scale[k], tol, final_from, TOPUP_MAX):
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


def log_secant(evaluate, pts, near: float, far: float, drain: float, xtol: float, tol: float,
               final_from: float, max_cycles: int) -> bool:
    """Root of a held state's residual ``F(s) = T(s) − D`` inside the bracket (``F > 0`` at
    ``near``, ``< 0`` at ``far``): a secant on ``g(s) = ln((F(s) + D)/D)`` (linear in ``s`` where the
    top-up ``T`` is exponential; ``g = 0`` exactly where ``F = 0``, whatever ``D``), kept inside the
    bracket; a secant on ``F`` itself where that one leaves it (far above the drain a capacitor is
    charged to a level, ``F`` linear), false position in ``g`` between the bracket's ends next, bisection where
    ``g`` is not known at both ends (a top-up below ``1e-6·D``, lost in the cycle's noise) or where
    the bracket did not halve over two cycles. ``evaluate(s, full)`` returns ``(F(s), relative
    residual of the cycle)``; ``pts`` holds known ``(s, F)``. True when the last cycle evaluated
    is the fixed point (its residual within ``tol``, and its distance to the root by the secant's
    slope or the bracket within ``xtol``, or ``F`` at the rounding of ``s`` itself,
    :data:`ROUNDING`); a cycle after one within ``final_from`` is evaluated in full.

    References
    ----------
    R. P. Brent, Algorithms for Minimization without Derivatives, Prentice-Hall 1973, ch. 4;
    M. Dowell and P. Jarratt, "A modified regula falsi method", BIT 11, 1971.
    """
    floor = 1e-6 * drain

    def g_of(f):
        return math.log1p(f / drain) if f + drain > floor else None

    known = {s: g_of(f) for s, f in pts}
    finite = [(s, g) for s, g in known.items() if g is not None]
    finite.sort(key=lambda sg: abs(sg[1]), reverse=True)  # the best last
    above = sorted(((s, f) for s, f in pts if f > 0), key=lambda sf: -sf[1])  # the least last
    full, slow = False, 0
    for _ in range(max_cycles):
        lo, hi = min(near, far), max(near, far)
        s = math.nan
        if len(finite) >= 2 and slow < 2:
            (s0, g0), (s1, g1) = finite[-2], finite[-1]
            if g1 != g0:
                s = s1 - g1 * (s1 - s0) / (g1 - g0)
            if not lo < s < hi and len(above) >= 2:
                # far above the drain: a capacitor charged to a level (F = L − s), linear in F
                (s0, f0), (s1, f1) = above[-2], above[-1]
                s = s1 - f1 * (s1 - s0) / (f1 - f0) if f1 != f0 else math.nan
            if not lo < s < hi and known.get(near) is not None and known.get(far) is not None:
                gn, gf = known[near], known[far]
                s = near - gn * (far - near) / (gf - gn)
        if not lo < s < hi:
            s, slow = 0.5 * (near + far), 0
        width = hi - lo
        f, resid = evaluate(s, full)
        if f > 0:
            near = s
        elif f < 0:
            far = s
        slow = slow + 1 if abs(far - near) > 0.5 * width else 0
        g = known[s] = g_of(f)
        if f > 0:
            above.append((s, f))
        if g is not None:
            prev = finite[-1] if finite else None
            finite.append((s, g))
            if prev is not None and prev[0] != s and resid <= tol:
                slope = (g - prev[1]) / (s - prev[0])
                if slope != 0 and abs(g / slope) <= xtol:
                    return True
        if f == 0.0 or abs(far - near) <= xtol:
            return resid <= tol
        if abs(f) <= ROUNDING * abs(s) and resid <= tol:
            # the residual is at the rounding of the state itself (a held capacitor drained by a
            # top-up and a drain of ~1e-13 of its scale per cycle): s is a fixed point of the
            # computed map; no secant places the root closer than that noise over the slope
            # (Brent 1973, §4.2), and no cycle resolves it
            return True
        full = resid <= final_from
    return False
