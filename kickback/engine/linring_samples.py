"""Where the closed-form ring of :mod:`kickback.engine.linring` is sampled.

The figures are read off the samples (:mod:`kickback.figures`): a sampled maximum of the node
voltage and the last sample of the coil current at or above the release current. A ring of
thousands of periods is sampled finely over its first periods only, then ever more sparsely,
so the times where those figures are decided are found on the closed form and added: every
maximum of the node voltage the ring's envelope still allows above the highest one found, and
the last maximum of |i| at or above the release current with its crossing after it.

A sampled maximum lies within half a grid step h of the true one, so it is lower by at most
``½·max|x''|·(h/2)²``, with ``|x''| ≤ Σ|a_k|·|λ_k|²`` for the modal sum ``x = Σ a_k e^{λ_k t}``
(Taylor's theorem about the maximum, where x' = 0); the modes decay, so an envelope
``Σ|a_k| e^{Re λ_k t}`` bounds every later value.

References
----------
C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 8 (RLC rings);
R. P. Brent, Algorithms for Minimization without Derivatives, Prentice-Hall, 1973, ch. 5
(the bounded scalar minimisation, scipy's ``minimize_scalar``).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq, minimize_scalar

GRID = 16  # grid points per fastest period
FINE_PERIODS = 20  # periods sampled on the fine grid from the ring's start
CHUNK = 200_000


def steps(t0, t_end, period, extra=()):
    """Sampling grid: 1/16 of a period over the first 20 periods, then growing geometrically (the
    ring's amplitude only decays), ~1500 points at most; plus the times ``extra`` [s]."""
    fine = np.arange(t0, min(t_end, t0 + FINE_PERIODS * period), period / GRID)
    rest = np.geomspace(max(fine[-1] - t0, period), t_end - t0, 600) + t0 if t_end > fine[-1] else np.array([])
    # (t_end − t0) + t0 may round an ulp past t_end: a sample there lies in no phase
    extra = np.clip(np.asarray(list(extra), dtype=float), t0, t_end)
    return np.unique(np.concatenate([fine, np.minimum(rest, t_end), extra, [t0, t_end]]))


def _curvature_margin(amp, lam, dt) -> float:
    """How far below a maximum of ``Re Σ amp_k e^{λ_k t}`` its nearest sample on a grid of
    ``dt`` [s] can lie (see the module's note)."""
    return 0.5 * float(np.sum(np.abs(amp) * np.abs(lam) ** 2)) * (0.5 * dt) ** 2


def _maximise(f, a, b) -> float:
    """Time [s] of the largest ``f`` in [a, b] (one maximum inside, from the grid), located in
    the offset from ``a``: the method's relative tolerance then applies to the step, not to t."""
    res = minimize_scalar(lambda u: -f(a + u), bounds=(0.0, b - a), method="bounded",
                          options={"xatol": 1e-12 * (b - a)})
    return a + float(res.x)


def node_peaks(sol, node, t0, t_end, dt) -> list[float]:
    """Local maxima [s] of the node voltage over the ring, refined: all of them over the first
    20 periods, then those that may top the highest found, for as long as the ring's envelope
    still reaches above it.

    ``node`` is (∇v, v at x_∞) [V per state unit, V]: the node voltage is affine in the ring's
    state on the pieces the ring keeps to (:func:`kickback.engine.linring._node_affine`).
    """
    grad, v_inf = node
    gk = grad @ sol.amp  # each mode's share of the node voltage
    gr = float(grad @ sol.ramp)
    lam = sol.lam

    def v(ts):
        s = np.atleast_1d(np.asarray(ts, dtype=float)) - t0
        return v_inf + np.real(np.exp(np.outer(s, lam)) @ gk) + gr * s

    def envelope(t):
        s = t - t0
        return v_inf + float(np.sum(np.abs(gk) * np.exp(lam.real * s))) + max(gr * s, 0.0)

    margin = _curvature_margin(gk, lam, dt)
    out, best, t, first = [], -math.inf, t0, True
    while t < t_end and (first or envelope(t) > best):
        ts = t + dt * np.arange(0, FINE_PERIODS * GRID + 1)
        ts = np.append(ts[ts < t_end], t_end)
        x = v(ts)
        floor = -math.inf if first else best - margin
        spans = [(ts[k - 1], ts[k + 1]) for k in
                 np.flatnonzero((x[1:-1] >= x[:-2]) & (x[1:-1] > x[2:]) & (x[1:-1] >= floor)) + 1]
        # a maximum within a step of either end (the ring may start with the node still rising:
        # wide-range case 232, its peak 19 ns after the start, a grid step of 1.2 µs)
        if first and x.size > 1 and x[0] > x[1]:
            spans.insert(0, (ts[0], ts[1]))
        if ts[-1] >= t_end and x.size > 1 and x[-1] > x[-2] and x[-1] >= floor:
            spans.append((ts[-2], ts[-1]))
        first = False
        for a, b in spans:
            tp = _maximise(lambda s: float(v(s)[0]), a, b)
            out.append(tp)
            best = max(best, float(v(tp)[0]))
        best = max(best, float(np.max(x)))
        if ts.size < 3:
            break
        t = float(ts[-2])  # the chunks overlap by a step: a maximum at a seam is seen
    return out


def release_times(sol, t0, t_end, dt, level) -> list[float]:
    """The last maximum of |i| at or above ``level`` [A] in the ring and the time |i| falls
    through ``level`` after it ([s], both refined on the closed form); [] when |i| stays below
    ``level`` or is still at or above it at the ring's end (the crossing is then in a later
    phase, whose samples carry it)."""
    a, lam, i_inf = sol.amp[0], sol.lam, float(sol.x_inf[0])

    def mag(ts):
        return np.abs(sol.dynamic(ts)[0])

    if float(mag(t_end)[0]) >= level:
        return []
    # no maximum reaches the level once the envelope |i_∞| + Σ|a_k| e^{Re λ_k s} is below it
    bound = lambda t: abs(i_inf) + float(np.sum(np.abs(a) * np.exp(lam.real * (t - t0)))) - level  # noqa: E731
    t_hi = t_end if bound(t_end) > 0 else (t0 if bound(t0) <= 0 else brentq(bound, t0, t_end))
    margin = _curvature_margin(a, lam, dt)
    n = int(math.ceil((t_hi - t0) / dt))
    hi = n
    while hi > 0:  # backwards, chunk by chunk: the last maximum is wanted
        lo = max(hi - CHUNK, 0)
        ts = np.minimum(t0 + dt * np.arange(max(lo - 1, 0), min(hi + 1, n) + 1), t_end)
        x = mag(ts)
        cand = np.flatnonzero((x[1:-1] >= x[:-2]) & (x[1:-1] >= x[2:]) & (x[1:-1] >= level - margin)) + 1
        for k in cand[::-1]:
            tp = _maximise(lambda s: float(mag(s)[0]), ts[k - 1], ts[k + 1])
            if float(mag(tp)[0]) >= level:
                return [tp, _fall_through(mag, tp, t_end, dt, level)]
        hi = lo
    return []


def _fall_through(mag, tp, t_end, dt, level) -> float:
    """First time after ``tp`` [s] at which |i| (``mag``) falls to ``level``."""
    t = tp
    while t < t_end:
        ts = np.append(t + dt * np.arange(1, 4 * GRID + 1), t_end)
        ts = ts[ts <= t_end]
        k = np.flatnonzero(mag(ts) < level)
        if k.size:
            b = float(ts[k[0]])
            a = float(ts[k[0] - 1]) if k[0] > 0 else t
            return brentq(lambda s: float(mag(s)[0]) - level, a, b, xtol=1e-15 * b, rtol=4 * np.finfo(float).eps)
        t = float(ts[-1])
    return t_end
