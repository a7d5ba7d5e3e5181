"""The stated piecewise-linear fit of a smooth law v(i) (Shockley diode, varistor) for the batch
engine: its node currents, chosen once so that the fitted current stays within a stated bound of
the exact law's, and the chords through them (the bound and its consequences are described in
:mod:`kickback.engine.batch_laws`).

References
----------
A. S. Sedra and K. C. Smith, Microelectronic Circuits, ch. 4 (piecewise-linear models of the
diode's exponential law).
"""

from __future__ import annotations

import math

import numpy as np

#: the fit's stated current error: relative (to the exact current) and absolute (× i0)
FIT_REL = 0.01
FIT_ABS = 1e-4
#: the fit's range: from the figures' conduction threshold to FIT_TOP × i0
FIT_FLOOR = 1e-6
FIT_TOP = 2.0
#: smallest varistor exponent for which the chord error stays within the log law's
FIT_MIN_EXPONENT = 1.0


def chord_error(q: float) -> float:
    """Largest relative current error of a chord of ``v = ln i`` over a current ratio ``q`` [-].

    At a voltage a share ``x`` of the way along the chord, the chord's current is
    ``i_a·(1 + (q − 1)·x)`` and the law's ``i_a·q^x``; the ratio is largest at
    ``x = 1/ln q − 1/(q − 1)`` (where its derivative vanishes).
    """
    lq = math.log(q)
    x = 1.0 / lq - 1.0 / (q - 1.0)
    return (1.0 + (q - 1.0) * x) / math.exp(x * lq) - 1.0


def _ratio_for(err: float) -> float:
    """The largest chord ratio q whose :func:`chord_error` is at most ``err`` (bisection)."""
    lo, hi = 1.0 + 1e-9, 1e6
    for _ in range(200):
        mid = math.sqrt(lo * hi)
        lo, hi = (mid, hi) if chord_error(mid) <= err else (lo, mid)
    return lo


#: the fit's chords pass through (x·i0, v(FIT_SCALE·x·i0)): the law read at a current FIT_SCALE×
#: higher, so that the chord error (fitted current ≥ exact) is shared evenly on both sides
FIT_SCALE = 1.0 + FIT_REL


def _fit_nodes() -> tuple:
    """Node currents (× i0) of the fit, ascending.

    A chord over the ratio q of the law read at FIT_SCALE·i gives a current between i/FIT_SCALE
    and i·(1 + e)/FIT_SCALE, e = :func:`chord_error` (q); from the top down, each chord is as long
    as keeps that within max(FIT_REL·i, FIT_ABS·i0) (the current at the chord's top is at most
    FIT_SCALE times its upper node). The last node is at most FIT_ABS/FIT_SCALE: below it one
    chord from zero current, whose error is below FIT_ABS·i0.
    """
    c = FIT_SCALE
    x = FIT_TOP
    nodes = [x]
    bottom = FIT_ABS / c
    while x > bottom:
        e = max(c * (1.0 + FIT_REL) - 1.0, FIT_ABS / x + c - 1.0)
        x = max(x / _ratio_for(e), bottom)
        nodes.append(x)
    return tuple(reversed(nodes))


#: node currents of the fit (× i0); the fitted law leaves zero current at v(FIT_FLOOR·i0)
FIT_NODES = _fit_nodes()


def chords(vfun, i0, n):
    """Forward segments of the stated fit of v(i): chords between consecutive nodes
    ``x = i0 × FIT_NODES`` through (x, v(FIT_SCALE·x)), the first from (0, v(FIT_FLOOR·i0)) (see
    the module docstring)."""
    xs = [np.zeros(n)] + [x * i0 for x in FIT_NODES]
    vs = [vfun(FIT_FLOOR * i0)] + [vfun(FIT_SCALE * x) for x in xs[1:]]
    segs = []
    for k in range(len(xs) - 1):
        r = (vs[k + 1] - vs[k]) / (xs[k + 1] - xs[k])
        hi = xs[k + 1] if k < len(xs) - 2 else np.full(n, np.inf)
        segs.append((vs[k] - r * xs[k], r, xs[k], hi))
    return segs


def describe() -> str:
    return (f"{len(FIT_NODES)} chords through i/i0 = {FIT_NODES[0]:.3g} … {FIT_NODES[-1]:g}; current within "
            f"max({FIT_REL:.0%}, {FIT_ABS:g}·i0) of the exact law from {FIT_FLOOR:g}·i0 to {FIT_TOP:g}·i0")


