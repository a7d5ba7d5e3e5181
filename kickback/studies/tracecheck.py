"""Can a measured current trace be fitted? Length, transient, direction, clipping.

Also the robust noise estimate used by the fit and the block averaging of long records.
Problems are :class:`FitError` with a one-line message ``SOURCE: what is wrong (expected …)``.
"""

from __future__ import annotations

import math

import numpy as np

from kickback.errors import KickbackError

__all__ = ["MAX_POINTS", "MIN_POINTS", "MIN_SIGNAL_TO_NOISE", "FitError", "average_blocks", "check_trace",
           "noise_sigma"]

MIN_POINTS = 20
#: more samples than this are averaged in consecutive blocks before fitting
MAX_POINTS = 10_000
#: the transient must exceed this many noise standard deviations
MIN_SIGNAL_TO_NOISE = 10.0


class FitError(KickbackError, ValueError):
    """A trace that cannot be fitted; ``str`` is ``SOURCE: message``."""

    def __init__(self, source: str, message: str):
        self.source = source
        self.message = message
        super().__init__(f"{source}: {message}")


def noise_sigma(x: np.ndarray) -> float:
    """Robust noise standard deviation [A] from second differences.

    For white noise of deviation σ, x[k+1] − 2·x[k] + x[k−1] has deviation √6·σ, while a smooth
    signal contributes only its curvature; the median absolute deviation (× 1.4826, its
    Gaussian scale) ignores the few samples where the signal bends sharply.
    """
    if x.size < 4:
        return 0.0
    d = np.diff(x, 2)
    return float(1.4826 * np.median(np.abs(d - np.median(d))) / math.sqrt(6.0))


def _clipped(i: np.ndarray, sigma: float, span: float) -> str | None:
    """Why the trace looks clipped at its top, or None.

    Clipped: many samples sit exactly at the maximum, far more than at the level just below
    (an input at its limit), and either the signal ran into that level steeply (it rose by more
    than 5 σ and 2 % of the span over the samples just before), or the trace is noisy
    elsewhere (σ above the step below the maximum) yet perfectly flat there. A plateau that a
    noise-free or weakly noisy signal approaches gradually is not clipping.
    """
    top = i.max()
    at_top = np.nonzero(i == top)[0]
    below = i[i < top]
    if not below.size:
        return None
    step = float(top - below.max())
    n_next = int(np.count_nonzero(below == below.max()))
    if at_top.size < max(5, i.size // 100) or at_top.size <= 4 * n_next:
        return None
    m = max(5, i.size // 100)
    k = int(at_top[0])
    steep = k >= m and top - i[k - m] > max(5 * sigma, 0.02 * span)
    if steep or sigma > step:
        return f"{at_top.size} samples sit exactly at the maximum {top:.4g} A"
    return None


def check_trace(t, i, kind: str, source: str):
    """Polarity, length, transient and clipping checks; returns (i with sign fixed, notes)."""
    notes = []
    after = t >= 0
    n_after = int(after.sum())
    if n_after < MIN_POINTS:
        raise FitError(source, f"trace too short: {n_after} samples at t >= 0 (after the trigger), "
                               f"expected at least {MIN_POINTS}")
    lo, hi = np.percentile(i, [1, 99])
    if abs(lo) > abs(hi):
        i = -i
        lo, hi = -hi, -lo
        notes.append("the current is negative-going; fitted with its sign reversed")
    span = hi - lo
    sigma = noise_sigma(i[after])
    if not span > MIN_SIGNAL_TO_NOISE * sigma or span <= 0:
        raise FitError(source, f"no transient: the current stays within {span:.3g} A with noise "
                               f"{sigma:.3g} A (expected a {kind} of at least {MIN_SIGNAL_TO_NOISE:g}× the noise)")
    ia = i[after]
    m = max(3, ia.size // 20)
    head, tail = float(np.median(ia[:3])), float(np.median(ia[-m:]))
    if kind == "rise" and tail - head < 0.3 * span:
        raise FitError(source, "the current does not rise over the trace (expected a rise from zero at "
                               "switch-on; a falling trace is --kind decay)")
    if kind == "decay" and head - tail < 0.3 * span:
        raise FitError(source, "the current does not fall over the trace (expected a decay at switch-off; "
                               "a rising trace is --kind rise)")
    if kind == "rise" and head > 0.2 * span:
        raise FitError(source, f"the current at t = 0 is already {100 * head / span:.0f} % of its span "
                               "(expected the rise to start near zero; set --trigger to the switch-on instant)")
    why = _clipped(i, sigma, span)
    if why:
        raise FitError(source, f"trace clipped: {why} (a flat top at the input's limit; expected the whole "
                               "transient inside the range — re-measure with a larger range)")
    return i, notes


def average_blocks(t, i):
    m = math.ceil(t.size / MAX_POINTS)
    if m <= 1:
        return t, i, None
    n = (t.size // m) * m
    tb = t[:n].reshape(-1, m).mean(axis=1)
    ib = i[:n].reshape(-1, m).mean(axis=1)
    return tb, ib, f"averaged {m} consecutive samples per point ({t.size} → {tb.size} points)"
