"""Case-file rules of a Zener or TVS given as its datasheet gives it (used by :mod:`kickback.caseio`).

A TVS: ``standoff_voltage`` (V_WM), ``breakdown_voltage`` at ``test_current`` (V_BR at I_T),
``clamping_voltage`` at ``peak_pulse_current`` (V_C at I_PP); a Zener: ``voltage`` at
``test_current`` with ``impedance`` (Z_ZT). The law is the line through the points
(:func:`kickback.models.breakdown.breakdown_line`); a set that cannot be a part is refused on one
line naming the key.

References
----------
IEC 61643-321, Components for low-voltage surge protective devices — Specifications for avalanche
breakdown diodes (the terms V_WM, V_BR at I_T, V_C at I_PP; from memory).
"""

from __future__ import annotations

from typing import Any

from kickback.models.breakdown import breakdown_line
from kickback.tomlpos import KeyPath
from kickback.units import format_quantity


def check_breakdown(ctx, path: KeyPath, kind: str, v: dict[str, Any]) -> None:
    """A Zener or TVS: ``voltage`` (+ ``dynamic_resistance``), or the datasheet's values.

    TVS: ``breakdown_voltage`` at ``test_current``, optional ``clamping_voltage`` at
    ``peak_pulse_current``, optional ``standoff_voltage``; Zener: ``voltage`` at
    ``test_current`` with ``impedance``. One consistent set, or a one-line error naming the key.
    """
    def q(key: str, unit: str = "V") -> str:
        return format_quantity(v[key], unit)

    def need(key: str, other: str, why: str) -> None:
        if key in v and other not in v:
            raise ctx.missing(path + (other,), why)

    def clash(key: str, other: str, why: str) -> None:
        if key in v and other in v:
            raise ctx.error(path + (key,), f"{why} (expected {key} or {other}, not both)")

    tvs_sheet = kind == "tvs" and "breakdown_voltage" in v
    if kind == "tvs":
        clash("breakdown_voltage", "voltage", "breakdown_voltage at test_current is the datasheet's V_BR, "
              "voltage the model's breakdown at zero current")
        if "voltage" not in v and "breakdown_voltage" not in v:
            raise ctx.missing(path + ("breakdown_voltage",), "the TVS's breakdown_voltage at test_current "
                              "(V_BR at I_T), or voltage, its breakdown at zero current")
        need("breakdown_voltage", "test_current", "the test current I_T of breakdown_voltage, e.g. '1 mA'")
        need("test_current", "breakdown_voltage", "breakdown_voltage, the V_BR measured at test_current")
        need("clamping_voltage", "peak_pulse_current", "the peak pulse current I_PP of clamping_voltage")
        need("peak_pulse_current", "clamping_voltage", "clamping_voltage, the V_C at peak_pulse_current")
        need("clamping_voltage", "breakdown_voltage", "breakdown_voltage at test_current, the line's other point")
        clash("clamping_voltage", "dynamic_resistance", "over-determined: clamping_voltage at "
              "peak_pulse_current sets the dynamic resistance")
    else:
        need("impedance", "test_current", "the test current I_ZT at which impedance Z_ZT is given")
        clash("impedance", "dynamic_resistance", "impedance is the datasheet's Z_ZT, dynamic_resistance "
              "the model's slope")
    v_br = v.get("breakdown_voltage", v.get("voltage"))
    name_br = "breakdown_voltage" if tvs_sheet else "voltage"
    if "standoff_voltage" in v and v["standoff_voltage"] >= v_br:
        raise ctx.error(path + ("standoff_voltage",), f"{q('standoff_voltage')} is not below {name_br} "
                        f"{format_quantity(v_br, 'V')} (expected the working voltage V_WM below V_BR)")
    if "clamping_voltage" in v:
        if v["clamping_voltage"] <= v_br:
            raise ctx.error(path + ("clamping_voltage",), f"{q('clamping_voltage')} is not above "
                            f"breakdown_voltage {format_quantity(v_br, 'V')} (expected V_C above V_BR)")
        if v["peak_pulse_current"] <= v["test_current"]:
            raise ctx.error(path + ("peak_pulse_current",), f"{q('peak_pulse_current', 'A')} is not above "
                            f"test_current {q('test_current', 'A')} (expected I_PP above I_T)")
    if "test_current" in v:
        slope = v.get("impedance", v.get("dynamic_resistance", 0.0))
        v0, r_d = breakdown_line(v_br, v["test_current"], v.get("clamping_voltage"), v.get("peak_pulse_current"),
                                 slope)
        if v0 <= 0:
            raise ctx.error(path + ("test_current",), f"the line through the datasheet values reaches 0 V "
                            f"before zero current (V0 = {v0:.3g} V with r_d = {r_d:.3g} Ω; expected a "
                            "test current of the breakdown knee, e.g. '1 mA')")
