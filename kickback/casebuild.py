"""Validate a parsed case document (what :func:`tomllib.loads` gives) into a
:class:`kickback.case.Case`: every rule of the case file, each failure a located
:class:`kickback.errors.CaseError`. The key tables are :mod:`kickback.casekeys`; reading the file
and the ``[tolerance]`` section are :mod:`kickback.caseio`.
"""

from __future__ import annotations

import math
import re
from dataclasses import replace
from typing import Any

from kickback.case import Case, Checks, Clamp, Coil, Drive, Element, Motor, Option, Supply, Switch
from kickback.casebounds import MAGNITUDE, check_structure, count_error, plain_number_note, text_problem
from kickback.caseio_parts import check_breakdown
from kickback.casekeys import (
    ANY_ELEMENT_KEY,
    CHECKS,
    CLAMP,
    COIL,
    COMMON,
    CONDITIONS,
    DRIVE,
    ELEMENTS,
    MOTOR,
    OPTION,
    STRING,
    SUPPLY,
    SWITCH,
    SWITCH_ONLY,
    TOP,
    Field,
    did_you_mean,
)
from kickback.errors import CaseError
from kickback.models.diode import T25, thermal_voltage
from kickback.tomlpos import KeyPath, LineLocator, format_path
from kickback.units import UnitError, example, format_quantity, parse_quantity

#: a percentage string, "80 %" (a fraction 0.8 is written as a plain number)
_PERCENT = re.compile(r"\s*([0-9]+(?:\.[0-9]*)?|\.[0-9]+)\s*%\s*")


def _kind_of(value: Any) -> str:
    """TOML name of a value's type, for messages."""
    for kind, name in ((bool, "a boolean"), (int, "an integer"), (float, "a float"), (str, "a string"),
                       (dict, "a table"), (list, "an array")):
        if isinstance(value, kind):
            return name
    return "a date/time"


class Context:
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


def _value(ctx: Context, path: KeyPath, field: Field, raw: Any) -> Any:
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
            zero = ", or 0" if CONDITIONS[field.cond][0](0.0) else ""
            raise ctx.error(path, f"{shown} is outside the range kickback computes with ({MAGNITUDE[0]:g} to "
                                  f"{MAGNITUDE[1]:g} {field.unit}{zero}; expected {field.expected()})")
        why = plain_number_note(format_path(path), raw, value, field.unit)
        if why and CONDITIONS[field.cond][0](value):
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
    check, text = CONDITIONS[field.cond]
    if not check(value):
        raise ctx.error(path, f"must be {text}, got {shown} (expected {field.expected()})")
    return value


def _unknown(ctx: Context, path: KeyPath, allowed: dict[str, Field], what: str) -> CaseError:
    hint = did_you_mean(str(path[-1]), allowed)
    return ctx.error(path, f"unknown key in {what}{hint} (allowed keys: {', '.join(allowed)})")


def _table(ctx: Context, path: KeyPath, raw: Any, spec: dict[str, Field], what: str) -> dict[str, Any]:
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


def _switch(ctx: Context, raw: Any, supply_voltage: float) -> Switch:
    path: KeyPath = ("switch",)
    v = _table(ctx, path, raw, SWITCH, "[switch]")
    kind = v["type"]
    for key, owner in SWITCH_ONLY.items():
        if key in v and kind != owner:
            raise ctx.error(path + (key,), f"applies to a {owner} switch, not to type '{kind}' "
                                           f"(expected no {key} for type '{kind}')")
    for key, owner in (("on_resistance", "mosfet"), ("saturation_voltage", "bjt")):
        if kind == owner and key not in v:
            raise ctx.missing(path + (key,), f"{SWITCH[key].expected()}, for type '{owner}'")
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


def _motor(ctx: Context, raw: Any) -> Motor:
    v = _table(ctx, ("motor",), raw, MOTOR, "[motor]")
    if ("speed" in v) == ("inertia" in v):
        raise ctx.missing(("motor", "speed"), "a fixed speed [rad/s] or an inertia [kg·m²] (one of them)")
    if "speed" in v and ("viscous_friction" in v or "load_torque" in v):
        key = "viscous_friction" if "viscous_friction" in v else "load_torque"
        raise ctx.error(("motor", key), "applies to the mechanical model (expected inertia instead of speed)")
    return Motor(**v)


def _drive(ctx: Context, raw: Any) -> Drive:
    v = _table(ctx, ("drive",), raw, DRIVE, "[drive]")
    if ("duty" in v) == ("duties" in v):
        raise ctx.missing(("drive", "duty"), "duty = 0.5 or duties = [0.2, 0.5, 0.8] (one of them)")
    duties = (v["duty"],) if "duty" in v else v["duties"]
    for d in duties:
        if not 0 < d < 1:
            key = ("drive", "duty" if "duty" in v else "duties")
            raise ctx.error(key, f"duty {d:g} outside (0, 1) (expected the on-time fraction of the period)")
    return Drive(v["frequency"], duties, v.get("final_turn_off", True))


def _check_thermal(ctx: Context, path: KeyPath, v: dict[str, Any]) -> None:
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


def _check_diode(ctx: Context, path: KeyPath, v: dict[str, Any]) -> None:
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


def _element(ctx: Context, path: KeyPath, raw: dict[str, Any]) -> Element:
    if "type" not in raw:
        raise ctx.missing(path + ("type",), COMMON["type"].expected())
    kind = _value(ctx, path + ("type",), COMMON["type"], raw["type"])
    spec = ELEMENTS[kind]
    for key in raw:
        if key not in spec:
            if key in ANY_ELEMENT_KEY:
                raise ctx.error(path + (key,), f"does not apply to a {kind} element "
                                f"(allowed keys: {', '.join(spec)})")
            raise _unknown(ctx, path + (key,), spec, f"a {kind} element")
    v = _table(ctx, path, raw, spec, f"a {kind} element")
    _check_thermal(ctx, path, v)
    if kind == "diode":
        _check_diode(ctx, path, v)
    elif kind in ("zener", "tvs"):
        check_breakdown(ctx, path, kind, v)
    elif kind == "varistor":
        v.setdefault("at_current", 1e-3)  # varistor voltage is conventionally stated at 1 mA
    return Element(**v, path=format_path(path))


def _options(ctx: Context, raw: Any) -> tuple[Option, ...]:
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
        v = _table(ctx, ("option", i), item, OPTION, "[[option]]")
        out.append(Option(v["name"], _clamps(ctx, item.get("clamp"), ("option", i, "clamp"))))
    names = [o.name for o in out]
    for i, name in enumerate(names):
        if name in names[:i]:
            raise ctx.error(("option", i, "name"), f"option name {name!r} used twice (expected unique names)")
    return tuple(out)


def _clamps(ctx: Context, raw: Any, where: KeyPath = ("clamp",)) -> tuple[Clamp, ...]:
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
        v = _table(ctx, path, item, CLAMP, "[[clamp]]")
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


def build_case(ctx: Context, doc: dict[str, Any], name: str, text: str) -> Case:
    """Validate a parsed case document into a :class:`Case`: every rule of the case file but the
    ``[tolerance]`` section (which :func:`kickback.caseio.load_case` reads on the built case)."""
    def fail(path: KeyPath, message: str):
        raise ctx.error(path, message) if path else CaseError(message, source=name)

    check_structure(doc, fail)
    top = {key: Field("s") for key in TOP}
    for key in doc:
        if key not in TOP:
            raise _unknown(ctx, (key,), top, "the top level")
    if "title" not in doc:
        raise ctx.missing(("title",), "a string, e.g. title = \"Relay driver, 12 V\"")
    title = _value(ctx, ("title",), STRING, doc["title"])
    if not title.strip():
        raise ctx.error(("title",), "empty title (expected a short description of the case)")
    tables = {}
    for key in ("supply", "coil", "switch"):
        if key not in doc:
            raise ctx.missing((key,), f"a [{key}] table", "table")
        tables[key] = doc[key]
    supply = Supply(**_table(ctx, ("supply",), tables["supply"], SUPPLY, "[supply]"))
    coil_values = _table(ctx, ("coil",), tables["coil"], COIL, "[coil]")
    switch = _switch(ctx, tables["switch"], supply.voltage)
    if coil_values["resistance"] == 0 and "initial_current" not in coil_values and switch.type != "mosfet":
        raise ctx.error(("coil", "resistance"), "zero resistance gives an unbounded on-state current; give "
                        "coil.initial_current (expected a resistance > 0 or an initial_current)")
    clamps = _clamps(ctx, doc.get("clamp"))
    options = _options(ctx, doc.get("option"))
    drive = _drive(ctx, doc["drive"]) if "drive" in doc else None
    motor = _motor(ctx, doc["motor"]) if "motor" in doc else None
    checks = Checks(**_table(ctx, ("checks",), doc.get("checks", {}), CHECKS, "[checks]"))
    case = Case(title=title, supply=supply, coil=Coil(**coil_values), switch=switch, clamps=clamps,
                checks=checks, source=name, text=text, options=options, drive=drive, motor=motor)
    return case
