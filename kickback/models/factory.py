"""From a case :class:`~kickback.case.Element` to its law."""

from __future__ import annotations

import math

from kickback.case import Element
from kickback.models.base import ElementLaw
from kickback.models.breakdown import Varistor, breakdown_element, breakdown_line
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
        v0, r_d = breakdown_parameters(element)
        return breakdown_element(v0, r_d, bidirectional=element.bidirectional and t == "tvs",
                                 forward_voltage=element.forward_voltage,
                                 kind="Zener" if t == "zener" else "TVS", datasheet=datasheet_words(element))
    if t == "resistor":
        return Resistor(element.resistance)
    if t == "varistor":
        return Varistor(element.voltage, element.exponent, element.at_current or 1e-3)
    if t == "capacitor":
        return None
    raise ValueError(f"unknown element type {t!r}")


def chain_leakage(elements) -> float:
    """The reverse leakage that bounds a series chain's current [A] (0 when nothing bounds it).

    A series chain's current can fall no lower than the highest of its elements' floors
    (``ElementLaw.i_floor``): a reverse-biased Shockley diode holds the chain at −I_s whatever
    the voltage across it, so an on-state current of that size is the diode's leakage, not
    conduction. A chain of laws without a finite floor (a forward-biased Zener) has none: 0.
    A capacitor carries no DC current and is skipped.

    References
    ----------
    Sze, S. M. and Ng, K. K., *Physics of Semiconductor Devices*, 3rd ed., Wiley, 2007, §2.3
    (the ideal diode's reverse current saturates at −I_s).
    """
    floors = [law.i_floor for law in (element_law(el) for el in elements) if law is not None]
    low = max(floors, default=-math.inf)
    return -low if math.isfinite(low) and low < 0 else 0.0


def from_datasheet(element: Element) -> bool:
    """Whether a Zener/TVS element is given as a datasheet gives it (a value at a test current)."""
    return element.type in ("zener", "tvs") and element.test_current is not None


def breakdown_parameters(element: Element) -> tuple[float, float]:
    """A Zener's or TVS's breakdown voltage at zero current [V] and dynamic resistance [Ω].

    From ``voltage`` and ``dynamic_resistance``, or from the datasheet values
    (:func:`kickback.models.breakdown.breakdown_line`): a TVS's V_BR at I_T and V_C at I_PP, a
    Zener's V_Z at I_ZT with its impedance Z_ZT there.
    """
    if not from_datasheet(element):
        return element.voltage, element.dynamic_resistance
    v_at = element.breakdown_voltage if element.type == "tvs" else element.voltage
    slope = element.impedance if element.impedance is not None else element.dynamic_resistance
    v0, r_d = breakdown_line(v_at, element.test_current, element.clamping_voltage, element.peak_pulse_current,
                             slope)
    return float(v0), float(r_d)


def datasheet_words(element: Element) -> str:
    """The datasheet values of a Zener/TVS in the datasheet's own symbols ('' when not given so)."""
    from kickback.units import format_quantity as q

    parts = []
    if element.standoff_voltage is not None:
        parts.append(f"V_WM {q(element.standoff_voltage, 'V')}")
    if from_datasheet(element):
        if element.type == "tvs":
            parts.append(f"V_BR {q(element.breakdown_voltage, 'V')} at I_T {q(element.test_current, 'A')}")
            if element.clamping_voltage is not None:
                parts.append(f"V_C {q(element.clamping_voltage, 'V')} at I_PP {q(element.peak_pulse_current, 'A')}")
        else:
            parts.append(f"V_Z {q(element.voltage, 'V')} at I_ZT {q(element.test_current, 'A')}")
            if element.impedance is not None:
                parts.append(f"Z_ZT {q(element.impedance, 'Ω')}")
    return ", ".join(parts)


def part_words(element: Element) -> str:
    """A Zener or TVS in datasheet words: its datasheet values when given so, else the model's
    breakdown voltage (an ideal part, r_d = 0, clamps at it: V_C = V_BR); '' for other types."""
    from kickback.units import format_quantity as q

    if element.type not in ("zener", "tvs"):
        return ""
    kind = "Zener" if element.type == "zener" else "TVS"
    if from_datasheet(element):
        return f"{kind} {datasheet_words(element)}"
    v, r_d = element.voltage, element.dynamic_resistance
    sym = "V_Z" if element.type == "zener" else "V_BR"
    slope = f", r_d {q(r_d, 'Ω')}" if r_d else f" (ideal: clamps at {sym})"
    standoff = f"V_WM {q(element.standoff_voltage, 'V')}, " if element.standoff_voltage is not None else ""
    return f"{kind} {standoff}{sym} {q(v, 'V')}{slope}"
