"""Root of a node's current balance: a nondecreasing function with known vertical points."""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq

from kickback.errors import SolverError


def solve_monotone(resid, thresholds, scale: float) -> float:
    """Root of a nondecreasing function that may jump to ±inf at known vertical points.

    Parameters
    ----------
    resid : callable — residual [A] of the node's current balance at a node voltage [V]
    thresholds : iterable of float — [V] voltages where a law is vertical
    scale : float — [V] typical voltage, for the first bracket

    Returns
    -------
    float — [V] the root; the threshold itself when the root sits on a vertical segment.

    Raises
    ------
    SolverError — no bracket found: nothing conducts the current.
    """
    cands = sorted({float(x) for x in thresholds if math.isfinite(x)})
    lower = -math.inf
    for t in cands:
        d = 1e-12 * max(1.0, abs(t))
        below, above = resid(t - d), resid(t + d)
        if below > 0:
            return bracketed(resid, lower, t - d, scale)
        if above >= 0:
            return t
        lower = t + d
    return bracketed(resid, lower, math.inf, scale)


def bracketed(resid, a: float, b: float, scale: float) -> float:
    span = max(scale, 1.0)
    if not math.isfinite(a) and not math.isfinite(b):
        a, b = -span, span
        ra, rb = resid(a), resid(b)
    elif not math.isfinite(a):
        rb = resid(b)
        a = b - span
        ra = resid(a)
    elif not math.isfinite(b):
        ra = resid(a)
        b = a + span
        rb = resid(b)
    else:
        ra, rb = resid(a), resid(b)
    grow = span
    for _ in range(200):
        if ra <= 0 <= rb:
            break
        grow *= 2.0
        if ra > 0:
            b, rb = a, ra
            a -= grow
            ra = resid(a)
        else:
            a, ra = b, rb
            b += grow
            rb = resid(b)
    else:
        raise SolverError("no conducting path takes the coil current (the switch-node voltage "
                          "would be unbounded): add a clamp, a breakdown voltage or a capacitance")
    if ra == 0:
        return a
    if rb == 0:
        return b
    return brentq(resid, a, b, xtol=1e-14 * max(1.0, abs(a), abs(b)), rtol=4 * np.finfo(float).eps)
