"""Bounds of a case file and the usual range of each quantity key.

The loader (:mod:`kickback.caseio`) refuses a case beyond these bounds with a located one-line
message, and notes (on stderr, not an error) a plain SI number that lies outside what its key
usually holds: ``inductance = 10`` is read as 10 H, which a relay coil never is. The usual
ranges are common practice for the coils, switches and clamps kickback is made for (relay,
valve, brake, contactor and small motor drivers; compare DESIGN §9's test ranges) — no source.
"""

from __future__ import annotations

import unicodedata
from typing import Any

__all__ = ["LIMITS", "MAGNITUDE", "USUAL", "check_structure", "count_error", "plain_number_note", "text_problem"]

#: upper bounds of a case (README "Bounds"); a case beyond them is refused
LIMITS = {
    "depth": 16,  # nesting of tables and arrays
    "clamps": 32,  # [[clamp]] tables (and [[option.clamp]] per option)
    "elements": 16,  # [[clamp.element]] tables per clamp
    "options": 32,  # [[option]] tables
    "array": 64,  # values in one array (Foster stages, duties)
    "tolerances": 64,  # [tolerance] entries
    "text": 200,  # characters in a title or name
}

#: magnitude of any quantity in SI, besides 0: beyond it the device laws and energies over- or underflow
MAGNITUDE = (1e-30, 1e15)

#: usual range (low, high) of a plain number per unit, in SI; a key's own range overrides it
USUAL: dict[str, tuple[float, float]] = {
    "V": (0.1, 2000.0), "A": (1e-6, 1000.0), "Ω": (1e-4, 1e7), "H": (1e-6, 5.0), "F": (1e-13, 1e-3),
    "s": (1e-9, 10.0), "J": (1e-7, 1e4), "W": (1e-3, 1e6), "Hz": (1.0, 1e6), "K/W": (1e-3, 1e3),
}
USUAL_BY_KEY: dict[str, tuple[float, float]] = {
    "supply.voltage": (1.0, 1000.0),
    "coil.resistance": (1e-2, 1e5),
    "switch.fall_time": (1e-10, 1e-4),
    "switch.on_resistance": (1e-4, 100.0),
    "release_delay": (1e-5, 1.0),
    "thermal_tau": (1e-7, 1e4),
}

_BIDI = {chr(c) for c in (*range(0x202A, 0x202F), *range(0x2066, 0x206A), 0x200E, 0x200F, 0x061C)}


def text_problem(text: str) -> str | None:
    """Why ``text`` cannot be a title or a name (control characters, bidi overrides), or None.

    Tabs and line breaks are allowed (the loader folds them into spaces); an escape sequence,
    a bell, a NUL or a bidi override, which would act on a terminal or a CSV reader, is not.
    """
    for ch in text:
        if ch in "\t\n\r":  # whitespace: folded into one space by the loader
            continue
        if unicodedata.category(ch) in ("Cc", "Zl", "Zp") or ch in _BIDI:
            return (f"holds the control character U+{ord(ch):04X} (expected printable text: no escape "
                    "sequences or terminal control codes)")
    if len(text) > LIMITS["text"]:
        return f"{len(text)} characters (expected at most {LIMITS['text']})"
    return None


def check_structure(doc: dict, fail) -> None:
    """Walk the parsed TOML without recursion; ``fail(path, message)`` raises on the first problem:
    nesting deeper than ``LIMITS["depth"]``, a key or string with control characters, an
    array longer than ``LIMITS["array"]`` (arrays of tables are bounded by their own counts)."""
    stack: list[tuple[tuple, Any]] = [((), doc)]
    while stack:
        path, node = stack.pop()
        if len(path) > LIMITS["depth"]:
            fail(path[:LIMITS["depth"]], f"nested more than {LIMITS['depth']} levels deep (expected the "
                                         "tables of a case file)")
        if isinstance(node, dict):
            for key, value in node.items():
                why = text_problem(key)
                if why:
                    fail(path, f"a key {why}")
                stack.append((path + (key,), value))
        elif isinstance(node, list):
            if len(node) > LIMITS["array"] and not all(isinstance(x, dict) for x in node):
                fail(path, f"{len(node)} values (expected at most {LIMITS['array']} in one array)")
            stack.extend((path + (k,), x) for k, x in enumerate(node))
        elif isinstance(node, str):
            why = text_problem(node)
            if why and not why.endswith(f"at most {LIMITS['text']})"):
                fail(path, why)
            digit = next((c for c in node if c.isdigit() and not c.isascii()), None)
            if digit and path and path[-1] not in ("title", "name"):
                fail(path, f"holds the digit {digit!r} (U+{ord(digit):04X}) (expected ASCII digits 0-9 in a value)")


def count_error(what: str, n: int, limit_key: str) -> str | None:
    """The message for ``n`` items beyond their bound, or None."""
    limit = LIMITS[limit_key]
    if n <= limit:
        return None
    return f"{n} {what} (expected at most {limit}; see the bounds in the README)"


def plain_number_note(key: str, raw: Any, value: float, unit: str) -> str | None:
    """A note when a plain (unit-less) number lies outside its key's usual range, else None.

    Parameters
    ----------
    key : str
        The key path, e.g. ``coil.inductance``.
    raw : int or float
        The number as written.
    value : float
        The value in SI [``unit``].
    unit : str
        The key's unit.
    """
    from kickback.units import example, format_quantity

    if isinstance(raw, str) or value == 0 or unit not in USUAL:
        return None
    last = key.rsplit(".", 1)[-1]
    lo, hi = USUAL_BY_KEY.get(key, USUAL_BY_KEY.get(last, USUAL[unit]))
    if lo <= abs(value) <= hi:
        return None
    return (f"the plain number {raw:g} is read in SI as {format_quantity(value, unit)}, outside the usual "
            f"{format_quantity(lo, unit)} to {format_quantity(hi, unit)} for this key (write the unit if "
            f"another value was meant, e.g. '{example(unit)}')")
