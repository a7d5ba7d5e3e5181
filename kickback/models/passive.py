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
