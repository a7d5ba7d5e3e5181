"""The shooting's acceptance of a fixed point at the cycle integration's noise, and the fixed point
of a slow state (a motor's speed, its electromechanical time constant thousands of periods) by a
chord iteration on its drift per cycle, the fast states plain-iterated alongside.

The cycle map is integrated at a relative tolerance ``rtol`` (``CYCLE_RTOL``): a state's value at
the end of the cycle is known to about ``rtol·|x|``, never better than the integration delivers.
The acceptance rule (:func:`accepted`) asks, per state:

- of a state the map depends on (*kept*): the residual ``|Φ_k(x) − x_k|`` within the tolerance,
  or within the noise the iteration has *shown* in that state (two cycles, the state plain-iterated
  between them, whose residual did not halve after the iteration had contracted it by
  :data:`FAST_RATIO` or more per cycle: it no longer contracts, what is left is the integration's
  noise; a state contracting slowly throughout never shows one); the distance to the fixed point
  (the Newton or chord step) within the tolerance, the integration's ``rtol·|x|`` or that shown
  noise;
- of a state the map forgets (its Jacobian column nil: a node discharged through the switch at
  turn-on): the residual within the tolerance, ``rtol·|x|`` or the shown noise. Such a state is
  set each cycle to the plain iterate, so its residual is the change of ``Φ_k`` between two cycles
  that agree in the states the map depends on: the integration's noise in it.

No allowance goes past :data:`NOISE_CAP` of a state's scale. The Newton iteration passes no
shown noise (a kept state's residual stays within the tolerance there); the slow state's chord
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
from kickback.engine.periodic_bracket import NOISE_CAP, forgotten
from kickback.errors import SolverError

#: a motor's speed is *slow* where its own slope in the cycle map is within this of 1 (a
#: per-cycle contraction ``exp(−T/τ_em)``, τ_em above 100 periods)
SLOW_SLOPE = 1e-2
#: the chord's first spacing in the slow state, relative to its scale: wide, so that the slope it
#: measures is the drift's, not its noise (the drift is smooth and nearly linear in the speed)
SLOW_SPACING = 0.05
#: a plain iteration whose residual fell by this ratio over a cycle contracts fast: its later
#: failure to halve is noise, not a slow contraction
FAST_RATIO = 0.2
#: cycles of the chord iteration at most
CHORD_CYCLES = 30
#: a chord step below this (relative to the slow state's scale) is followed by a hold cycle
HOLD_STEP = 1e-6
#: full cycles tried at the chord's root
FINAL_TRIES = 4
#: the slope is measured again over a chord step where the fast states were within this of
#: their scale
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


def full_at_noise(x: np.ndarray, x1: np.ndarray, x1_cheap: np.ndarray, scale: np.ndarray, jm, jm_fd,
                  rtol: float, tol: float) -> bool:
    """The full cycle from ``x`` (end state ``x1``; the energies in the step-size control: other
    steps) is accepted at the noise, where the cheap cycle from the same state (end state
    ``x1_cheap``) met the tolerance: the two integrations of one cycle from one state differ by the
    integration's noise alone, shown per state; the full cycle is judged by :func:`accepted` at the
    tolerance plus twice that noise (never past :data:`NOISE_CAP`), its distance to the fixed point
    by the Newton step with ``jm`` (none: nil)."""
    f = x1 - x
    shown = tol + 2.0 * np.abs(x1 - x1_cheap) / scale
    dx = -np.linalg.solve(jm - np.eye(len(x)), f) if jm is not None else np.zeros(len(x))
    return accepted(f, dx, x, scale, jm_fd, rtol, tol, noise=shown)


def slow_state(c: Circuit, jm) -> int | None:
    """The motor's speed where the map carries it over nearly unchanged (its diagonal slope within
    :data:`SLOW_SLOPE` of 1: an electromechanical time constant of hundreds of periods or more),
    else None."""
    if jm is None or not c.mech:
        return None
    k = c.iw
    return k if abs(1.0 - jm[k, k]) <= SLOW_SLOPE else None


def slow_root(c: Circuit, duty: float, frequency: float, rtol: float, scale: np.ndarray, k: int, x0: np.ndarray,
              one_cycle, tol: float, known: np.ndarray | None = None, best: list | None = None):
    """The fixed point in a slow state ``k`` (:func:`slow_state`) by a chord iteration on its drift
    per cycle, the fast states plain-iterated.

    ``G(s) = (Φ_k(x) − s)/scale_k`` with ``x_k = s·scale_k``: the slow state's drift per cycle, smooth
    in ``s`` once the other (fast) states have followed it (they contract many-fold per cycle;
    Newton on all states at once fails where the map has kinks in the fast states, e.g. a coil
    current reaching zero each cycle). Two first cycles :data:`SLOW_SPACING` apart measure the
    drift's slope, not its noise; then on every cycle the fast states take the plain iterate and
    the slow state the chord step ``−G/G'``, the slope measured again over steps of 1e-3 of scale or
    more (a chord method: Dennis & Schnabel 1983, §5.4; the fast states' errors, shrinking
    many-fold per cycle, enter ``G`` as a perturbation). Once the step is below :data:`HOLD_STEP` a
    cycle with the slow state held shows ``G``'s noise (the change of ``G`` between two cycles at
    the same ``s``, the fast states settled within :data:`NOISE_CAP`); the root is accepted when
    ``|G|`` is within ``tol`` and its distance ``|G/G'|`` within ``tol`` or twice that noise over the
    slope (no secant places a root closer than its function's noise over its slope: Brent 1973,
    §4.2), capped at :data:`NOISE_CAP`, and the fast states are settled (within ``tol``, or at a
    noise shown: see :func:`accepted`). Then up to :data:`FINAL_TRIES` full cycles are checked by
    :func:`accepted`, every state kept. The contraction is the slow eigenvalue ``1 + dG/ds``.

    Returns ``(x, E_on, E_off, runner, residual, cycle solves, contraction)`` or None (not
    settled in :data:`CHORD_CYCLES` cycles: the shooting then goes on as before). ``known``:
    ``Φ(x0)``, where the shooting already solved that cycle. ``best``: a list, set on None to
    ``[residual, Φ(x), cycle solves]`` of the cycle solved here with the least residual (relative,
    every state): the shooting goes on from that plain iterate, not from a step of larger residual.

    References
    ----------
    J. E. Dennis and R. B. Schnabel, Numerical Methods for Unconstrained Optimization and
    Nonlinear Equations, Prentice-Hall 1983, §5.4 (the chord method).
    """
    n = c.ie
    others = np.arange(n) != k
    solves = 0
    x = np.array(x0, dtype=float)
    noise_g = 0.0  # G's noise shown by a hold cycle
    shown = np.zeros(n)  # each state's noise shown by the plain iteration

    last = [None, None]  # the last cycle solved: (its start, its end)

    def give_up():
        """None, the cycle solves spent noted in ``best``."""
        if best:
            best[2] = solves
        return None

    def cycle():
        """One cycle from ``x``: (G, the residual per state); the fast states take the iterate."""
        nonlocal solves
        solves += 1
        try:
            x1 = one_cycle(c, x, duty, frequency, rtol, energies=False)[0]
        except SolverError:
            # the integration trapped at this one state (975, main 5fffa3f: a cycle of the
            # iteration stepping 400k evaluations in the off phase, its neighbours 1e-9 away
            # solved in 4.5k): the same cycle, the energies joining the step-size control, takes
            # other steps; the state is not moved
            solves += 1
            x1 = one_cycle(c, x, duty, frequency, rtol)[0]
        last[:] = x.copy(), x1
        r = np.abs(x1 - x) / scale
        if best is not None and (not best or float(np.max(r)) < best[0]):
            best[:] = [float(np.max(r)), x1.copy(), 0]
        g = float((x1[k] - x[k]) / scale[k])
        x[others] = x1[others]
        return g, r

    try:
        if known is not None:
            x[others] = known[others]  # Φ(x0): the first plain iterate, solved already
        # the first two points: G far above what the fast states' errors move it by after a plain
        # iterate (975: 3e-5 against ~1e-9)
        sa = float(x[k] / scale[k])
        ga, r = cycle()
        if not math.isfinite(ga) or ga == 0.0:
            return give_up()
        rf = float(np.max(r[others]))
        sb = sa + math.copysign(SLOW_SPACING, ga)
        x[k] = sb * scale[k]
        gb, r_prev = cycle()
        slope = (gb - ga) / (sb - sa)
        if not slope < 0:
            return give_up()  # the drift does not fall with the speed: no stable fixed point to find
        rf, fast_seen = float(np.max(r_prev[others])), False
        held_at = None
        for _ in range(CHORD_CYCLES):
            step = -gb / slope
            hold = abs(step) <= HOLD_STEP and rf <= NOISE_CAP and held_at != sb
            s = sb if hold else sb + step
            x[k] = s * scale[k]
            g, r = cycle()
            rf_new = float(np.max(r[others]))
            if hold:
                held_at = sb
                if rf_new <= NOISE_CAP and rf <= NOISE_CAP:
                    noise_g = max(noise_g, abs(g - gb))
            elif abs(s - sb) >= 1e-3 and rf <= SETTLE_G:
                cand = (g - gb) / (s - sb)
                if 1.0 / 3.0 <= cand / slope <= 3.0:
                    slope = cand
            if fast_seen and rf_new <= NOISE_CAP and rf_new > 0.5 * rf:
                # the plain iteration, having contracted many-fold per cycle, no longer does:
                # each state's residual over these two cycles is its noise (a state contracting
                # slowly throughout never shows it)
                shown[others] = np.maximum(shown[others], np.maximum(r, r_prev)[others])
            fast_seen = fast_seen or rf_new <= FAST_RATIO * rf
            sb, gb, rf, r_prev = s, g, rf_new, r
            dist = abs(gb / slope)
            if abs(gb) <= tol and dist <= min(max(tol, 2.0 * noise_g / abs(slope)), NOISE_CAP) \
                    and (rf <= tol or rf <= float(np.max(shown[others]))):
                break
        else:
            return give_up()
        stall = shown.copy()
        stall[k] = noise_g  # the drift's own noise: its residual stays within the tolerance
        reach = np.zeros(n)
        r_prev = None
        # the full cycle from the start of the last one solved: the same cycle integrated twice,
        # on other steps (the energies join the step-size control), shows the integration's noise
        # in each state directly
        x, cheap = last
        for _ in range(FINAL_TRIES):
            x1, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=True)
            solves += 1
            f = x1 - x
            if cheap is not None:
                stall = np.maximum(stall, np.abs(x1 - cheap) / scale)
                cheap = None
            reach[k] = 2.0 * stall[k] / abs(slope)
            # the fast states settled by plain iteration: each one's distance is its residual
            # (they contract many-fold per cycle); the slow state's is the chord's
            dx = f.copy()
            dx[k] = dist * scale[k]
            r = np.abs(f) / scale
            if r_prev is not None and fast_seen and np.max(r[others]) > 0.5 * np.max(r_prev[others]):
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
        pass
    return give_up()
