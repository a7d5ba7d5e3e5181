"""The case file's keys: for each table and element type, what each key holds (its kind, unit,
condition, whether it is required) — the tables the loader validates with, the key paths a study
may vary, and the report's input tables all come from here.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

from kickback.case import ACROSS, ELEMENT_TYPES, SWITCH_TYPES
from kickback.units import example

CONDITIONS = {
    ">0": (lambda v: v > 0, "> 0"),
    ">=0": (lambda v: v >= 0, ">= 0"),
    ">1": (lambda v: v > 1, "> 1"),
    "(0,1]": (lambda v: 0 < v <= 1, "in (0, 1]"),
    "[0,1)": (lambda v: 0 <= v < 1, "in [0, 1)"),
    "[0.5,10]": (lambda v: 0.5 <= v <= 10, "in [0.5, 10]"),
    # the device laws' range (silicon parts, -100 °C to 300 °C); 0.01 K would overflow V_T = kT/q
    "T": (lambda v: 173.15 <= v <= 573.15, "between 173.15 K and 573.15 K (-100 °C to 300 °C)"),
    "": (lambda v: True, ""),
}


@dataclass(frozen=True)
class Field:
    """What one key holds: kind q(uantity) n(umber) f(raction: a number or a percentage string)
    s(tring) b(ool) c(hoice) t(ables); ``absent``: what leaving the key out means, where that is
    worth a line in the report's inputs ("not given: linear core")."""

    kind: str
    unit: str = ""
    cond: str = ""
    required: bool = False
    choices: tuple[str, ...] = ()
    absent: str = ""

    def expected(self) -> str:
        cond = CONDITIONS[self.cond][1]
        if self.kind == "q":
            return f"a value in {self.unit}{' ' + cond if cond else ''}, e.g. '{example(self.unit)}'"
        if self.kind == "l":
            return f"an array of values in {self.unit}, e.g. ['{example(self.unit)}']"
        if self.kind == "n":
            return f"a plain number{' ' + cond if cond else ''}"
        if self.kind == "f":
            return f"a fraction{' ' + cond if cond else ''} or a percentage, e.g. 0.8 or '80 %'"
        if self.kind == "c":
            return "one of: " + ", ".join(self.choices)
        return {"s": "a string in quotes", "b": "true or false", "t": "an array of tables"}[self.kind]


def _q(unit: str, cond: str = ">0", required: bool = False, absent: str = "") -> Field:
    return Field("q", unit, cond, required, absent=absent)


STRING, _BOOL = Field("s"), Field("b")
#: a percentage string, "80 %" (a fraction 0.8 is written as a plain number)
#: a Foster thermal network of a part: stage resistances and time constants, and its Tj limit
_THERMAL = {"thermal_resistance": Field("l", "K/W", ">0"), "thermal_tau": Field("l", "s", ">0"),
            "max_junction_temperature": _q("K", "T")}

SUPPLY = {"voltage": _q("V", required=True)}
COIL = {"inductance": _q("H", required=True), "resistance": _q("Ω", ">=0", True),
        "capacitance": _q("F", ">=0"), "release_current": _q("A", absent="not given: no release time"),
        "release_delay": _q("s", ">=0"), "initial_current": _q("A", absent="not given: the DC on-state"),
        "saturation_current": _q("A", absent="not given: linear core")}
SWITCH = {"type": Field("c", required=True, choices=SWITCH_TYPES), "on_resistance": _q("Ω"),
          "saturation_voltage": _q("V", ">=0"), "fall_time": _q("s", ">=0"), "capacitance": _q("F", ">=0"),
          "breakdown_voltage": _q("V", absent="not given: never breaks down"),
          "avalanche_resistance": _q("Ω", ">=0"), "body_diode_voltage": _q("V", absent="not given: 0.7 V + RDS(on)"),
          "rated_voltage": _q("V"), "rated_avalanche_energy": _q("J", absent="not given: any avalanche fails"),
          "gain": Field("n", cond=">1"), "drive_voltage": _q("V"), "base_resistance": _q("Ω"),
          "base_emitter_voltage": _q("V"), "overdrive": Field("n", cond=">1"), "gate_voltage": _q("V"),
          "on_resistance_gate_voltage": _q("V"), "rated_repetitive_avalanche_energy": _q("J"), **_THERMAL}
SWITCH_ONLY = {"on_resistance": "mosfet", "saturation_voltage": "bjt", "body_diode_voltage": "mosfet",
               "gain": "bjt", "drive_voltage": "bjt", "base_resistance": "bjt", "base_emitter_voltage": "bjt",
               "overdrive": "bjt", "gate_voltage": "mosfet", "on_resistance_gate_voltage": "mosfet"}
CLAMP = {"name": STRING, "across": Field("c", required=True, choices=ACROSS),
         "element": Field("t", required=True)}
CHECKS = {"derating": Field("f", cond="(0,1]"),
          "energy_derating": Field("f", cond="(0,1]", absent="not given: same as derating"),
          "max_release_time": _q("s"), "max_peak_voltage": _q("V"), "max_decay_time": _q("s"),
          "max_clamp_energy": _q("J"), "ambient_temperature": _q("K", "T"),
          "min_margin": Field("f", cond="[0,1)")}
TOP = ("title", "supply", "coil", "switch", "clamp", "option", "checks", "tolerance", "drive", "motor")
#: plain SI numbers: V·s/rad, rad/s, kg·m², N·m·s/rad, N·m
MOTOR = {"back_emf_constant": Field("n", cond=">0", required=True), "speed": Field("n", cond=">=0"),
         "inertia": Field("n", cond=">0"), "viscous_friction": Field("n", cond=">=0"),
         "load_torque": Field("n", cond=">=0")}
DRIVE = {"frequency": _q("Hz", required=True), "duty": Field("n"), "duties": Field("ln"),
         "final_turn_off": _BOOL}
OPTION = {"name": Field("s", required=True), "clamp": Field("t")}

COMMON = {"type": Field("c", required=True, choices=ELEMENT_TYPES), "name": STRING}
_BREAKDOWN = {"voltage": _q("V"), "dynamic_resistance": _q("Ω", ">=0"),
              "forward_voltage": _q("V", absent="not given: 0.7 V forward"), "rated_pulse_energy": _q("J"),
              "rated_peak_power": _q("W"), "rated_pulse_width": _q("s"), "test_current": _q("A")}
#: a TVS as its datasheet gives it: V_WM, V_BR at I_T, V_C at I_PP (IEC 61643-321 terms)
_TVS_DATASHEET = {"standoff_voltage": _q("V"), "breakdown_voltage": _q("V"), "clamping_voltage": _q("V"),
                  "peak_pulse_current": _q("A")}
ELEMENTS: dict[str, dict[str, Field]] = {
    "diode": {"model": Field("c", choices=("shockley", "constant-drop")), "forward_voltage": _q("V"),
              "at_current": _q("A"), "ideality": Field("n", cond="[0.5,10]"),
              "saturation_current": _q("A"), "series_resistance": _q("Ω", ">=0"),
              "temperature": _q("K", "T", absent="not given: 25 °C"),
              "rated_reverse_voltage": _q("V"), "rated_surge_current": _q("A"), "rated_average_current": _q("A")},
    "zener": {**_BREAKDOWN, "voltage": _q("V", required=True), "impedance": _q("Ω", ">=0")},
    "tvs": {**_BREAKDOWN, **_TVS_DATASHEET, "bidirectional": _BOOL},
    "resistor": {"resistance": _q("Ω", required=True), "rated_energy": _q("J")},
    "capacitor": {"capacitance": _q("F", required=True), "rated_voltage": _q("V")},
    "varistor": {"voltage": _q("V", required=True), "at_current": _q("A"),
                 "exponent": Field("n", cond=">1", required=True), "rated_energy": _q("J")},
}
ELEMENTS = {t: {**COMMON, **spec, **(_THERMAL if t != "capacitor" else {})} for t, spec in ELEMENTS.items()}
ANY_ELEMENT_KEY = {k for spec in ELEMENTS.values() for k in spec}

#: field kinds that hold one number
NUMERIC = ("q", "n", "f")
#: field kinds that hold a list of numbers; a study varies one entry by its index
#: (``switch.thermal_tau[1]``, ``drive.duties[0]``)
NUMERIC_LISTS = ("l", "ln")


def key_specs() -> tuple[dict, dict, dict]:
    """The case file's keys with their kinds and units: (tables, element types, switch-only keys).

    For outputs that show a case's inputs; the loader's own tables, so one source of truth.
    """
    tables = {"supply": SUPPLY, "coil": COIL, "switch": SWITCH, "checks": CHECKS, "drive": DRIVE,
              "motor": MOTOR}
    return tables, ELEMENTS, SWITCH_ONLY



def numeric_keys(lists: bool = False) -> dict[str, str]:
    """Every numeric key of the case file → its unit ('' for a plain number).

    Table keys read ``table.key`` (``switch.gate_voltage``); element keys ``element:TYPE.key``
    (``element:zener.voltage``). With ``lists``, the keys holding a list of numbers
    (:data:`NUMERIC_LISTS`: ``switch.thermal_tau``, ``drive.duties``) as well.
    """
    kinds = NUMERIC + (NUMERIC_LISTS if lists else ())
    tables, elements, _ = key_specs()
    out = {f"{t}.{k}": f.unit for t, spec in tables.items() for k, f in spec.items() if f.kind in kinds}
    out |= {f"element:{t}.{k}": f.unit for t, spec in elements.items() for k, f in spec.items()
            if f.kind in kinds}
    return out


def leaf_units() -> dict[str, str]:
    """Numeric key name → unit, over every table and element type, lists included (a name has
    one unit)."""
    out: dict[str, str] = {}
    for key, unit in numeric_keys(lists=True).items():
        out[key.rsplit(".", 1)[1]] = unit
    return out


def did_you_mean(word: str, choices) -> str:
    """``"; did you mean 'x'?"`` for the closest of ``choices`` to a mistyped ``word``, else ''."""
    close = difflib.get_close_matches(word, list(choices), n=1)
    return f"; did you mean '{close[0]}'?" if close else ""
