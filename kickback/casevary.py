"""Values a study varies (sweep, tolerance), checked by the case file's own rules.

A varied value — a numeric key, or one entry of a list by its index (``switch.thermal_tau[1]``,
``drive.duties[0]``) — must pass exactly what the same value would have to pass in the case file: the
key must exist for the case's structure (``switch.saturation_voltage`` applies to a BJT only,
``drive.duty`` needs a ``[drive]`` with one duty), the value its key's range, and the case with
the value in place every rule across keys (a supply below the switch's breakdown voltage, a
derating in (0, 1], …). The rules are not written again here: the case is turned back into a
case document and run through the loader (:func:`kickback.casebuild.build_case`).

Every rule of the case file bounds one value by others monotonically (a comparison, a product
below a bound, a diode's ideality that moves one way with each of its parameters), so over a
box of values — a sweep's grid, the spread of a tolerance study's samples — the rules hold
everywhere when they hold at the box's corners: :func:`check_ranges` checks the corners.
"""

from __future__ import annotations

import dataclasses
import itertools
import math

from kickback.case import Case
from kickback.casebounds import MAGNITUDE
from kickback.casebuild import Context, build_case
from kickback.casekeys import (
    CONDITIONS,
    NUMERIC,
    NUMERIC_LISTS,
    Field,
    did_you_mean,
    key_specs,
    leaf_units,
    numeric_keys,
)
from kickback.errors import CaseError
from kickback.keypath import split_path
from kickback.units import format_quantity

#: the key tables' own functions, kept here for callers
__all__ = ["MAX_CORNER_KEYS", "case_doc", "check_each", "check_ranges", "check_values", "leaf_units", "numeric_keys",
           "resolve", "variable_paths"]
#: field kinds a study varies: one number, or one entry of a list
_VARIABLE = NUMERIC + NUMERIC_LISTS
#: at most this many varied keys are checked at every corner of their box (2^k loader runs);
#: beyond it each key's ends are checked with the others at their nominal values
MAX_CORNER_KEYS = 10


def variable_paths(case: Case) -> list[str]:
    """Every key path of ``case`` a study may vary (those :func:`resolve` accepts): each numeric
    key, and each entry of a list the case gives (``switch.thermal_tau[1]``, ``drive.duties[0]``)."""
    tables, elements, only = key_specs()
    out = []
    for t, spec in tables.items():
        for k, f in spec.items():
            for path in _paths(f"{t}.{k}", f, getattr(case, t, None), k):
                try:
                    _field(case, path)
                except CaseError:
                    continue
                out.append(path)
    for i, cl in enumerate(case.clamps):
        for j, el in enumerate(cl.elements):
            for k, f in elements[el.type].items():
                out += _paths(f"clamp[{i}].element[{j}].{k}", f, el, k)
    return out


def _paths(path: str, field, obj, key: str) -> list[str]:
    """``[path]`` for a numeric key, one path per entry for a list key, else none."""
    if field.kind in NUMERIC:
        return [path]
    if field.kind in NUMERIC_LISTS:
        return [f"{path}[{e}]" for e in range(len(getattr(obj, key, None) or ()))]
    return []


def resolve(case: Case, path: str) -> str:
    """The unit of the value at ``path`` in ``case``, if a study may vary it there.

    Raises
    ------
    CaseError — with ``key=path``: no such key, not a number, or a key that does not apply to
    this case (another switch type or element type, no [drive] or [motor], the other motor model);
    a mistyped path gets the case loader's "did you mean" with the closest path this case can vary.
    """
    try:
        return _field(case, path).unit
    except CaseError as err:
        hint = did_you_mean(path.replace(" ", ""), variable_paths(case))
        if not hint or "is a list" in err.message:  # (that message names the index to add)
            raise
        head, sep, tail = err.message.partition(" (expected")
        raise CaseError(head + hint + sep + tail, source=err.source, line=err.line, key=err.key) from None


def _field(case: Case, path: str) -> Field:
    """The key table's field of the one value at ``path`` (a list's entry: its one-value field)."""
    tables, elements, only = key_specs()
    parts = split_path(path)
    name, index = parts[0]
    if name == "clamp":
        if index is None or len(parts) != 3 or parts[1][0] != "element" or parts[1][1] is None:
            raise CaseError("a clamp value reads clamp[I].element[J].KEY (expected e.g. "
                            "'clamp[0].element[1].voltage')", key=path)
        if index >= len(case.clamps):
            raise CaseError(f"index {index} out of range (the case has {len(case.clamps)} clamp entries)", key=path)
        els = case.clamps[index].elements
        if parts[1][1] >= len(els):
            raise CaseError(f"index {parts[1][1]} out of range (clamp[{index}] has {len(els)} element entries)",
                            key=path)
        obj = els[parts[1][1]]
        kind, (leaf, entry) = obj.type, parts[2]
        field = elements[kind].get(leaf)
        if field is None:
            raise CaseError(f"does not apply to a {kind} element (expected one of: "
                            f"{', '.join(k for k, f in elements[kind].items() if f.kind in _VARIABLE)})", key=path)
    else:
        if name == "title" and len(parts) == 1:
            raise CaseError("'title' is not a numeric value (expected a key holding one number)", key=path)
        if name not in tables or len(parts) != 2 or index is not None:
            raise CaseError(f"no key {path!r} in the case file (expected TABLE.KEY with TABLE one of "
                            f"{', '.join(tables)}, or clamp[I].element[J].KEY)", key=path)
        leaf, entry = parts[1]
        field = tables[name].get(leaf)
        if field is None:
            raise CaseError(f"unknown key in [{name}] (expected one of: "
                            f"{', '.join(k for k, f in tables[name].items() if f.kind in _VARIABLE)})", key=path)
        _applies(case, name, leaf, only, path)
        obj = getattr(case, name)
    if field.kind in NUMERIC_LISTS:
        n = len(getattr(obj, leaf, None) or ())
        if entry is None:
            raise CaseError(f"{leaf!r} is a list (expected one entry by its index, e.g. {path.strip()}[0])",
                            key=path)
        if entry >= n:
            raise CaseError(f"index {entry} out of range (the case gives {n} {leaf} entries)", key=path)
        return dataclasses.replace(field, kind="q" if field.kind == "l" else "n")
    elif field.kind not in NUMERIC:
        raise CaseError(f"{leaf!r} is not a numeric value (expected a key holding one number)", key=path)
    elif entry is not None:
        raise CaseError(f"{leaf!r} holds one value (expected no index: {leaf}, not {leaf}[{entry}])", key=path)
    return field


def _applies(case: Case, table: str, leaf: str, only: dict, path: str) -> None:
    """Refuse a table key that does not apply to the case's structure."""
    if table == "switch" and leaf in only and only[leaf] != case.switch.type:
        raise CaseError(f"applies to a {only[leaf]} switch, not to type '{case.switch.type}' "
                        "(expected a key of the case's switch)", key=path)
    if table == "drive":
        if case.drive is None:
            raise CaseError("the case has no [drive] (expected a key of a table the case has)", key=path)
        if leaf == "duty" and len(case.drive.duties) != 1:
            raise CaseError(f"the case gives {len(case.drive.duties)} duties (expected a [drive] with one duty "
                            "to vary drive.duty)", key=path)
    if table == "motor":
        m = case.motor
        if m is None:
            raise CaseError("the case has no [motor] (expected a key of a table the case has)", key=path)
        if leaf == "speed" and m.mechanical:
            raise CaseError("the motor has a mechanical model (expected inertia, viscous_friction or "
                            "load_torque, not speed)", key=path)
        if leaf in ("inertia", "viscous_friction", "load_torque") and not m.mechanical:
            raise CaseError("the motor runs at a fixed speed (expected motor.speed; the mechanical keys need "
                            "motor.inertia instead of speed)", key=path)


# --------------------------------------------------------------------------- the case as a document
def _number(x: float, unit: str):
    """A value as the case file writes it: a quantity string with its unit, or a plain number."""
    if not unit:
        return float(x)
    import numpy as np

    return f"{np.format_float_positional(float(x), unique=True, trim='-')} {unit}"


def _table_doc(obj, spec: dict, keep: tuple = ()) -> dict:
    """The keys of ``spec`` that ``obj`` sets: not None and not its dataclass default (a key the
    case file could have left out), plus ``keep``."""
    out = {}
    defaults = {f.name: f.default for f in dataclasses.fields(obj)}
    for key, field in spec.items():
        if not hasattr(obj, key):
            continue
        val = getattr(obj, key)
        if val is None or (key not in keep and val == defaults.get(key, dataclasses.MISSING)):
            continue
        if field.kind in ("q",):
            val = _number(val, field.unit)
        elif field.kind == "l":
            val = [_number(x, field.unit) for x in val]
        elif field.kind == "ln":
            val = [float(x) for x in val]
        out[key] = val
    return out


def case_doc(case: Case) -> dict:
    """``case`` as a case document (what :func:`tomllib.loads` gives for its case file), without
    [[option]] and [tolerance]."""
    tables, elements, _ = key_specs()
    keep = {"ideal": (), "mosfet": ("on_resistance",), "bjt": ("saturation_voltage",)}[case.switch.type]
    doc = {"title": case.title, "supply": _table_doc(case.supply, tables["supply"]),
           "coil": _table_doc(case.coil, tables["coil"], ("inductance", "resistance")),
           "switch": _table_doc(case.switch, tables["switch"], ("type",) + keep),
           "checks": _table_doc(case.checks, tables["checks"])}
    if case.clamps:
        doc["clamp"] = [{"name": cl.name, "across": cl.across,
                         "element": [_table_doc(el, elements[el.type], ("type",)) for el in cl.elements]}
                        for cl in case.clamps]
    if case.drive is not None:
        d = case.drive
        doc["drive"] = {"frequency": _number(d.frequency, "Hz"), "final_turn_off": d.final_turn_off}
        if len(d.duties) == 1:
            doc["drive"]["duty"] = float(d.duties[0])
        else:
            doc["drive"]["duties"] = [float(x) for x in d.duties]
    if case.motor is not None:
        doc["motor"] = _table_doc(case.motor, tables["motor"], ("back_emf_constant",))
        if case.motor.mechanical:
            doc["motor"].pop("speed", None)
    return doc


def _put(doc: dict, path: str, value: float, unit: str) -> None:
    parts = split_path(path)
    node = doc
    for name, index in parts[:-1]:
        node = node[name] if index is None else node[name][index]
    leaf, entry = parts[-1]
    if entry is None:
        node[leaf] = _number(value, unit)
        return
    if leaf == "duties" and "duties" not in node:  # case_doc writes a lone duty as duty = x
        node["duties"] = [node.pop("duty")]
    node[leaf][entry] = _number(value, unit)


# --------------------------------------------------------------------------- checks
def check_values(case: Case, values: dict, what: str = "--vary") -> None:
    """Check ``case`` with the values ``{path: value}`` in place, by the case file's rules.

    Raises
    ------
    CaseError — ``key=what``; the message names the values and the rule they break, on one line.
    """
    units = {path: resolve(case, path) for path in values}
    doc = case_doc(case)
    for path, x in values.items():
        _put(doc, path, x, units[path])
    try:
        build_case(Context(case.source, ""), doc, case.source, "")
    except CaseError as err:
        shown = ", ".join(f"{p} = {_shown(x, units[p])}" for p, x in values.items())
        rule = f"{err.key}: {err.message}" if err.key else err.message
        raise CaseError(f"with {shown}: {rule}", source=case.source, key=what) from None


def _shown(x: float, unit: str) -> str:
    return format_quantity(x, unit) if unit else f"{x:g}"


def check_ranges(case: Case, ranges: dict, what: str = "--vary") -> None:
    """Check every corner of the box ``{path: (low, high)}`` (see the module docstring).

    Raises
    ------
    CaseError — a key that cannot be varied, or a corner that breaks a rule (``key=what``).
    """
    for path in ranges:
        resolve(case, path)
    for path, (lo, hi) in ranges.items():
        if not (math.isfinite(lo) and math.isfinite(hi)):
            raise CaseError(f"{path}: the values must be finite (got {lo:g} to {hi:g})", source=case.source,
                            key=what)
    keys = list(ranges)
    ends = [sorted({float(ranges[k][0]), float(ranges[k][1])}) for k in keys]
    if len(keys) <= MAX_CORNER_KEYS:
        corners = itertools.product(*ends)
        for corner in corners:
            check_values(case, dict(zip(keys, corner, strict=True)), what)
        return
    for k, e in zip(keys, ends, strict=True):
        for x in e:
            check_values(case, {k: x}, what)
    for pick in (0, -1):
        check_values(case, {k: e[pick] for k, e in zip(keys, ends, strict=True)}, what)


def check_each(case: Case, path: str, values, what: str = "variations") -> None:
    """Every one of ``values`` at ``path`` passes its key's own rule — finite, its condition
    (``> 0``, ``in (0, 1]``, …) and, for a quantity, the magnitude kickback computes with —
    checked at once over the array; the first that does not is put through the loader
    (:func:`check_values`) for the case file's own message. The rules across keys are left to
    the caller (:func:`check_ranges` for a box of values).

    Raises
    ------
    CaseError — ``key=what``: the value, the key and what was expected, on one line.
    """
    import numpy as np

    field = _field(case, path)
    a = np.asarray(values, float).ravel()
    ok = np.isfinite(a)
    with np.errstate(invalid="ignore"):
        ok &= np.array([CONDITIONS[field.cond][0](x) for x in a], bool) if field.cond else True
        if field.kind == "q":
            ok &= (a == 0) | ((np.abs(a) >= MAGNITUDE[0]) & (np.abs(a) <= MAGNITUDE[1]))
    if ok.all():
        return
    k = int(np.argmin(ok))
    if not math.isfinite(a[k]):
        raise CaseError(f"{path}: the values must be finite (got {a[k]:g} at index {k})", source=case.source,
                        key=what)
    check_values(case, {path: float(a[k])}, what)
    raise CaseError(f"{path}: {_shown(float(a[k]), field.unit)} at index {k} (expected {field.expected()})",
                    source=case.source, key=what)
