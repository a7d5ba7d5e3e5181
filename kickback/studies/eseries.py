"""Preferred number series E12 and E24 (IEC 60063) and rounding to them.

The values are the standard's table, hard-coded: they are not a rounding of 10^(k/n)
(e.g. E24 has 2.7, 3.0, 3.3 … 8.2, 9.1 where 10^(k/24) rounds to 2.6, 2.9, 3.2 … 8.3, 9.1).

References
----------
IEC 60063:2015, Preferred number series for resistors and capacitors (values from memory).
"""

from __future__ import annotations

import math

E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)
E24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
       3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)
SERIES = {"E12": E12, "E24": E24}


def values_between(lo: float, hi: float, series: str = "E24") -> list[float]:
    """Every value of ``series`` in [lo, hi] (any decade), ascending.

    Parameters
    ----------
    lo, hi : float — bounds, same unit as the values (lo > 0)
    series : str — "E12" or "E24"
    """
    if lo <= 0 or hi < lo:
        raise ValueError("need 0 < lo <= hi")
    base = SERIES[series]
    out = []
    for decade in range(math.floor(math.log10(lo)) - 1, math.ceil(math.log10(hi)) + 1):
        for m in base:
            x = float(f"{m * 10.0 ** decade:.6g}")
            if lo * (1 - 1e-12) <= x <= hi * (1 + 1e-12):
                out.append(x)
    return sorted(set(out))


def round_down(x: float, series: str = "E24") -> float:
    """Largest ``series`` value ≤ x (x > 0)."""
    return values_between(x / 10.5, x, series)[-1]


def round_up(x: float, series: str = "E24") -> float:
    """Smallest ``series`` value ≥ x (x > 0)."""
    return values_between(x, x * 10.5, series)[0]


def nearest(x: float, series: str = "E24") -> float:
    """``series`` value nearest to x on a logarithmic scale."""
    a, b = round_down(x, series), round_up(x, series)
    return a if math.log(x / a) <= math.log(b / x) else b
