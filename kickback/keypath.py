"""Case values by key path: ``supply.voltage``, ``coil.inductance``, ``clamp[0].element[1].voltage``.

The paths are the case file's own keys, so a sweep or a tolerance names a value the way the
case file does.
"""

from __future__ import annotations

import dataclasses
import re

from kickback.case import Case, Drive
from kickback.casekeys import did_you_mean, key_specs, leaf_units
from kickback.errors import CaseError

_PART = re.compile(r"([a-z_]+)(?:\[(\d+)\])?$")
#: the case's tables, named as the case file names them (the key table's, :func:`kickback.casekeys.key_specs`)
_TABLES = frozenset(key_specs()[0])


#: unit of each numeric key name ('' for a plain number), from the case loader's key tables
#: (:func:`kickback.casekeys.leaf_units`), for parsing FROM:TO strings and labelling axes
UNITS = leaf_units()


def split_path(path: str) -> list[tuple[str, int | None]]:
    """``"clamp[0].element[1].voltage"`` → ``[("clamp", 0), ("element", 1), ("voltage", None)]``."""
    return _split(path)


def _split(path: str) -> list[tuple[str, int | None]]:
    parts = []
    for raw in path.split("."):
        m = _PART.fullmatch(raw.strip())
        if m is None:
            raise CaseError(f"cannot read the key path {path!r} (expected e.g. 'coil.inductance' or "
                            "'clamp[0].element[1].voltage')", key=path)
        parts.append((m[1], None if m[2] is None else int(m[2])))
    return parts


def unit_of(path: str) -> str:
    """The unit symbol of the value a key path names ('' for a plain number)."""
    leaf = _split(path)[-1][0]
    if leaf not in UNITS:
        hint = did_you_mean(leaf, UNITS)
        expected = "a numeric key of the case file" if hint else f"one of: {', '.join(sorted(UNITS))}"
        raise CaseError(f"{leaf!r} is not a numeric case value{hint} (expected {expected})", key=path)
    return UNITS[leaf]


def get_value(case: Case, path: str) -> float | None:
    """The value at ``path`` in ``case``."""
    obj = case
    for name, index in _split(path):
        obj = _step(obj, name, index, path)
    return obj


def set_value(case: Case, path: str, value: float) -> Case:
    """A copy of ``case`` with the value at ``path`` replaced (frozen dataclasses, rebuilt upwards)."""
    unit_of(path)
    return _set(case, _split(path), float(value), path)


def _field_name(obj, name: str) -> str:
    if isinstance(obj, Case):
        if name == "clamp":
            return "clamps"
        if name in _TABLES:
            return name
    if name == "element":
        return "elements"
    return name


def _step(obj, name, index, path):
    if isinstance(obj, Drive) and name == "duty" and index is None:
        if len(obj.duties) != 1:
            raise CaseError(f"the case gives {len(obj.duties)} duties (expected one duty)", key=path)
        return obj.duties[0]
    attr = _field_name(obj, name)
    if not dataclasses.is_dataclass(obj) or attr not in {f.name for f in dataclasses.fields(obj)}:
        raise CaseError(f"no key {name!r} here (expected a key of the case file)", key=path)
    val = getattr(obj, attr)
    if index is None:
        if isinstance(val, tuple):
            raise CaseError(f"{name!r} is a list (expected an index, e.g. {name}[0])", key=path)
        return val
    if not isinstance(val, tuple) or not 0 <= index < len(val):
        n = len(val) if isinstance(val, tuple) else 0
        raise CaseError(f"index {index} out of range (the case has {n} {name} entries)", key=path)
    return val[index]


def _set(obj, parts, value, path):
    (name, index), rest = parts[0], parts[1:]
    attr = _field_name(obj, name)
    child = _step(obj, name, index, path)
    if rest:
        new_child = _set(child, rest, value, path)
    else:
        if isinstance(child, bool) or (child is not None and not isinstance(child, float | int)):
            raise CaseError(f"{name!r} is not a numeric value", key=path)
        new_child = value
    if isinstance(obj, Drive) and name == "duty" and index is None:
        return dataclasses.replace(obj, duties=(new_child,))
    if index is None:
        return dataclasses.replace(obj, **{attr: new_child})
    items = list(getattr(obj, attr))
    items[index] = new_child
    return dataclasses.replace(obj, **{attr: tuple(items)})


def value_getter(case: Case, variations: dict, n: int, rows=None):
    """``get(path)`` → (n,) float array over n variants: the varied values, else the case's value
    (NaN for a value not given, or a key the case's structure does not have).

    The one way the rating rules (:func:`kickback.ratings.check_columns`) and the batch engine
    read case values, for one case (``variations = {}``, n = 1) or many variants.

    Parameters
    ----------
    case : Case — the base case
    variations : dict — key path → (N,) values [SI]
    n : int — variants
    rows : index array or None — the rows of the varied values to take (None: all)
    """
    import math

    import numpy as np

    def get(path):
        if path in variations:
            a = np.asarray(variations[path], float)
            return a if rows is None else a[rows]
        try:
            val = get_value(case, path)
        except Exception:  # noqa: BLE001 - a key the case structure does not have: not given
            val = None
        x = math.nan if val is None or isinstance(val, bool) else float(val)
        return np.full(n, x)

    return get
