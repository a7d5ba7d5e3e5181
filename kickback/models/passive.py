"""Linear passive elements."""

from __future__ import annotations

from kickback.models.base import LinearPieces, PiecewiseLinearLaw


class Resistor(PiecewiseLinearLaw):
    """Ohm's law, ``v = R·i``."""

    def __init__(self, resistance: float):
        self.resistance = resistance
        super().__init__(LinearPieces(0.0, resistance, 0.0, resistance),
                         f"resistor ({resistance:.4g} Ω)")


def capacitor_energy(capacitance: float, voltage):
    """Energy stored in a capacitor.

    Parameters
    ----------
    capacitance : float — [F]
    voltage : float or array — [V]

    Returns
    -------
    float or array — [J]

    .. math:: W = \\tfrac12 C v^2
    """
    return 0.5 * capacitance * voltage * voltage


#: temperature coefficient of resistance of annealed copper at 20 °C [1/K] (IEC 60028)
COPPER_ALPHA20 = 0.00393
#: the temperature at which IEC 60028's coefficient is given [K] (20 °C)
COPPER_T20 = 293.15
#: temperature [K] at which the linear law reaches zero resistance, 20 °C − 1/α20 (about −234.5 °C);
#: the law is meaningless at or below it
COPPER_ZERO_K = COPPER_T20 - 1.0 / COPPER_ALPHA20


def copper_resistance(r_ref: float, temperature, t_ref: float = COPPER_T20):
    """Resistance of a copper winding at another temperature.

    IEC 60028 states the coefficient α20 relative to the resistance *at 20 °C*; a resistance
    given at another reference temperature is first taken back to 20 °C.

    Parameters
    ----------
    r_ref : float or array
        Resistance at ``t_ref`` [Ω].
    temperature : float or array
        Winding temperature [K].
    t_ref : float or array
        Temperature at which ``r_ref`` is given [K] (default 20 °C).

    Returns
    -------
    float or array
        Resistance at ``temperature`` [Ω].

    .. math:: R(T) = R_{ref}\\,\\frac{1 + \\alpha_{20}(T - 20\\,°C)}{1 + \\alpha_{20}(T_{ref} - 20\\,°C)}

    References
    ----------
    IEC 60028:1925, International standard of resistance for copper (α20 = 0.00393 /K at 20 °C).
    """
    at = 1.0 + COPPER_ALPHA20 * (temperature - COPPER_T20)
    at_ref = 1.0 + COPPER_ALPHA20 * (t_ref - COPPER_T20)
    return r_ref * at / at_ref
