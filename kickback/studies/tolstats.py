"""Mergeable statistics of a tolerance study's figures: a fine histogram on bins fixed before the
run, merged from per-chunk counts, giving percentiles within a stated bracket and the histogram
plot's counts exactly.

The bins. A finite float64 ``x ≥ 0`` falls in bin ``bits(x) >> (52 − MANTISSA_BITS)``: the IEEE 754
bit pattern of a non-negative double grows with its value, so keeping the sign, the exponent and
the top :data:`MANTISSA_BITS` bits of the significand cuts every binade [2^e, 2^(e+1)) into
2^MANTISSA_BITS equal bins (a log-linear histogram). A negative ``x`` falls in the mirror bin
``−1 − ((bits(−x) − 1) >> …)``, left-closed like the positive ones. The bins depend on nothing but
the number format: they are fixed before the run, need no first pass and no range, and integer
operations alone place a value in its bin, so every worker on every machine counts the same.
Each bin is at most 2^−MANTISSA_BITS (0.0244 %) of its lower edge wide; the bins next to zero
hold the subnormal numbers, below 2^−1022, and are 2^−1074 · 2^(52 − MANTISSA_BITS) ≈ 5.4·10⁻³¹²
wide (a bracket there is that wide, in absolute terms).

A chunk's summary (:func:`summarize`) is its bins with their counts (only the bins used, at
most one per sample), the number of non-finite values, and its exact minimum and maximum;
:func:`merge` adds summaries up (a sum of integer counts, a min of mins, a max of maxes), so the
merged summary is the same whatever the chunks, their order or the worker count.

A percentile (:func:`percentile`) is numpy's default ("linear": between the order statistics
below and above the rank (N − 1)·p/100) bracketed by the bins holding those two order statistics,
clipped to the exact minimum and maximum, and weighted as numpy weighs the two: numpy's value
on the gathered samples lies in the bracket, at most one bin wide (2^−MANTISSA_BITS of its value,
plus a few units in the last place for rounding); the midpoint is reported, within half a bin of
numpy's. The 0 and 100 percentiles are exact.

The plot's bins (:func:`plot_bins`) are unions of the fine bins: equal widths of a power of two,
2^k, on multiples of 2^k, with k the smallest that gives at most ``target`` bins over the data
and no coarser than the fine bins at the largest magnitude. Every fine bin then lies in one plot
bin, so the plot's counts are exact: they equal ``numpy.histogram`` of the samples with the same
edges.

References
----------
IEEE 754-2019, "binary64" (the bit layout, ordered like the values for non-negative numbers);
numpy documentation, ``numpy.percentile`` (method "linear") and ``numpy.histogram`` (left-closed
bins, the last one closed).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: significand bits kept in a bin's key: each binade cut into 4096 bins (0.0244 % wide at most)
MANTISSA_BITS = 12
_SHIFT = 52 - MANTISSA_BITS
#: the widest a bin is, relative to its lower edge: the widest bracket of a percentile
BIN_REL_WIDTH = 2.0 ** -MANTISSA_BITS
#: the width of the bins next to zero (subnormal numbers): the widest bracket in absolute terms
BIN_ABS_WIDTH = 2.0 ** (-1074 + _SHIFT)


@dataclass(frozen=True)
class Summary:
    """Per-chunk or merged counts of one figure.

    Attributes
    ----------
    keys : int64 array — the bins used, sorted (see the module docstring)
    counts : int64 array — samples per bin
    n_other : int — values not counted: NaN (a time that does not occur, a sample not simulated)
    low, high : float — exact minimum and maximum of the counted values (NaN when none)
    """

    keys: np.ndarray
    counts: np.ndarray
    n_other: int
    low: float
    high: float

    @property
    def n(self) -> int:
        """Values counted (finite ones)."""
        return int(self.counts.sum())


def bin_keys(a) -> np.ndarray:
    """The bin of every value of ``a`` (finite float64 values), as int64 keys ordered like the values."""
    a = np.asarray(a, dtype=np.float64)
    bits = np.abs(a).view(np.int64)
    neg = a < 0  # −0.0 counts as +0.0
    return np.where(neg, -1 - ((bits - 1) >> _SHIFT), np.where(neg, 0, bits) >> _SHIFT)


def bin_edges(keys) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper edges of the bins ``keys``: every value of bin k lies in [lower, upper)."""
    keys = np.asarray(keys, dtype=np.int64)
    pos = keys >= 0
    m = np.where(pos, keys, -1 - keys)
    a = (m << _SHIFT).view(np.float64)
    b = ((m + 1) << _SHIFT).view(np.float64)
    return np.where(pos, a, -b), np.where(pos, b, -a)


def summarize(a) -> Summary:
    """One chunk's summary of the values ``a`` (non-finite values counted apart)."""
    a = np.asarray(a, dtype=np.float64)
    ok = np.isfinite(a)
    x = a[ok]
    keys, counts = np.unique(bin_keys(x), return_counts=True)
    low, high = (float(x.min()), float(x.max())) if x.size else (math.nan, math.nan)
    return Summary(keys.astype(np.int64), counts.astype(np.int64), int(a.size - x.size), low, high)


def empty() -> Summary:
    return Summary(np.zeros(0, np.int64), np.zeros(0, np.int64), 0, math.nan, math.nan)


def merge(a: Summary, b: Summary) -> Summary:
    """The summary of two chunks together: counts added bin by bin, the extremes of the two."""
    keys, inverse = np.unique(np.concatenate([a.keys, b.keys]), return_inverse=True)
    counts = np.zeros(keys.size, np.int64)
    np.add.at(counts, inverse, np.concatenate([a.counts, b.counts]))
    return Summary(keys, counts, a.n_other + b.n_other, float(np.fmin(a.low, b.low)), float(np.fmax(a.high, b.high)))


def percentile(s: Summary, p: float) -> tuple[float, float, float] | None:
    """numpy's ``percentile(values, p)`` bracketed: (midpoint, lower, upper), or None when no value
    was counted. Exact (the three equal) for p = 0 and p = 100."""
    n = s.n
    if n == 0:
        return None
    if p <= 0:
        return s.low, s.low, s.low
    if p >= 100:
        return s.high, s.high, s.high
    h = (n - 1) * (p / 100.0)
    below, above = math.floor(h), math.ceil(h)
    t = h - below
    cum = np.cumsum(s.counts)
    lo_edges, hi_edges = bin_edges(s.keys)

    def between(r):  # the bounds of the order statistic r (0-based): its bin, within [low, high]
        i = int(np.searchsorted(cum, r, side="right"))
        return max(float(lo_edges[i]), s.low), min(float(np.nextafter(hi_edges[i], -np.inf)), s.high)

    (lb, ub), (la, ua) = between(below), between(above)
    # numpy's value (1 − t)·x_below + t·x_above grows with both order statistics
    lo, hi = (1 - t) * lb + t * la, (1 - t) * ub + t * ua
    if t > 0:  # room for the rounding of that sum, here and in numpy (4 units in the last place)
        lo, hi = lo - 4 * float(np.spacing(abs(lo))), hi + 4 * float(np.spacing(abs(hi)))
    lo, hi = max(lo, s.low), min(hi, s.high)  # numpy's value lies between two of the values
    return 0.5 * (lo + hi), lo, hi


def plot_bins(s: Summary, target: int = 60) -> tuple[np.ndarray, np.ndarray]:
    """Edges and counts of a histogram of at most about ``target`` equal bins over the counted values,
    each a union of fine bins (see the module docstring): its counts are exact."""
    if s.n == 0:
        return np.zeros(0), np.zeros(0, np.int64)
    top = max(abs(s.low), abs(s.high))
    # the fine bins of the largest binade are 2^(e − MANTISSA_BITS) wide (top in [2^e, 2^(e+1)))
    k_min = math.frexp(top)[1] - 1 - MANTISSA_BITS if top > 0 else -1074
    span = s.high - s.low
    k = k_min if span <= 0 else max(k_min, math.frexp(span / target)[1])
    width = math.ldexp(1.0, k)
    lo_edges, _ = bin_edges(s.keys)
    cell = np.floor(lo_edges / width).astype(np.int64)
    first, last = int(math.floor(s.low / width)), int(math.floor(s.high / width))
    counts = np.zeros(last - first + 1, np.int64)
    np.add.at(counts, cell - first, s.counts)
    edges = np.arange(first, last + 2, dtype=np.float64) * width
    return edges, counts


def argmax_row(a) -> tuple[float, int] | None:
    """(largest finite value, its first index) of ``a`` — numpy's ``nanargmax`` — or None when no value
    is finite; merged over chunks by :func:`better_max`."""
    a = np.asarray(a, dtype=np.float64)
    if not np.isfinite(a).any():
        return None
    j = int(np.nanargmax(np.where(np.isfinite(a), a, np.nan)))
    return float(a[j]), j


def better_max(a, b):
    """The larger of two (value, global index, …) maxima; the earlier index on a tie (as ``nanargmax``)."""
    if a is None:
        return b
    if b is None:
        return a
    return b if (b[0] > a[0] or (b[0] == a[0] and b[1] < a[1])) else a
