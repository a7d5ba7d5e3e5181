"""Breakdown devices: Zener diode, TVS (uni- and bidirectional) and metal-oxide varistor."""

from __future__ import annotations

import math

import numpy as np

from kickback.models.base import ElementLaw, LinearPieces, PiecewiseLinearLaw

#: forward drop assumed for a unidirectional Zener/TVS when the case gives none
#: (common practice, no source).
DEFAULT_FORWARD_DROP = 0.7


def breakdown_element(voltage: float, dynamic_resistance: float = 0.0, *, bidirectional: bool = False,
                      forward_voltage: float | None = None, kind: str = "Zener") -> PiecewiseLinearLaw:
    """Zener or TVS as a piecewise-linear law, oriented to break down when ``sw`` rises.

    Unidirectional: breakdown at ``+voltage``; conducts forward at ``−forward_voltage``.
    Bidirectional: breakdown at ``±voltage``. The dynamic resistance applies on both sides.

    Parameters
    ----------
    voltage : float — [V] breakdown voltage
    dynamic_resistance : float — [Ω]
    bidirectional : bool
    forward_voltage : float or None — [V] forward drop (unidirectional only)

    .. math:: v = V_Z + r_Z i \\quad (i > 0)
    """
    vf = DEFAULT_FORWARD_DROP if forward_voltage is None else forward_voltage
    v_rev = -voltage if bidirectional else -vf
    pieces = LinearPieces(voltage, dynamic_resistance, v_rev, dynamic_resistance)
    sides = "bidirectional" if bidirectional else "unidirectional"
    return PiecewiseLinearLaw(pieces, f"{kind} ({sides}, {voltage:.4g} V, r_d = {dynamic_resistance:.3g} Ω)")


class Varistor(ElementLaw):
    """Metal-oxide varistor, symmetric power law through (V_1, I_1).

    .. math:: i = I_1 \\,\\mathrm{sign}(v)\\,|v/V_1|^{\\alpha}

    References
    ----------
    L. M. Levinson and H. R. Philipp, "Zinc oxide varistors — a review",
    American Ceramic Society Bulletin 65(4), 1986 (the power-law characteristic).
    """

    def __init__(self, voltage: float, exponent: float, at_current: float = 1e-3):
        self.v1 = voltage
        self.alpha = exponent
        self.i1 = at_current
        self.band = (0.0, 0.0)
        self.i_floor = -np.inf
        self.description = f"varistor ({voltage:.4g} V at {at_current:.3g} A, α = {exponent:.3g})"

    def voltage(self, i):
        i = np.asarray(i, dtype=float)
        return np.sign(i) * self.v1 * np.abs(i / self.i1) ** (1.0 / self.alpha)

    def current(self, v):
        v = np.asarray(v, dtype=float)
        with np.errstate(over="ignore"):
            return np.sign(v) * self.i1 * np.abs(v / self.v1) ** self.alpha

    def voltage_at(self, i: float) -> float:
        """Scalar :meth:`voltage` [V] at current ``i`` [A]."""
        return math.copysign(self.v1 * abs(i / self.i1) ** (1.0 / self.alpha), i) if i else 0.0
