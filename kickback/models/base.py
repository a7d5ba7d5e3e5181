"""The common interface of two-terminal element laws."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


class ElementLaw:
    """A monotone current–voltage law of one element, oriented to conduct when ``sw`` rises.

    Subclasses define :meth:`voltage` (v of i, for i ≠ 0), :meth:`current` (i of v, the exact
    inverse, ±inf beyond a vertical segment), the zero-current band ``band = (lo, hi)`` [V]
    (the voltages the element holds off with no current) and ``i_floor`` [A] (the most
    negative current it can carry; 0 for a blocking element).
    """

    #: short description of the model, shown in reports ("Shockley diode, n=1.9, …")
    description: str = ""
    band: tuple[float, float] = (0.0, 0.0)
    i_floor: float = -math.inf

    def voltage(self, i):  # pragma: no cover - interface
        raise NotImplementedError

    def current(self, v):  # pragma: no cover - interface
        raise NotImplementedError

    def pieces(self) -> LinearPieces | None:
        """Piecewise-linear description, or None for a smooth nonlinear law."""
        return None


@dataclass(frozen=True)
class LinearPieces:
    """A law that is linear on each side of zero current.

    For ``i > 0``: ``v = v_fwd + r_fwd·i``; for ``i < 0``: ``v = v_rev + r_rev·i``;
    with no current any voltage in ``[v_rev, v_fwd]``. ``v_rev = -inf`` means the
    element never conducts backwards.

    Parameters
    ----------
    v_fwd : float — [V] forward conduction onset
    r_fwd : float — [Ω] forward incremental resistance (0: vertical)
    v_rev : float — [V] reverse conduction onset (≤ v_fwd, may be -inf)
    r_rev : float — [Ω] reverse incremental resistance
    """

    v_fwd: float
    r_fwd: float
    v_rev: float
    r_rev: float

    def __add__(self, other: LinearPieces) -> LinearPieces:
        return LinearPieces(self.v_fwd + other.v_fwd, self.r_fwd + other.r_fwd,
                            self.v_rev + other.v_rev, self.r_rev + other.r_rev)

    def voltage(self, i):
        i = np.asarray(i, dtype=float)
        with np.errstate(invalid="ignore"):
            fwd = self.v_fwd + self.r_fwd * i
            rev = self.v_rev + self.r_rev * i if math.isfinite(self.v_rev) else np.full_like(i, -np.inf)
        return np.where(i > 0, fwd, np.where(i < 0, rev, np.clip(0.0, self.v_rev, self.v_fwd)))

    def current_at(self, v: float) -> float:
        """Scalar :meth:`current` (exact), for the engine's inner loop."""
        if v > self.v_fwd:
            return (v - self.v_fwd) / self.r_fwd if self.r_fwd > 0 else math.inf
        if v < self.v_rev:
            return (v - self.v_rev) / self.r_rev if self.r_rev > 0 else -math.inf
        return 0.0

    def slope_at(self, v: float) -> float:
        """Incremental conductance di/dv [S] at voltage ``v`` [V] (inf on a vertical piece)."""
        if v > self.v_fwd:
            return 1.0 / self.r_fwd if self.r_fwd > 0 else math.inf
        if v < self.v_rev:
            return 1.0 / self.r_rev if self.r_rev > 0 else math.inf
        return 0.0

    def voltage_at(self, i: float) -> float:
        """Scalar :meth:`voltage` for a non-zero current [A]."""
        if i > 0:
            return self.v_fwd + self.r_fwd * i
        if i < 0:
            return self.v_rev + self.r_rev * i
        return min(max(0.0, self.v_rev), self.v_fwd)

    def current(self, v, r_min: float = 0.0):
        """Current at voltage ``v`` [V]; zero resistances are raised to ``r_min`` [Ω] (0: exact)."""
        v = np.asarray(v, dtype=float)
        rf = max(self.r_fwd, r_min)
        rr = max(self.r_rev, r_min)
        with np.errstate(divide="ignore", invalid="ignore"):
            fwd = np.where(v > self.v_fwd, (v - self.v_fwd) / rf if rf > 0 else np.inf, 0.0)
            if math.isfinite(self.v_rev):
                rev = np.where(v < self.v_rev, (v - self.v_rev) / rr if rr > 0 else -np.inf, 0.0)
            else:
                rev = 0.0
        return fwd + rev


class PiecewiseLinearLaw(ElementLaw):
    """An element whose law is one :class:`LinearPieces`."""

    def __init__(self, pieces: LinearPieces, description: str):
        self._pieces = pieces
        self.description = description
        self.band = (pieces.v_rev, pieces.v_fwd)
        self.i_floor = -math.inf if math.isfinite(pieces.v_rev) else 0.0

    def pieces(self) -> LinearPieces:
        return self._pieces

    def voltage(self, i):
        return self._pieces.voltage(i)

    def current(self, v):
        return self._pieces.current(v)
