"""Device laws in SI units: pure functions and small immutable model objects.

Every two-terminal element model is oriented so that positive current flows when the
switch node rises (see DESIGN.md §3) and offers the same interface, :class:`ElementLaw`.
"""

from kickback.models.base import ElementLaw, LinearPieces
from kickback.models.breakdown import Varistor, breakdown_element
from kickback.models.diode import (
    ConstantDropDiode,
    ShockleyDiode,
    shockley_from_terminal_point,
    thermal_voltage,
)
from kickback.models.factory import element_law
from kickback.models.passive import Resistor

__all__ = [
    "ConstantDropDiode",
    "ElementLaw",
    "LinearPieces",
    "Resistor",
    "ShockleyDiode",
    "Varistor",
    "breakdown_element",
    "element_law",
    "shockley_from_terminal_point",
    "thermal_voltage",
]
