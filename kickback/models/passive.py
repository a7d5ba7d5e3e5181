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


def copper_resistance(r_ref: float, temperature, t_ref: float = 293.15):
    """Resistance of a copper winding at another temperature.

    Parameters
    ----------
    r_ref : float — [Ω] resistance at ``t_ref``
    temperature : float or array — [K]
    t_ref : float — [K] reference temperature (20 °C)

    Returns
    -------
    float or array — [Ω]

    .. math:: R(T) = R_{ref}\\,(1 + \\alpha_{20}(T - T_{ref}))

    References
    ----------
    IEC 60028:1925, International standard of resistance for copper (α20 = 0.00393 /K).
    """
    return r_ref * (1.0 + COPPER_ALPHA20 * (temperature - t_ref))
