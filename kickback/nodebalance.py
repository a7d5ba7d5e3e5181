"""Root of a node's current balance: a nondecreasing function with known vertical points."""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq

from kickback.errors import SolverError


def solve_monotone(resid, thresholds, scale: float, with_slope=None) -> float:
    """Root of a nondecreasing function that may jump to ±inf at known vertical points.

    Parameters
    ----------
    resid : callable — residual [A] of the node's current balance at a node voltage [V]
    thresholds : iterable of float — [V] voltages where a law is vertical
    scale : float — [V] typical voltage, for the first bracket
    with_slope : callable or None — ``(residual [A], its derivative [S])`` at a node voltage, for
        Newton's method inside the bracket (else Brent's method)

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
            return bracketed(resid, lower, t - d, scale, with_slope)
        if above >= 0:
            return t
        lower = t + d
    return bracketed(resid, lower, math.inf, scale, with_slope)


def bracketed(resid, a: float, b: float, scale: float, with_slope=None) -> float:
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
    xtol = 1e-14 * max(1.0, abs(a), abs(b))
    if with_slope is not None:
        x = _newton(with_slope, a, b, ra, rb, xtol)
        if x is not None:
            return x
    return brentq(resid, a, b, xtol=xtol, rtol=4 * np.finfo(float).eps)


def _newton(with_slope, a: float, b: float, ra: float, rb: float, xtol: float) -> float | None:
    """Root in the bracket [a, b] (ra < 0 < rb) by Newton's method on the balance's slope (the
    branches' conductances), from the chord's root, safeguarded by bisection: a step that leaves
    the shrinking bracket, or one not at most half the step before last (Newton creeping down a
    diode's exponential from far up it, n·V_T a step), bisects instead (W. H. Press et al.,
    Numerical Recipes, 3rd ed., §9.4, from memory). Each iterate costs one evaluation of the
    branch laws where Brent's method spends ~15 on a diode's or varistor's exponential (a node
    without capacitance is solved at every evaluation of the rates: wide-range cases 6079,
    9182). None after 100 iterates (the caller falls back on Brent's method)."""
    x = a - ra * (b - a) / (rb - ra)
    if not a < x < b:  # an end's residual overflowed (a law without series resistance far up)
        x = 0.5 * (a + b)
    step_before = step = b - a
    for _ in range(100):
        r, g = with_slope(x)
        if r == 0:
            return x
        if r < 0:
            a = x
        else:
            b = x
        tol = xtol + 4 * np.finfo(float).eps * abs(x)
        xn = x - r / g if 0 < g < math.inf else math.nan
        if abs(xn - x) <= tol and a <= xn <= b:
            return xn  # a step below the tolerance (at the rounding level it may round to x)
        step_before, step = step, abs(xn - x)
        if not (a < xn < b and step <= 0.5 * step_before):  # also a NaN step
            xn = 0.5 * (a + b)
            step = abs(xn - x)
        if b - a <= tol:
            return xn
        x = xn
    return None
