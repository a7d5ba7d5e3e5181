"""Bounded worst-case search inside tolerance bands, many points per step.

A compass (pattern) search for the maximum of each figure: from its start, every round tries a
step of ±h along each toleranced value (clipped to the band), moves to the best improvement or
halves h when none improves. All figures' trial points of a round go to the engine together —
one batch of the batch engine, or one map over worker processes of the detailed engine — and a
point evaluated once serves every figure. Derivative-free and bounded: it needs no gradient of a
figure that has kinks (a clamp starting to conduct), and it stops after ``budget`` trial points
per figure or when h is below :data:`H_MIN` of the band.

References
----------
R. Hooke and T. A. Jeeves, "'Direct search' solution of numerical and statistical problems",
J. ACM 8(2), 1961; T. G. Kolda, R. M. Lewis and V. Torczon, "Optimization by direct search: new
perspectives on some classical and modern methods", SIAM Review 45(3), 2003 (compass search,
§3.1: the step halves after an unsuccessful round).
"""

from __future__ import annotations

import numpy as np

#: first step, as a fraction of each band
H_START = 0.25
#: the search of a figure stops when its step is below this fraction of each band
H_MIN = 1e-4


def compass_search(evaluate, starts: dict, lows, highs, budget: int) -> dict:
    """Maximise every figure of ``starts`` inside the box [lows, highs].

    Parameters
    ----------
    evaluate : callable — ``evaluate(X)`` for an (m, k) array of points → {figure: (m,) array}
        (NaN: the figure does not occur there, taken as −∞)
    starts : dict — figure → (x0 (k,), value at x0)
    lows, highs : (k,) arrays — the band of each value [SI]
    budget : int — trial points per figure at most

    Returns
    -------
    dict — figure → (best value, its point (k,))
    """
    lows, highs = np.asarray(lows, float), np.asarray(highs, float)
    k = lows.size
    span = np.where(highs > lows, highs - lows, 1.0)
    free = highs > lows
    cache: dict = {}
    state = {f: {"u": np.clip((np.asarray(x0, float) - lows) / span, 0.0, 1.0),
                 "v": _finite(v0), "x": np.asarray(x0, float), "h": H_START, "used": 0}
             for f, (x0, v0) in starts.items()}

    def key(u):
        return tuple(np.round(u, 12))

    active = [f for f in state if k and free.any()]
    while active:
        trials = {}
        need = {}
        for f in active:
            s = state[f]
            pts = []
            for i in np.nonzero(free)[0]:
                for sign in (1.0, -1.0):
                    u = s["u"].copy()
                    u[i] = min(1.0, max(0.0, u[i] + sign * s["h"]))
                    if key(u) != key(s["u"]):
                        pts.append(u)
                        if key(u) not in cache:
                            need[key(u)] = u
            trials[f] = pts
        if need:
            us = np.array(list(need.values()))
            vals = evaluate(lows + us * span)
            for j, kk in enumerate(need):
                cache[kk] = {f: vals[f][j] for f in vals}
        nxt = []
        for f in active:
            s = state[f]
            pts = trials[f]
            s["used"] += len(pts)
            best, best_u = s["v"], None
            for u in pts:
                v = _finite(cache[key(u)].get(f, np.nan))
                if v > best:
                    best, best_u = v, u
            if best_u is not None:
                s["u"], s["v"], s["x"] = best_u, best, lows + best_u * span
            else:
                s["h"] *= 0.5
            if s["h"] >= H_MIN and s["used"] < budget and pts:
                nxt.append(f)
        active = nxt
    return {f: (s["v"], s["x"]) for f, s in state.items()}


def _finite(v) -> float:
    v = float(v) if v is not None else np.nan
    return -np.inf if np.isnan(v) else v
