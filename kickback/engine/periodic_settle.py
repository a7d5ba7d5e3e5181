"""The shooting's acceptance of a fixed point at the cycle integration's noise, and the fixed point
of a slow state (a motor's speed, its electromechanical time constant thousands of periods) by a
secant on its drift per cycle, the fast states settled by plain iteration at each trial value.

The cycle map is integrated at a relative tolerance ``rtol`` (``CYCLE_RTOL``): a state's value at
the end of the cycle is known to about ``rtol·|x|``, never better than the integration delivers.
The acceptance rule (:func:`accepted`) asks, per state:

- of a state the map depends on (*kept*): the residual ``|Φ_k(x) − x_k|`` within the tolerance,
  or within the noise the iteration has *shown* in that state (two cycles, the state plain-iterated
  between them, whose residual did not halve after the iteration had contracted it by
  :data:`FAST_RATIO` or more per cycle: it no longer contracts, what is left is the integration's
  noise; a state contracting slowly throughout never shows one); the distance to the fixed point (the Newton or secant step) within the
  tolerance, the integration's ``rtol·|x|`` or that shown noise;
- of a state the map forgets (its Jacobian column nil: a node discharged through the switch at
  turn-on): the residual within the tolerance, ``rtol·|x|`` or the shown noise. Such a state is
  set each cycle to the plain iterate, so its residual is the change of ``Φ_k`` between two cycles
  that agree in the states the map depends on: the integration's noise in it.

No allowance goes past :data:`NOISE_CAP` of a state's scale. The Newton iteration passes no
shown noise (a kept state's residual stays within the tolerance there); the slow state's secant
(:func:`slow_root`) passes what its plain iterations showed.

The residual reported (``SteadyState.residual``) stays the largest of every state's, forgotten
ones included: an acceptance at the noise shows there, never hidden.

References
----------
R. P. Brent, Algorithms for Minimization without Derivatives, Prentice-Hall 1973, ch. 4 (the
secant method and its accuracy in the presence of rounding noise, §4.2);
E. Hairer, S. P. Nørsett and G. Wanner, Solving Ordinary Differential Equations I, Springer 1993,
§II.4 (the local error control of a relative tolerance).
"""

from __future__ import annotations

import math

import numpy as np

from kickback.circuit import Circuit
from kickback.engine.periodic_bracket import forgotten
from kickback.errors import SolverError

#: the largest noise (relative to the state's scale) an acceptance at the noise may take: a
#: residual above it is a state still moving, not noise
NOISE_CAP = 1e-5
#: a motor's speed is *slow* where its own slope in the cycle map is within this of 1 (a
#: per-cycle contraction ``exp(−T/τ_em)``, τ_em above 100 periods)
SLOW_SLOPE = 1e-2
#: the secant's first spacing in the slow state, relative to its scale: wide, so that the slope it
#: measures is the drift's, not its noise (the drift is smooth and nearly linear in the speed)
SLOW_SPACING = 0.05
SLOW_TRIALS = 12
#: plain-iteration cycles of the fast states at one trial value at most
SETTLE_CYCLES = 10
#: a plain iteration whose residual fell by this ratio over a cycle contracts fast: its later
#: failure to halve is noise, not a slow contraction
FAST_RATIO = 0.2
#: full cycles tried at the secant's root
FINAL_TRIES = 4
#: away from the root, a trial's fast states are settled until G moves by less than this part of
#: itself over a cycle (and they are within it of their scale)
SETTLE_G = 1e-3


def accepted(f: np.ndarray, dx: np.ndarray, x: np.ndarray, scale: np.ndarray, jm, rtol: float, tol: float,
             noise: np.ndarray | None = None, reach: np.ndarray | None = None) -> bool:
    """The acceptance rule (module docstring): residual ``f`` and step ``dx`` at ``x``.

    Parameters
    ----------
    f, dx, x, scale : ndarray — residual, distance to the fixed point, state, scales (state units)
    jm : ndarray or None — the map's difference Jacobian (None: every state kept)
    rtol : float — the cycle integration's relative tolerance
    tol : float — the fixed point's relative tolerance (``STEADY_TOL``)
    noise : ndarray or None — noise the iteration has shown in each state (relative to its scale):
        allowed in every state's residual and distance; None: none shown
    reach : ndarray or None — a distance to the fixed point the iteration cannot resolve, shown
        per state (relative): the slow state's noise in its drift over the drift's slope
    """
    r, d = np.abs(f) / scale, np.abs(dx) / scale
    shown = np.full(len(x), tol) if noise is None else np.clip(noise, tol, max(tol, NOISE_CAP))
    floor = np.maximum(shown, rtol * np.abs(x) / scale)
    if reach is not None:
        floor = np.maximum(floor, reach)
    floor = np.minimum(floor, max(tol, NOISE_CAP))
    kept = ~forgotten(jm, scale) if jm is not None else np.ones(len(x), dtype=bool)
    return bool(np.all(r[kept] <= shown[kept]) and np.all(d[kept] <= floor[kept])
                and np.all(r[~kept] <= floor[~kept]))


def slow_state(c: Circuit, jm) -> int | None:
    """The motor's speed where the map carries it over nearly unchanged (its diagonal slope within
    :data:`SLOW_SLOPE` of 1: an electromechanical time constant of hundreds of periods or more),
    else None."""
    if jm is None or not c.mech:
        return None
    k = c.iw
    return k if abs(1.0 - jm[k, k]) <= SLOW_SLOPE else None


def slow_root(c: Circuit, duty: float, frequency: float, rtol: float, scale: np.ndarray, k: int, x0: np.ndarray,
              one_cycle, tol: float, known: np.ndarray | None = None):
    """The fixed point in a slow state ``k`` (:func:`slow_state`) by a secant on its drift per cycle.

    ``G(s) = (Φ_k(x) − s)/scale_k`` with ``x_k = s·scale_k`` and the other (fast) states settled at
    ``s`` by plain iteration (they contract many-fold per cycle; Newton on all states at once fails
    where the map has kinks in the fast states, e.g. a coil current reaching zero each cycle). The
    first two trials are :data:`SLOW_SPACING` apart, so that the secant measures the drift's slope,
    not its noise; then inverse quadratic interpolation through the last three trials where it
    stays within the secant's step (Brent 1973, ch. 4). Away from the root the fast states are
    settled only until ``G`` stops moving in its third digit; the fast states at a new trial value
    start from the two nearest trials' settled states, interpolated linearly. The noise of ``G``
    is shown by the cycles at one trial value whose fast states are settled within
    :data:`NOISE_CAP`; the root is accepted when ``|G|`` is within ``tol`` and its distance
    ``|G/G'|`` within ``tol`` or twice the noise over the slope (Brent 1973, §4.2: no secant places a
    root closer than its function's noise over its slope), capped at :data:`NOISE_CAP`. Up to
    :data:`FINAL_TRIES` full cycles there are checked by :func:`accepted` with every state kept,
    a fast state's residual allowed at the noise the plain iteration showed in it (at the trial,
    or between two full cycles). The contraction is the slow eigenvalue ``1 + dG/ds``. Returns
    ``(x, E_on, E_off, runner, residual, cycle solves, contraction)`` or None (not
    settled in :data:`SLOW_TRIALS` trials: the shooting then goes on as before). ``known``:
    ``Φ(x0)``, where the shooting already solved that cycle.
    """
    n = c.ie
    others = np.arange(n) != k
    solves = 0
    # [s, G, x settled at s, last fast residual, settled fully, noise per state, last cycle,
    #  whether the fast states were seen contracting fast]
    trials = []
    noise = [0.0]

    def settle(s, start, full, known=None):
        nonlocal solves
        x = np.array(start, dtype=float)
        x[k] = s * scale[k]
        prev = g_prev = math.inf
        gs = []
        g = rf = math.nan
        stall, done, fast_seen = np.zeros(n), False, False
        r_prev = None
        base = None  # (x, Φ(x)) of the last cycle
        for _ in range(SETTLE_CYCLES):
            if known is not None:
                x1, known = known, None
            else:
                x1 = one_cycle(c, x, duty, frequency, rtol, energies=False)[0]
                solves += 1
            base = (x.copy(), x1)
            r = np.abs(x1 - x) / scale
            rf = float(np.max(r[others]))
            g = float((x1[k] - x[k]) / scale[k])
            x[others] = x1[others]
            if rf <= NOISE_CAP:
                gs.append(g)
            if rf <= tol:
                done = True
                break
            if rf <= NOISE_CAP and rf > 0.5 * prev and fast_seen:
                # the plain iteration, having contracted many-fold per cycle, no longer does:
                # each state's residual over these two cycles is its noise (a state contracting
                # slowly throughout never shows it)
                stall, done = np.maximum(r, r_prev), True
                break
            fast_seen = fast_seen or rf <= FAST_RATIO * prev
            r_prev = r
            if not full and rf <= SETTLE_G and abs(g - g_prev) <= max(SETTLE_G * abs(g), noise[0], SETTLE_G * tol):
                break  # G stopped moving in its third digit (or within its noise): enough for a trial
            prev, g_prev = rf, g
        if len(gs) >= 2:
            noise[0] = max(noise[0], max(gs) - min(gs))
        return [s, g, x.copy(), rf, done, stall, base, fast_seen]

    def start_at(s):
        """The fast states at ``s`` from the two nearest trials (linear in s), or the nearest."""
        near = sorted(trials, key=lambda t: abs(t[0] - s))
        x = near[0][2].copy()
        if len(near) >= 2 and near[1][0] != near[0][0]:
            w = (s - near[0][0]) / (near[1][0] - near[0][0])
            x[others] += w * (near[1][2][others] - near[0][2][others])
        return x

    try:
        s0 = float(x0[k] / scale[k])
        trials.append(settle(s0, x0, False, known))
        g0 = trials[0][1]
        if not math.isfinite(g0) or g0 == 0.0:
            return None
        trials.append(settle(s0 + math.copysign(SLOW_SPACING, g0), trials[0][2], False))
        wide = (trials[1][1] - trials[0][1]) / (trials[1][0] - trials[0][0])
        for _ in range(SLOW_TRIALS - 2):
            ta, tb = trials[-2], trials[-1]
            (sa, ga), (sb, gb) = ta[:2], tb[:2]
            slope = (gb - ga) / (sb - sa) if sb != sa else 0.0
            if abs(gb - ga) < 10.0 * noise[0] or not slope < 0:
                slope = wide  # two trials too close for their difference to be above the noise
            if not slope < 0:
                return None  # the drift does not fall with the speed: no stable fixed point to find
            dist = abs(gb / slope)
            if abs(gb) <= tol and dist <= min(max(tol, 2.0 * noise[0] / abs(slope)), NOISE_CAP):
                if tb[4]:
                    break
                trials[-1] = settle(sb, tb[2], True)  # at the root: settle the fast states fully
                continue
            s = sb - gb / slope
            if len(trials) >= 3:
                s = _inverse_quadratic(trials[-3:], s)
            trials.append(settle(s, start_at(s), False))
        else:
            return None
        x = trials[-1][2].copy()
        stall = trials[-1][5].copy()
        stall[k] = noise[0]  # the drift's own noise: its residual stays within the tolerance
        reach = np.zeros(n)
        reach[k] = 2.0 * noise[0] / abs(slope)
        r_prev = None
        for _ in range(FINAL_TRIES):
            x1, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=True)
            solves += 1
            f = x1 - x
            # the fast states settled by plain iteration: each one's distance is its residual
            # (they contract many-fold per cycle); the slow state's is the secant's
            dx = f.copy()
            dx[k] = dist * scale[k]
            r = np.abs(f) / scale
            if r_prev is not None and trials[-1][7] and np.max(r[others]) > 0.5 * np.max(r_prev[others]):
                # two full cycles, the fast states plain-iterated between, and their residual
                # did not halve: the iteration's noise in them (the full cycle's steps differ
                # from the settling cycles', its noise with them)
                stall[others] = np.maximum(stall[others], np.maximum(r, r_prev)[others])
            # every state kept (no Jacobian): a fast state's residual past the tolerance only
            # at the noise shown in it
            if accepted(f, dx, x, scale, None, rtol, tol, stall, reach):
                # the map's largest eigenvalue: the slow one, 1 + dG/ds along the settled fast
                # states (they contract many-fold per cycle, shown by the settling)
                return x, e_on, e_off, runner, float(np.max(r)), solves, 1.0 + slope
            # a fast state off by its noise (a ring's phase at the end of the period taking
            # another path of the integration): one more plain iterate of the fast states
            x[others] = x1[others]
            r_prev = r
    except SolverError:
        return None
    return None


def _inverse_quadratic(three, fallback: float) -> float:
    """Root by inverse quadratic interpolation through three trials ``(s, G, ...)``; ``fallback``
    (the secant's) where the three are not distinct in G or the result lies farther from the last
    trial than the secant's step (Brent 1973, ch. 4)."""
    (a, fa), (b, fb), (c, fc) = (t[:2] for t in three)
    if len({fa, fb, fc}) < 3:
        return fallback
    s = (a * fb * fc / ((fa - fb) * (fa - fc)) + b * fa * fc / ((fb - fa) * (fb - fc))
         + c * fa * fb / ((fc - fa) * (fc - fb)))
    return s if math.isfinite(s) and abs(s - c) <= abs(fallback - c) else fallback
