"""Breakdown devices: Zener diode, TVS (uni- and bidirectional) and metal-oxide varistor."""

from __future__ import annotations

import math

import numpy as np

from kickback.models.base import ElementLaw, LinearPieces, PiecewiseLinearLaw

#: forward drop assumed for a unidirectional Zener/TVS when the case gives none
#: (common practice, no source).
DEFAULT_FORWARD_DROP = 0.7


def breakdown_element(voltage: float, dynamic_resistance: float = 0.0, *, bidirectional: bool = False,
                      forward_voltage: float | None = None, kind: str = "Zener",
                      datasheet: str = "") -> PiecewiseLinearLaw:
    """Zener or TVS as a piecewise-linear law, oriented to break down when ``sw`` rises.

    Unidirectional: breakdown at ``+voltage``; conducts forward at ``−forward_voltage``.
    Bidirectional: breakdown at ``±voltage``. The dynamic resistance applies on both sides.

    Parameters
    ----------
    voltage : float — [V] breakdown voltage
    dynamic_resistance : float — [Ω]
    bidirectional : bool
    forward_voltage : float or None — [V] forward drop (unidirectional only)
    datasheet : str — the datasheet values the law was derived from, shown in its description

    .. math:: v = V_Z + r_Z i \\quad (i > 0)
    """
    vf = DEFAULT_FORWARD_DROP if forward_voltage is None else forward_voltage
    v_rev = -voltage if bidirectional else -vf
    pieces = LinearPieces(voltage, dynamic_resistance, v_rev, dynamic_resistance)
    sides = "bidirectional" if bidirectional else "unidirectional"
    given = f"datasheet {datasheet} → model " if datasheet else ""
    return PiecewiseLinearLaw(pieces, f"{kind} ({sides}, {given}{voltage:.4g} V, r_d = {dynamic_resistance:.3g} Ω)")


def breakdown_line(voltage_at, test_current, clamping_voltage=None, peak_pulse_current=None,
                   dynamic_resistance=0.0):
    """Breakdown voltage at zero current and dynamic resistance from datasheet points.

    A TVS datasheet gives the breakdown voltage V_BR at its test current I_T and the clamping
    voltage V_C at the peak pulse current I_PP; the straight line through both points is the
    piecewise-linear breakdown law. A Zener datasheet gives V_Z at I_ZT and the impedance Z_ZT
    there: the line through (I_ZT, V_Z) with slope Z_ZT (``dynamic_resistance``). Scalars or
    numpy arrays (one value per variant).

    Parameters
    ----------
    voltage_at : float or array
        V_BR (TVS) or V_Z (Zener) at ``test_current`` [V].
    test_current : float or array
        I_T or I_ZT [A].
    clamping_voltage : float or array or None
        V_C at ``peak_pulse_current`` [V]; None: the slope is ``dynamic_resistance``.
    peak_pulse_current : float or array or None
        I_PP [A].
    dynamic_resistance : float or array
        Slope when no clamping point is given (Z_ZT of a Zener) [Ω].

    Returns
    -------
    voltage : float or array
        Breakdown voltage at zero current V0 [V].
    dynamic_resistance : float or array
        r_d [Ω].

    .. math:: r_d = \\frac{V_C - V_{BR}}{I_{PP} - I_T}, \\qquad V_0 = V_{BR} - r_d I_T

    References
    ----------
    IEC 61643-321, Components for low-voltage surge protective devices — Specifications for
    avalanche breakdown diodes (the terms V_WM, V_BR at I_T, V_C at I_PP; from memory). The
    line through two points is elementary.
    """
    if clamping_voltage is not None:
        r_d = (clamping_voltage - voltage_at) / (peak_pulse_current - test_current)
    else:
        r_d = dynamic_resistance
    return voltage_at - r_d * test_current, r_d


class Varistor(ElementLaw):
    """Metal-oxide varistor, symmetric power law through (V_1, I_1).

    .. math:: i = I_1 \\,\\mathrm{sign}(v)\\,|v/V_1|^{\\alpha}

    Beyond ``CURRENT_CAP`` × I_1 (10²⁰ × I_1: far beyond any current a real circuit reaches,
    but where a diverging Newton iterate of an implicit step may land) the law is continued
    along its tangent, so that a trial state never overflows: with α ≈ 40 the power law
    reaches 10³⁰⁸ A at only 20 × V_1, and the solver's correction norm overflowed with it.

    References
    ----------
    L. M. Levinson and H. R. Philipp, "Zinc oxide varistors — a review",
    American Ceramic Society Bulletin 65(4), 1986 (the power-law characteristic).
    """

    #: current [× I_1] beyond which the power law is continued linearly (its tangent there)
    CURRENT_CAP = 1e20

    def __init__(self, voltage: float, exponent: float, at_current: float = 1e-3):
        self.v1 = voltage
        self.alpha = exponent
        self.i1 = at_current
        self.band = (0.0, 0.0)
        self.i_floor = -np.inf
        #: |v/V_1| where the current reaches CURRENT_CAP × I_1
        self.x_cap = self.CURRENT_CAP ** (1.0 / exponent)
        self.description = f"varistor ({voltage:.4g} V at {at_current:.3g} A, α = {exponent:.3g})"

    def voltage(self, i):
        i = np.asarray(i, dtype=float)
        y = np.abs(i / self.i1)
        with np.errstate(over="ignore", divide="ignore"):
            x = np.where(y <= self.CURRENT_CAP, y ** (1.0 / self.alpha),
                         self.x_cap * (1.0 + (y / self.CURRENT_CAP - 1.0) / self.alpha))
        return np.sign(i) * self.v1 * x

    def current(self, v):
        v = np.asarray(v, dtype=float)
        x = np.abs(v / self.v1)
        with np.errstate(over="ignore"):
            y = np.where(x <= self.x_cap, np.minimum(x, self.x_cap) ** self.alpha,
                         self.CURRENT_CAP * (1.0 + self.alpha * (x / self.x_cap - 1.0)))
        return np.sign(v) * self.i1 * y

    def current_at(self, v: float) -> float:
        """Scalar :meth:`current` [A] at voltage ``v`` [V]."""
        x = abs(v / self.v1)
        if x <= self.x_cap:
            y = x ** self.alpha
        else:
            y = self.CURRENT_CAP * (1.0 + self.alpha * (x / self.x_cap - 1.0))
        return math.copysign(self.i1 * y, v) if v else 0.0

    def voltage_at(self, i: float) -> float:
        """Scalar :meth:`voltage` [V] at current ``i`` [A]."""
        if not i:
            return 0.0
        y = abs(i / self.i1)
        if y <= self.CURRENT_CAP:
            x = y ** (1.0 / self.alpha)
        else:
            x = self.x_cap * (1.0 + (y / self.CURRENT_CAP - 1.0) / self.alpha)
        return math.copysign(self.v1 * x, i)

    def resistance_at(self, i: float) -> float:
        """Incremental resistance dv/di [Ω] at current ``i`` ≠ 0 [A]."""
        y = abs(i / self.i1)
        if y <= self.CURRENT_CAP:
            # (V_1/(α·I_1))·y^(1/α − 1), in logarithms: near zero current (subnormal i in a chain
            # solve) the resistance exceeds the largest float, which is inf without an overflow
            ln_r = math.log(self.v1 / (self.alpha * self.i1)) + (1.0 / self.alpha - 1.0) * math.log(y)
            return math.exp(ln_r) if ln_r < 709.0 else math.inf
        return self.v1 * self.x_cap / (self.alpha * self.CURRENT_CAP * self.i1)
