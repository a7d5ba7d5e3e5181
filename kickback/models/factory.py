"""From a case :class:`~kickback.case.Element` to its law."""

from __future__ import annotations

from kickback.case import Element
from kickback.models.base import ElementLaw
from kickback.models.breakdown import Varistor, breakdown_element
from kickback.models.diode import (
    T25,
    ConstantDropDiode,
    ShockleyDiode,
    shockley_from_terminal_point,
    thermal_voltage,
)
from kickback.models.passive import Resistor


def element_law(element: Element) -> ElementLaw | None:
    """The law of a non-capacitor element; None for a capacitor (it is a state, not a law)."""
    t = element.type
    if t == "diode":
        if element.model == "constant-drop":
            return ConstantDropDiode(element.forward_voltage, element.series_resistance)
        v_t = thermal_voltage(element.temperature or T25)
        if element.forward_voltage is not None:
            n, i_s = shockley_from_terminal_point(
                element.forward_voltage, element.at_current, ideality=element.ideality,
                saturation_current=element.saturation_current,
                series_resistance=element.series_resistance, v_t=v_t)
        else:
            n, i_s = element.ideality, element.saturation_current
        return ShockleyDiode(n, i_s, element.series_resistance, v_t)
    if t in ("zener", "tvs"):
        return breakdown_element(element.voltage, element.dynamic_resistance,
                                 bidirectional=element.bidirectional and t == "tvs",
                                 forward_voltage=element.forward_voltage,
                                 kind="Zener" if t == "zener" else "TVS")
    if t == "resistor":
        return Resistor(element.resistance)
    if t == "varistor":
        return Varistor(element.voltage, element.exponent, element.at_current or 1e-3)
    if t == "capacitor":
        return None
    raise ValueError(f"unknown element type {t!r}")
