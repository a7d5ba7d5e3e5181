"""Diode laws: constant drop with series resistance, and Shockley with series resistance."""

from __future__ import annotations

import math

import numpy as np
from scipy.special import wrightomega

from kickback.models.base import ElementLaw, LinearPieces, PiecewiseLinearLaw

BOLTZMANN = 1.380649e-23  # [J/K], exact (SI 2019)
ELEMENTARY_CHARGE = 1.602176634e-19  # [C], exact (SI 2019)
T25 = 298.15  # [K]


def thermal_voltage(temperature: float = T25) -> float:
    """Thermal voltage.

    Parameters
    ----------
    temperature : float — [K]

    Returns
    -------
    float — [V], 25.693 mV at 25 °C

    .. math:: V_T = k T / q

    References
    ----------
    BIPM, The International System of Units (SI), 9th ed., 2019 (exact k and q).
    """
    return BOLTZMANN * temperature / ELEMENTARY_CHARGE


def shockley_from_terminal_point(forward_voltage: float, at_current: float, *, ideality=None,
                                 saturation_current=None, series_resistance: float = 0.0,
                                 v_t: float = thermal_voltage()) -> tuple[float, float]:
    """Complete (n, I_s) from one terminal point (V_f at I_f) and one of n or I_s.

    Parameters
    ----------
    forward_voltage : float — [V] terminal voltage at ``at_current``
    at_current : float — [A]
    ideality : float or None — emission coefficient n
    saturation_current : float or None — [A]
    series_resistance : float — [Ω]
    v_t : float — [V] thermal voltage

    Returns
    -------
    (n, I_s) : tuple of float — (–, [A])

    .. math:: V_f = n V_T \\ln(1 + I_f/I_s) + R_s I_f

    References
    ----------
    A. S. Sedra and K. C. Smith, Microelectronic Circuits, ch. 4 (diode exponential law).
    """
    v_junction = forward_voltage - series_resistance * at_current
    if v_junction <= 0:
        raise ValueError("series resistance drop exceeds the forward voltage")
    if ideality is not None:
        return ideality, at_current / math.expm1(v_junction / (ideality * v_t))
    if saturation_current is not None:
        return v_junction / (v_t * math.log1p(at_current / saturation_current)), saturation_current
    raise ValueError("need ideality or saturation_current")


class ShockleyDiode(ElementLaw):
    """Shockley diode with series resistance, explicit in both directions.

    .. math:: v(i) = n V_T \\ln(1 + i/I_s) + R_s i, \\qquad
              i(v) = \\frac{n V_T}{R_s}\\,\\omega\\!\\left(\\ln\\frac{R_s I_s}{n V_T}
              + \\frac{v + R_s I_s}{n V_T}\\right) - I_s

    with ω the Wright omega function (avoids the overflow of the Lambert-W form).

    References
    ----------
    T. C. Banwell and A. Jayakumar, "Exact analytical solution for current flow through diode
    with series resistance", Electronics Letters 36(4), 2000.
    R. M. Corless and D. J. Jeffrey, "The Wright ω function", AISC 2002 (wrightomega in scipy).
    """

    def __init__(self, ideality: float, saturation_current: float, series_resistance: float = 0.0,
                 v_t: float = thermal_voltage()):
        self.n = ideality
        self.i_s = saturation_current
        self.r_s = series_resistance
        self.a = ideality * v_t
        self.band = (0.0, 0.0)
        self.i_floor = -saturation_current
        self._log_k = math.log(series_resistance * saturation_current / self.a) if series_resistance > 0 else 0.0
        self.description = (f"Shockley diode (n = {ideality:.3g}, I_s = {saturation_current:.3g} A, "
                            f"R_s = {series_resistance:.3g} Ω)")

    def voltage(self, i):
        i = np.asarray(i, dtype=float)
        with np.errstate(invalid="ignore", divide="ignore"):
            x = np.maximum(i / self.i_s, -1.0 + 1e-16)  # the law's floor is -I_s
            return self.a * np.log1p(x) + self.r_s * i

    def current(self, v):
        v = np.asarray(v, dtype=float)
        if self.r_s == 0.0:
            with np.errstate(over="ignore"):
                return self.i_s * np.expm1(v / self.a)
        z = math.log(self.r_s * self.i_s / self.a) + (v + self.r_s * self.i_s) / self.a
        return self.a / self.r_s * np.real(wrightomega(z)) - self.i_s

    def current_at(self, v: float) -> float:
        """Scalar :meth:`current` [A] at terminal voltage ``v`` [V]."""
        if self.r_s == 0.0:
            x = v / self.a
            return self.i_s * math.expm1(x) if x < 700 else math.inf
        z = self._log_k + (v + self.r_s * self.i_s) / self.a
        return self.a / self.r_s * float(wrightomega(z).real) - self.i_s

    def voltage_at(self, i: float) -> float:
        """Scalar :meth:`voltage` [V] at current ``i`` [A]."""
        return self.a * math.log1p(max(i / self.i_s, -1.0 + 1e-16)) + self.r_s * i

    def slope(self, i):
        """Incremental resistance dv/di [Ω] at current ``i`` [A]."""
        return self.a / (self.i_s + np.asarray(i, dtype=float)) + self.r_s


class ConstantDropDiode(PiecewiseLinearLaw):
    """Diode as a constant forward drop plus series resistance; blocks all reverse voltage.

    .. math:: v = V_f + R_s i \\quad (i > 0), \\qquad i = 0 \\quad (v \\le V_f)
    """

    def __init__(self, forward_voltage: float, series_resistance: float = 0.0):
        super().__init__(LinearPieces(forward_voltage, series_resistance, -math.inf, 0.0),
                         f"constant-drop diode (V_f = {forward_voltage:.3g} V, "
                         f"R_s = {series_resistance:.3g} Ω)")
