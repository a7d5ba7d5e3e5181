"""Load a case file (TOML) and validate it into a :class:`kickback.case.Case`.

Every problem is a :class:`kickback.errors.CaseError` whose text reads
``FILE:LINE: key.path: what is wrong (expected …)``. Lines come from
:class:`kickback.tomlpos.LineLocator`; a missing key points at its table header (line 1 if the
table itself is missing). Quantities are read by :func:`kickback.units.parse_quantity`.
"""

from __future__ import annotations

import difflib
import math
import os
import re
import tomllib
from dataclasses import dataclass, replace
from typing import Any

from kickback.case import (
    ACROSS,
    ELEMENT_TYPES,
    SWITCH_TYPES,
    Case,
    Checks,
    Clamp,
    Coil,
    Drive,
    Element,
    Motor,
    Option,
    Supply,
    Switch,
)
from kickback.casebounds import MAGNITUDE, check_structure, count_error, plain_number_note, text_problem
from kickback.casetext import read_text as _read
from kickback.casetext import syntax_error as _syntax_error
from kickback.errors import CaseError
from kickback.models.diode import T25, thermal_voltage
from kickback.tomlpos import KeyPath, LineLocator, format_path
from kickback.units import UnitError, example, format_quantity, parse_quantity

__all__ = ["load_case"]


_CONDITIONS = {
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
class _Field:
    """What one key holds: kind q(uantity) n(umber) f(raction: a number or a percentage string)
    s(tring) b(ool) c(hoice) t(ables)."""

    kind: str
    unit: str = ""
    cond: str = ""
    required: bool = False
    choices: tuple[str, ...] = ()

    def expected(self) -> str:
        cond = _CONDITIONS[self.cond][1]
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


def _q(unit: str, cond: str = ">0", required: bool = False) -> _Field:
    return _Field("q", unit, cond, required)


_STRING, _BOOL = _Field("s"), _Field("b")
#: a percentage string, "80 %" (a fraction 0.8 is written as a plain number)
_PERCENT = re.compile(r"\s*([0-9]+(?:\.[0-9]*)?|\.[0-9]+)\s*%\s*")
#: a Foster thermal network of a part: stage resistances and time constants, and its Tj limit
_THERMAL = {"thermal_resistance": _Field("l", "K/W", ">0"), "thermal_tau": _Field("l", "s", ">0"),
            "max_junction_temperature": _q("K", "T")}

_SUPPLY = {"voltage": _q("V", required=True)}
_COIL = {"inductance": _q("H", required=True), "resistance": _q("Ω", ">=0", True),
         "capacitance": _q("F", ">=0"), "release_current": _q("A"), "release_delay": _q("s", ">=0"),
         "initial_current": _q("A"), "saturation_current": _q("A")}
_SWITCH = {"type": _Field("c", required=True, choices=SWITCH_TYPES), "on_resistance": _q("Ω"),
           "saturation_voltage": _q("V", ">=0"), "fall_time": _q("s", ">=0"), "capacitance": _q("F", ">=0"),
           "breakdown_voltage": _q("V"), "avalanche_resistance": _q("Ω", ">=0"),
           "body_diode_voltage": _q("V"), "rated_voltage": _q("V"), "rated_avalanche_energy": _q("J"),
           "gain": _Field("n", cond=">1"), "drive_voltage": _q("V"), "base_resistance": _q("Ω"),
           "base_emitter_voltage": _q("V"), "overdrive": _Field("n", cond=">1"), "gate_voltage": _q("V"),
           "on_resistance_gate_voltage": _q("V"), "rated_repetitive_avalanche_energy": _q("J"), **_THERMAL}
_SWITCH_ONLY = {"on_resistance": "mosfet", "saturation_voltage": "bjt", "body_diode_voltage": "mosfet",
                "gain": "bjt", "drive_voltage": "bjt", "base_resistance": "bjt", "base_emitter_voltage": "bjt",
                "overdrive": "bjt", "gate_voltage": "mosfet", "on_resistance_gate_voltage": "mosfet"}
_CLAMP = {"name": _STRING, "across": _Field("c", required=True, choices=ACROSS),
          "element": _Field("t", required=True)}
_CHECKS = {"derating": _Field("f", cond="(0,1]"), "energy_derating": _Field("f", cond="(0,1]"),
           "max_release_time": _q("s"), "max_peak_voltage": _q("V"), "max_decay_time": _q("s"),
           "max_clamp_energy": _q("J"), "ambient_temperature": _q("K", "T"),
           "min_margin": _Field("f", cond="[0,1)")}
_TOP = ("title", "supply", "coil", "switch", "clamp", "option", "checks", "tolerance", "drive", "motor")
#: plain SI numbers: V·s/rad, rad/s, kg·m², N·m·s/rad, N·m
_MOTOR = {"back_emf_constant": _Field("n", cond=">0", required=True), "speed": _Field("n", cond=">=0"),
          "inertia": _Field("n", cond=">0"), "viscous_friction": _Field("n", cond=">=0"),
          "load_torque": _Field("n", cond=">=0")}
_DRIVE = {"frequency": _q("Hz", required=True), "duty": _Field("n"), "duties": _Field("ln"),
          "final_turn_off": _BOOL}
_OPTION = {"name": _Field("s", required=True), "clamp": _Field("t")}

_COMMON = {"type": _Field("c", required=True, choices=ELEMENT_TYPES), "name": _STRING}
_BREAKDOWN = {"voltage": _q("V"), "dynamic_resistance": _q("Ω", ">=0"),
              "forward_voltage": _q("V"), "rated_pulse_energy": _q("J"), "rated_peak_power": _q("W"),
              "rated_pulse_width": _q("s"), "test_current": _q("A")}
#: a TVS as its datasheet gives it: V_WM, V_BR at I_T, V_C at I_PP (IEC 61643-321 terms)
_TVS_DATASHEET = {"standoff_voltage": _q("V"), "breakdown_voltage": _q("V"), "clamping_voltage": _q("V"),
                  "peak_pulse_current": _q("A")}
_ELEMENTS: dict[str, dict[str, _Field]] = {
    "diode": {"model": _Field("c", choices=("shockley", "constant-drop")), "forward_voltage": _q("V"),
              "at_current": _q("A"), "ideality": _Field("n", cond="[0.5,10]"),
              "saturation_current": _q("A"), "series_resistance": _q("Ω", ">=0"), "temperature": _q("K", "T"),
              "rated_reverse_voltage": _q("V"), "rated_surge_current": _q("A"), "rated_average_current": _q("A")},
    "zener": {**_BREAKDOWN, "voltage": _q("V", required=True), "impedance": _q("Ω", ">=0")},
    "tvs": {**_BREAKDOWN, **_TVS_DATASHEET, "bidirectional": _BOOL},
    "resistor": {"resistance": _q("Ω", required=True), "rated_energy": _q("J")},
    "capacitor": {"capacitance": _q("F", required=True), "rated_voltage": _q("V")},
    "varistor": {"voltage": _q("V", required=True), "at_current": _q("A"),
                 "exponent": _Field("n", cond=">1", required=True), "rated_energy": _q("J")},
}
_ELEMENTS = {t: {**_COMMON, **spec, **(_THERMAL if t != "capacitor" else {})} for t, spec in _ELEMENTS.items()}
_ANY_ELEMENT_KEY = {k for spec in _ELEMENTS.values() for k in spec}


def _kind_of(value: Any) -> str:
    """TOML name of a value's type, for messages."""
    for kind, name in ((bool, "a boolean"), (int, "an integer"), (float, "a float"), (str, "a string"),
                       (dict, "a table"), (list, "an array")):
        if isinstance(value, kind):
            return name
    return "a date/time"


class _Context:
    """File name and line locator, to build located errors."""

    def __init__(self, source: str, text: str):
        self.source = source
        self.where = LineLocator(text)
        self.notes: list[str] = []

    def error(self, path: KeyPath, message: str) -> CaseError:
        line = self.where.line_of(path) or 1
        return CaseError(message, source=self.source, line=line, key=format_path(path))

    def missing(self, path: KeyPath, expected: str, what: str = "key") -> CaseError:
        return self.error(path, f"missing required {what} (expected {expected})")


def _value(ctx: _Context, path: KeyPath, field: _Field, raw: Any) -> Any:
    """Check and convert one value according to its field."""
    def wrong() -> CaseError:
        return ctx.error(path, f"got {_kind_of(raw)} (expected {field.expected()})")

    if field.kind == "q":
        if isinstance(raw, bool) or not isinstance(raw, int | float | str):
            raise wrong()
        try:
            value = parse_quantity(raw, field.unit)
        except UnitError as err:
            raise ctx.error(path, err.message) from None
        shown = format_quantity(value, field.unit)
        if value != 0 and not MAGNITUDE[0] <= abs(value) <= MAGNITUDE[1]:
            zero = ", or 0" if _CONDITIONS[field.cond][0](0.0) else ""
            raise ctx.error(path, f"{shown} is outside the range kickback computes with ({MAGNITUDE[0]:g} to "
                                  f"{MAGNITUDE[1]:g} {field.unit}{zero}; expected {field.expected()})")
        why = plain_number_note(format_path(path), raw, value, field.unit)
        if why and _CONDITIONS[field.cond][0](value):
            ctx.notes.append(str(ctx.error(path, why)))
    elif field.kind == "f" and isinstance(raw, str):
        m = _PERCENT.fullmatch(raw)
        if m is None:
            raise ctx.error(path, f"cannot read {raw!r} as a percentage (expected {field.expected()})")
        value, shown = float(m[1]) / 100.0, raw.strip()
    elif field.kind in ("n", "f"):
        if isinstance(raw, bool) or not isinstance(raw, int | float):
            raise wrong()
        if isinstance(raw, int) and abs(raw) > 2**1023:
            raise ctx.error(path, f"an integer of about {raw.bit_length() * 0.30103:.0f} digits "
                                  "is not a finite number in floating point "
                                  f"(expected {field.expected()})")
        if not math.isfinite(raw):
            raise ctx.error(path, f"{raw} is not a finite number (expected {field.expected()})")
        value, shown = float(raw), f"{raw}"
    elif field.kind == "c":
        if not isinstance(raw, str):
            raise wrong()
        if raw not in field.choices:
            raise ctx.error(path, f"{raw!r} is not allowed (expected {field.expected()})")
        return raw
    elif field.kind == "ln":
        if not isinstance(raw, list) or not raw or any(isinstance(x, bool) or not isinstance(x, int | float)
                                                       for x in raw):
            raise ctx.error(path, f"got {_kind_of(raw)} (expected a non-empty array of plain numbers)")
        return tuple(float(x) for x in raw)
    elif field.kind == "l":
        if not isinstance(raw, list) or not raw:
            raise ctx.error(path, f"got {_kind_of(raw)} (expected a non-empty array of values in {field.unit}, "
                            f"e.g. ['{example(field.unit)}'])")
        return tuple(_value(ctx, path, replace(field, kind="q"), x) for x in raw)
    elif field.kind == "t":
        if not isinstance(raw, list) or not all(isinstance(item, dict) for item in raw):
            raise wrong()
        if not raw:
            raise ctx.error(path, "empty array (expected at least one [[clamp.element]] table)")
        return raw
    else:
        if not isinstance(raw, bool if field.kind == "b" else str):
            raise wrong()
        if field.kind == "s":
            why = text_problem(raw)
            if why:
                raise ctx.error(path, why)
            return " ".join(raw.split())  # one line in tables, CSV cells and the report
        return raw
    check, text = _CONDITIONS[field.cond]
    if not check(value):
        raise ctx.error(path, f"must be {text}, got {shown} (expected {field.expected()})")
    return value


def did_you_mean(word: str, choices) -> str:
    """``"; did you mean 'x'?"`` for the closest of ``choices`` to a mistyped ``word``, else ''."""
    close = difflib.get_close_matches(word, list(choices), n=1)
    return f"; did you mean '{close[0]}'?" if close else ""


def _unknown(ctx: _Context, path: KeyPath, allowed: dict[str, _Field], what: str) -> CaseError:
    hint = did_you_mean(str(path[-1]), allowed)
    return ctx.error(path, f"unknown key in {what}{hint} (allowed keys: {', '.join(allowed)})")


def _table(ctx: _Context, path: KeyPath, raw: Any, spec: dict[str, _Field], what: str) -> dict[str, Any]:
    """Check a table against ``spec``; return the converted values of the keys present."""
    if not isinstance(raw, dict):
        raise ctx.error(path, f"got {_kind_of(raw)} (expected a table {what})")
    out: dict[str, Any] = {}
    for key, value in raw.items():
        if key not in spec:
            raise _unknown(ctx, path + (key,), spec, what)
        out[key] = _value(ctx, path + (key,), spec[key], value)
    for key, field in spec.items():
        if field.required and key not in raw:
            raise ctx.missing(path + (key,), field.expected())
    return out


def _switch(ctx: _Context, raw: Any, supply_voltage: float) -> Switch:
    path: KeyPath = ("switch",)
    v = _table(ctx, path, raw, _SWITCH, "[switch]")
    kind = v["type"]
    for key, owner in _SWITCH_ONLY.items():
        if key in v and kind != owner:
            raise ctx.error(path + (key,), f"applies to a {owner} switch, not to type '{kind}' "
                                           f"(expected no {key} for type '{kind}')")
    for key, owner in (("on_resistance", "mosfet"), ("saturation_voltage", "bjt")):
        if kind == owner and key not in v:
            raise ctx.missing(path + (key,), f"{_SWITCH[key].expected()}, for type '{owner}'")
    vs = format_quantity(supply_voltage, "V")
    if kind == "bjt" and v["saturation_voltage"] >= supply_voltage:
        raise ctx.error(path + ("saturation_voltage",), f"must be below the supply voltage {vs}, got "
                        f"{format_quantity(v['saturation_voltage'], 'V')} (expected e.g. '0.2 V')")
    breakdown = v.get("breakdown_voltage")
    if breakdown is not None and breakdown <= supply_voltage:
        raise ctx.error(path + ("breakdown_voltage",), f"must exceed the supply voltage {vs}, got "
                        f"{format_quantity(breakdown, 'V')} (expected a value in V above {vs})")
    if "avalanche_resistance" in v and breakdown is None:
        raise ctx.error(path + ("avalanche_resistance",),
                        "needs breakdown_voltage (expected breakdown_voltage in [switch] as well)")
    _check_thermal(ctx, path, v)
    return Switch(**v)


def _motor(ctx: _Context, raw: Any) -> Motor:
    v = _table(ctx, ("motor",), raw, _MOTOR, "[motor]")
    if ("speed" in v) == ("inertia" in v):
        raise ctx.missing(("motor", "speed"), "a fixed speed [rad/s] or an inertia [kg·m²] (one of them)")
    if "speed" in v and ("viscous_friction" in v or "load_torque" in v):
        key = "viscous_friction" if "viscous_friction" in v else "load_torque"
        raise ctx.error(("motor", key), "applies to the mechanical model (expected inertia instead of speed)")
    return Motor(**v)


def _drive(ctx: _Context, raw: Any) -> Drive:
    v = _table(ctx, ("drive",), raw, _DRIVE, "[drive]")
    if ("duty" in v) == ("duties" in v):
        raise ctx.missing(("drive", "duty"), "duty = 0.5 or duties = [0.2, 0.5, 0.8] (one of them)")
    duties = (v["duty"],) if "duty" in v else v["duties"]
    for d in duties:
        if not 0 < d < 1:
            key = ("drive", "duty" if "duty" in v else "duties")
            raise ctx.error(key, f"duty {d:g} outside (0, 1) (expected the on-time fraction of the period)")
    return Drive(v["frequency"], duties, v.get("final_turn_off", True))


def _check_thermal(ctx: _Context, path: KeyPath, v: dict[str, Any]) -> None:
    """A Foster network needs as many time constants as resistances; a Tj limit needs a network."""
    r, tau = v.get("thermal_resistance"), v.get("thermal_tau")
    if (r is None) != (tau is None):
        key = "thermal_tau" if tau is None else "thermal_resistance"
        raise ctx.missing(path + (key,), "thermal_resistance and thermal_tau together (a Foster network)")
    if r is not None and len(r) != len(tau):
        raise ctx.error(path + ("thermal_tau",), f"{len(tau)} time constants for {len(r)} resistances "
                        "(expected one per Foster stage)")
    if "max_junction_temperature" in v and r is None:
        raise ctx.missing(path + ("thermal_resistance",), "a Foster network to compute the junction temperature")


def _check_diode(ctx: _Context, path: KeyPath, v: dict[str, Any]) -> None:
    """Model-specific rules of a diode element: which parameters determine the law."""
    if v.get("model", "shockley") == "constant-drop":
        for key in ("at_current", "ideality", "saturation_current"):
            if key in v:
                raise ctx.error(path + (key,), "not used by model 'constant-drop' "
                                "(expected forward_voltage and optional series_resistance only)")
        if "forward_voltage" not in v:
            raise ctx.missing(path + ("forward_voltage",), "the forward drop in V, e.g. '0.7 V', "
                              "for model 'constant-drop'")
        return
    point = "forward_voltage" in v and "at_current" in v
    if "forward_voltage" in v and not point:
        raise ctx.error(path + ("forward_voltage",), "needs at_current, the current at which the diode "
                        "drops forward_voltage (expected e.g. at_current = '1 A')")
    if "at_current" in v and not point:
        raise ctx.error(path + ("at_current",), "needs forward_voltage, the drop at at_current "
                        "(expected e.g. forward_voltage = '0.85 V')")
    given = point + ("ideality" in v) + ("saturation_current" in v)
    if given == 3:
        raise ctx.error(path + ("saturation_current",), "over-determined: forward_voltage with at_current, "
                        "ideality and saturation_current are all given (expected two of the three)")
    if given < 2:
        raise ctx.error(path, "a shockley diode needs two of: forward_voltage with at_current, ideality, "
                        "saturation_current (expected e.g. forward_voltage = '0.85 V', at_current = '1 A', "
                        "ideality = 1.9)")
    if not point:
        return
    vf, i_at, rs = v["forward_voltage"], v["at_current"], v.get("series_resistance", 0.0)
    if "ideality" in v and (vf - rs * i_at) / (v["ideality"] * thermal_voltage(v.get("temperature", T25))) > 700:
        # I_s = I/(exp(V_j/(n V_T)) - 1) would underflow below 1e-300 A: not a diode (Shockley law)
        raise ctx.error(path + ("forward_voltage",), f"{format_quantity(vf, 'V')} at "
                        f"{format_quantity(i_at, 'A')} with ideality {v['ideality']:g} is no junction drop "
                        "(expected a diode's forward voltage, e.g. '0.85 V')")
    if rs * i_at >= vf:
        raise ctx.error(path + ("series_resistance",), "series_resistance × at_current = "
                        f"{format_quantity(rs * i_at, 'V')} leaves no junction drop below forward_voltage "
                        f"{format_quantity(vf, 'V')} "
                        "(expected series_resistance < forward_voltage / at_current)")
    if "saturation_current" in v:  # n = (V_f - R_s I) / (V_T ln(1 + I/I_s)), Shockley law with V_T = kT/q
        vt = thermal_voltage(v.get("temperature", T25))
        n = (vf - rs * i_at) / (vt * math.log1p(i_at / v["saturation_current"]))
        if not 0.5 <= n <= 10:
            raise ctx.error(path + ("saturation_current",), f"with forward_voltage and at_current it gives "
                            f"ideality n = {n:.3g} (expected a saturation_current giving n in [0.5, 10])")


def _element(ctx: _Context, path: KeyPath, raw: dict[str, Any]) -> Element:
    if "type" not in raw:
        raise ctx.missing(path + ("type",), _COMMON["type"].expected())
    kind = _value(ctx, path + ("type",), _COMMON["type"], raw["type"])
    spec = _ELEMENTS[kind]
    for key in raw:
        if key not in spec:
            if key in _ANY_ELEMENT_KEY:
                raise ctx.error(path + (key,), f"does not apply to a {kind} element "
                                f"(allowed keys: {', '.join(spec)})")
            raise _unknown(ctx, path + (key,), spec, f"a {kind} element")
    v = _table(ctx, path, raw, spec, f"a {kind} element")
    _check_thermal(ctx, path, v)
    if kind == "diode":
        _check_diode(ctx, path, v)
    elif kind in ("zener", "tvs"):
        from kickback.caseio_parts import check_breakdown

        check_breakdown(ctx, path, kind, v)
    elif kind == "varistor":
        v.setdefault("at_current", 1e-3)  # varistor voltage is conventionally stated at 1 mA
    return Element(**v, path=format_path(path))


def _options(ctx: _Context, raw: Any) -> tuple[Option, ...]:
    """Alternative clamp sets ``[[option]]`` (name, and its own ``[[option.clamp]]`` chains)."""
    if raw is None:
        return ()
    if not isinstance(raw, list) or not all(isinstance(item, dict) for item in raw):
        raise ctx.error(("option",), f"got {_kind_of(raw)} (expected an array of tables [[option]])")
    too_many = count_error("[[option]] tables", len(raw), "options")
    if too_many:
        raise ctx.error(("option",), too_many)
    out = []
    for i, item in enumerate(raw):
        v = _table(ctx, ("option", i), item, _OPTION, "[[option]]")
        out.append(Option(v["name"], _clamps(ctx, item.get("clamp"), ("option", i, "clamp"))))
    names = [o.name for o in out]
    for i, name in enumerate(names):
        if name in names[:i]:
            raise ctx.error(("option", i, "name"), f"option name {name!r} used twice (expected unique names)")
    return tuple(out)


def _clamps(ctx: _Context, raw: Any, where: KeyPath = ("clamp",)) -> tuple[Clamp, ...]:
    if raw is None:
        return ()
    if not isinstance(raw, list) or not all(isinstance(item, dict) for item in raw):
        raise ctx.error(where, f"got {_kind_of(raw)} (expected an array of tables [[{format_path(where)}]])")
    too_many = count_error(f"[[{format_path(where)}]] tables", len(raw), "clamps")
    if too_many:
        raise ctx.error(where, too_many)
    clamps = []
    for i, item in enumerate(raw):
        path: KeyPath = where + (i,)
        v = _table(ctx, path, item, _CLAMP, "[[clamp]]")
        too_many = count_error("elements in one chain", len(v["element"]), "elements")
        if too_many:
            raise ctx.error(path + ("element",), too_many)
        elements = tuple(_element(ctx, path + ("element", j), e) for j, e in enumerate(v["element"]))
        seen: dict[str, int] = {}
        for j, e in enumerate(elements):
            if e.name in seen:
                raise ctx.error(path + ("element", j, "name"), f"element name {e.name!r} used twice in this clamp, "
                                f"by element[{seen[e.name]}] and element[{j}] (expected unique names: checks are "
                                "listed by name)")
            if e.name:
                seen[e.name] = j
        capacitors = [j for j, e in enumerate(elements) if e.type == "capacitor"]
        if len(capacitors) > 1:
            raise ctx.error(path + ("element", capacitors[1]), "a second capacitor in one chain (expected "
                            f"at most one; the first is {elements[capacitors[0]].path})")
        clamps.append(Clamp(name=v.get("name", f"clamp {i + 1}"), across=v["across"], elements=elements,
                            path=format_path(path)))
    names = [c.name for c in clamps]
    for i, name in enumerate(names):
        if name in names[:i]:
            first = names.index(name)
            key = where + (i, "name") if "name" in raw[i] else where + (first, "name")
            raise ctx.error(key, f"clamp name {name!r} used twice, by {clamps[first].path} and {clamps[i].path} "
                                 "(expected unique names: results and checks are listed by name)")
    return tuple(clamps)


def key_specs() -> tuple[dict, dict, dict]:
    """The case file's keys with their kinds and units: (tables, element types, switch-only keys).

    For outputs that show a case's inputs; the loader's own tables, so one source of truth.
    """
    tables = {"supply": _SUPPLY, "coil": _COIL, "switch": _SWITCH, "checks": _CHECKS, "drive": _DRIVE,
              "motor": _MOTOR}
    return tables, _ELEMENTS, _SWITCH_ONLY


def load_case(path_or_text: str | os.PathLike[str], *, source: str | None = None) -> Case:
    """Load and validate a case from a TOML file or TOML text.

    Parameters
    ----------
    path_or_text : str or os.PathLike
        A path (a :class:`pathlib.Path`, or a one-line string naming an existing file or ending in
        ".toml"), or the TOML text itself.
    source : str, optional
        Name used in messages and stored in ``Case.source``; default the path as given, or
        ``"<text>"`` for text.

    Returns
    -------
    Case
        The validated case, all quantities in SI units ([V], [H], [Ω], [F], [s], [A], [J], [W], [K]).

    Raises
    ------
    CaseError
        On a missing file, a TOML syntax error or any invalid key or value; ``str(err)`` reads
        ``FILE:LINE: key.path: what is wrong (expected …)``.

    References
    ----------
    TOML v1.0.0 specification, https://toml.io/en/v1.0.0 (syntax of the case file).
    """
    text, name = _read(path_or_text, source)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise _syntax_error(err, text, name) from None
    except RecursionError:
        raise CaseError("arrays or inline tables nested too deeply (expected at most 16 levels)", source=name,
                        key="TOML syntax") from None
    except ValueError as err:  # an integer of more than 4300 digits
        raise CaseError(f"a value cannot be read: {str(err).split(';')[0]} (expected ordinary numbers)",
                        source=name, key="TOML syntax") from None
    return _build(_Context(name, text), doc, name, text)


def _build(ctx: _Context, doc: dict[str, Any], name: str, text: str) -> Case:
    """Validate a parsed case document into a :class:`Case` (every rule of the case file)."""

    def fail(path: KeyPath, message: str):
        raise ctx.error(path, message) if path else CaseError(message, source=name)

    check_structure(doc, fail)
    top = {key: _Field("s") for key in _TOP}
    for key in doc:
        if key not in _TOP:
            raise _unknown(ctx, (key,), top, "the top level")
    if "title" not in doc:
        raise ctx.missing(("title",), "a string, e.g. title = \"Relay driver, 12 V\"")
    title = _value(ctx, ("title",), _STRING, doc["title"])
    if not title.strip():
        raise ctx.error(("title",), "empty title (expected a short description of the case)")
    tables = {}
    for key in ("supply", "coil", "switch"):
        if key not in doc:
            raise ctx.missing((key,), f"a [{key}] table", "table")
        tables[key] = doc[key]
    supply = Supply(**_table(ctx, ("supply",), tables["supply"], _SUPPLY, "[supply]"))
    coil_values = _table(ctx, ("coil",), tables["coil"], _COIL, "[coil]")
    switch = _switch(ctx, tables["switch"], supply.voltage)
    if coil_values["resistance"] == 0 and "initial_current" not in coil_values and switch.type != "mosfet":
        raise ctx.error(("coil", "resistance"), "zero resistance gives an unbounded on-state current; give "
                        "coil.initial_current (expected a resistance > 0 or an initial_current)")
    clamps = _clamps(ctx, doc.get("clamp"))
    options = _options(ctx, doc.get("option"))
    drive = _drive(ctx, doc["drive"]) if "drive" in doc else None
    motor = _motor(ctx, doc["motor"]) if "motor" in doc else None
    checks = Checks(**_table(ctx, ("checks",), doc.get("checks", {}), _CHECKS, "[checks]"))
    case = Case(title=title, supply=supply, coil=Coil(**coil_values), switch=switch, clamps=clamps,
                checks=checks, source=name, text=text, options=options, drive=drive, motor=motor)
    if "tolerance" in doc:
        from kickback.caseio_tol import tolerances

        too_many = count_error("[tolerance] entries", len(doc["tolerance"]), "tolerances") \
            if isinstance(doc["tolerance"], dict) else None
        if too_many:
            raise ctx.error(("tolerance",), too_many)

        case = replace(case, tolerances=tolerances(ctx, doc["tolerance"], case))
        for tol in case.tolerances:  # the other keys' band ends pass the loader itself (casevary)
            if tol.path != "coil_temperature":
                continue
            for end, value in (("min", tol.low), ("max", tol.high)):
                if not _CONDITIONS["T"][0](value):
                    raise ctx.error(("tolerance", tol.path), f"the band's {end} end must be {_CONDITIONS['T'][1]}, "
                                    f"got {format_quantity(value, 'K')}")
    return replace(case, notes=tuple(ctx.notes)) if ctx.notes else case
