"""Read a measured trace (time and one current or voltage column) from a generic CSV file.

What is tolerated: leading comment or metadata lines (anything before the block of numeric
rows), a header row just above the numbers, comma, semicolon, tab or whitespace separators,
decimal commas with a semicolon or tab separator, quoted fields, units in the header as
``time [s]``, ``t (ms)``, ``I [mA]``, ``Vshunt [mV]`` or ``t/ms``. What is never guessed: a
unit. A column without one needs ``time_unit`` / ``value_unit``.

Errors are :class:`TraceError` with one line ``FILE: what is wrong (expected …)``.
"""

from __future__ import annotations

import csv
import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from kickback.errors import KickbackError
from kickback.units import UnitError, parse_quantity

__all__ = ["Trace", "TraceError", "read_trace", "unit_scale"]

#: bounds of a trace file (README "Bounds"): bytes and rows (a long oscilloscope record, decimated)
MAX_TRACE_BYTES = 64 << 20
MAX_TRACE_ROWS = 2_000_000
QUANTITIES = {"s": "time", "A": "current", "V": "voltage"}
_UNIT_ALIASES = {"sec": "s", "secs": "s", "second": "s", "seconds": "s", "amp": "A", "amps": "A",
                 "volt": "V", "volts": "V"}
_BRACKET_RE = re.compile(r"^(?P<name>.*?)\s*[\[(]\s*(?P<unit>[^\])]*?)\s*[\])]\s*$")
_SLASH_RE = re.compile(r"^(?P<name>[^/]*?)\s*/\s*(?P<unit>[^\s/]+)$")
_TIME_NAME_RE = re.compile(r"^(t|time|zeit|x|x-axis|sec|seconds?)$", re.IGNORECASE)
_CURRENT_NAME_RE = re.compile(r"^(i|current|i_?coil|coil current|icoil)\b", re.IGNORECASE)
_VOLTAGE_NAME_RE = re.compile(r"^(v|u)", re.IGNORECASE)
_COMMENT_PREFIXES = ("#", "%", "//")
_DELIMITERS = (",", ";", "\t", None)  # None: runs of whitespace
_WS_HEADER_RE = re.compile(r"[^\s\[(]+(?:\s*[\[(][^\])]*[\])])?")


class TraceError(KickbackError, ValueError):
    """A trace file cannot be read or does not hold what is needed; ``str`` is ``FILE: message``."""

    def __init__(self, source: str, message: str):
        self.source = source
        self.message = message
        super().__init__(f"{source}: {message}")


@dataclass(frozen=True)
class Trace:
    """One measured signal against time, in SI units.

    Attributes
    ----------
    source : str — the file name, for messages
    t : ndarray — [s] sample times, increasing, with the trigger offset removed
    values : ndarray — [A] or [V] the signal
    quantity : str — "current" or "voltage"
    time_column, value_column : str — the header names used
    columns : tuple of str — every column found
    notes : tuple of str — what was assumed or converted (for stderr)
    """

    source: str
    t: np.ndarray
    values: np.ndarray
    quantity: str
    time_column: str
    value_column: str
    columns: tuple[str, ...]
    notes: tuple[str, ...] = ()

    @property
    def unit(self) -> str:
        return "A" if self.quantity == "current" else "V"


def unit_scale(token: str, bases=("s", "A", "V")) -> tuple[float, str]:
    """Scale to SI and base unit of a unit token ("ms" → (1e-3, "s"), "mA" → (1e-3, "A")).

    Parameters
    ----------
    token : str — a unit with an optional SI prefix
    bases : iterable of str — the base units allowed

    Returns
    -------
    (float, str) — (factor [SI per unit of ``token``], base unit)

    Raises
    ------
    UnitError
        When ``token`` is none of the allowed units.
    """
    tok = _UNIT_ALIASES.get(token.strip(), token.strip())
    for base in bases:
        try:
            return parse_quantity(f"1 {tok}", base), base
        except UnitError:
            continue
    kinds = " or ".join(QUANTITIES[b] for b in bases)
    raise UnitError(f"{token!r} is not a {kinds} unit (expected e.g. "
                    f"{', '.join(repr(e) for e in ('ms', 'mA', 'mV') if e[-1] in bases)})")


def _split_header(text: str) -> tuple[str, str | None]:
    """``"time [ms]"`` → ("time", "ms"); ``"I"`` → ("I", None)."""
    text = text.strip().strip('"').strip("'").strip()
    for rx in (_BRACKET_RE, _SLASH_RE):
        m = rx.match(text)
        if m and m["name"]:
            return m["name"].strip(), m["unit"].strip() or None
    return text, None


def _number(field: str, decimal_comma: bool) -> float | None:
    f = field.strip().strip('"')
    try:
        return float(f)
    except ValueError:
        if decimal_comma and "," in f:
            try:
                return float(f.replace(",", "."))
            except ValueError:
                return None
        return None


def _split(lines: list[str], delim) -> list[list[str]]:
    """Fields of each line; trailing empty fields (a separator at the end of a row) are dropped."""
    if delim is None:
        return [ln.split() for ln in lines]
    rows = []
    for row in csv.reader(lines, delimiter=delim):
        while row and not row[-1].strip():
            row = row[:-1]
        rows.append(row)
    return rows


def _numeric_block(rows: list[list[str]], decimal_comma: bool):
    """Longest run of consecutive rows (≥ 2 fields, same count) that are all numbers."""
    best = (0, 0, 0)  # (length, start, ncols)
    start, ncols = None, 0
    parsed: list[list[float] | None] = []
    for row in rows:
        vals = [_number(f, decimal_comma) for f in row] if len(row) >= 2 else None
        parsed.append(None if vals is None or any(v is None for v in vals) else vals)
    for k, vals in enumerate(parsed + [None]):
        if vals is not None and start is not None and len(vals) == ncols:
            continue
        if start is not None and k - start > best[0]:
            best = (k - start, start, ncols)
        start, ncols = (k, len(vals)) if vals is not None else (None, 0)
    n, s, nc = best
    return s, nc, [parsed[k] for k in range(s, s + n)]


def _read_table(path: Path, source: str):
    from kickback.casetext import read_bounded
    from kickback.errors import CaseError

    if not path.exists():
        raise TraceError(source, "no such file (expected a CSV trace of time and current or voltage)")
    try:
        data = read_bounded(path, source, MAX_TRACE_BYTES, "a CSV trace of time and current or voltage")
    except CaseError as err:
        raise TraceError(source, err.message) from None
    text = data.decode("utf-8", errors="replace").removeprefix("\ufeff")
    lines = [ln for ln in text.splitlines()
             if ln.strip() and not ln.lstrip().startswith(_COMMENT_PREFIXES)]
    if len(lines) > MAX_TRACE_ROWS:
        raise TraceError(source, f"{len(lines):,} rows, too many (expected at most {MAX_TRACE_ROWS:,} rows; "
                                 "decimate the trace)")
    best = None
    for delim in _DELIMITERS:
        rows = _split(lines, delim)
        s, nc, block = _numeric_block(rows, decimal_comma=delim in (";", "\t"))
        if block and (best is None or len(block) > len(best[2])):
            best = (rows, s, block, nc, delim)
    if best is None:
        raise TraceError(source, "no numeric rows (expected rows of at least two numbers, time and "
                                 "value, such as '0.0012,0.35', below an optional header)")
    rows, s, block, nc, delim = best
    above = [_header_fields(lines[k], rows[k], delim) for k in range(max(s - 2, 0), s)]
    header = None
    if above and len(above[-1]) == nc:
        header = [h.strip() for h in above[-1]]
        if len(above) == 2 and len(above[0]) == nc and all(_is_unit(h) for h in header):
            header = [f"{n.strip()} [{u}]" if u else n.strip() for n, u in zip(above[0], header, strict=True)]
    if header is None:
        header = [f"column {k + 1}" for k in range(nc)]
    return header, np.array(block, dtype=float)


def _header_fields(line: str, row: list[str], delim) -> list[str]:
    """Header fields; with whitespace separators a unit in brackets stays with its name."""
    if delim is None:
        return _WS_HEADER_RE.findall(line)
    return row


def _is_unit(field: str) -> bool:
    """A bare unit token (a units row under the names), or an empty field."""
    f = field.strip().strip('"')
    if not f:
        return True
    try:
        unit_scale(f)
    except UnitError:
        return False
    return True


def _find_column(spec: str, header: list[str], names: list[str], what: str, source: str) -> int:
    s = spec.strip()
    if s.isdigit():
        k = int(s)
        if 1 <= k <= len(header):
            return k - 1
    else:
        for k, (h, n) in enumerate(zip(header, names, strict=True)):
            if s.lower() in (h.lower(), n.lower()):
                return k
    found = ", ".join(repr(h) for h in header)
    raise TraceError(source, f"{what} column {spec!r} not found (columns found: {found}; "
                             f"give a name or a number from 1 to {len(header)})")


def _guess_time(names, units) -> int:
    for k, u in enumerate(units):
        if u is not None and u[1] == "s":
            return k
    for k, n in enumerate(names):
        if _TIME_NAME_RE.match(n):
            return k
    return 0


def _guess_value(names, units, skip: int, want: str | None) -> int | None:
    cands = [k for k in range(len(names)) if k != skip]
    if len(cands) == 1:
        return cands[0]
    order = [("A", _CURRENT_NAME_RE), ("V", _VOLTAGE_NAME_RE)]
    if want == "voltage":
        order.reverse()
    for base, rx in order:
        for k in cands:
            if units[k] is not None and units[k][1] == base:
                return k
        for k in cands:
            if units[k] is None and rx.match(names[k]):
                return k
    return None


def _header_unit(token, column: str, source: str):
    if token is None:
        return None
    try:
        return unit_scale(token)
    except UnitError as err:
        raise TraceError(source, f"column {column!r}: {err.message}") from None


def read_trace(path, *, time_col: str | None = None, value_col: str | None = None,
               time_unit: str | None = None, value_unit: str | None = None, trigger: float = 0.0,
               shunt: float | None = None, want: str | None = None) -> Trace:
    """Read a trace from a CSV file.

    Parameters
    ----------
    path : str or Path
    time_col, value_col : str or None — a column's header name (without its unit) or its
        1-based number; None: the column with a time unit (or named t/time), and a current
        column (unit A or named I/current), else a voltage column
    time_unit, value_unit : str or None — e.g. "ms", "mA", "mV"; override the header's unit
    trigger : float — [s] time (in the file's time base, converted) that becomes t = 0
    shunt : float or None — [Ω] the value column is the voltage across this shunt; the
        trace becomes the current v/R
    want : "current", "voltage" or None — what the caller needs; a voltage column without
        ``shunt`` is an error when a current is wanted

    Returns
    -------
    Trace

    Raises
    ------
    TraceError
        With a one-line message naming the file and what was expected.
    """
    p = Path(path)
    source = str(path)
    header, data = _read_table(p, source)
    split = [_split_header(h) for h in header]
    names = [n for n, _ in split]
    units = [_header_unit(u, h, source) for (_, u), h in zip(split, header, strict=True)]
    notes = []
    kt = (_find_column(time_col, header, names, "time", source) if time_col is not None
          else _guess_time(names, units))
    if value_col is not None:
        kv = _find_column(value_col, header, names, "value", source)
    else:
        kv = _guess_value(names, units, kt, "voltage" if shunt is not None else want)
        if kv is None:
            found = ", ".join(repr(h) for h in header)
            raise TraceError(source, f"cannot tell which column holds the signal (columns found: {found}; "
                                     "expected --value-col NAME, or a unit in the header such as 'I [mA]')")
    if kv == kt:
        raise TraceError(source, f"the time and value columns are both {header[kt]!r} (expected two columns)")
    tu = unit_scale(time_unit, ("s",)) if time_unit is not None else units[kt]
    if tu is None:
        raise TraceError(source, f"column {header[kt]!r}: no time unit in the header (expected e.g. "
                                 "'time [s]' or 't (ms)', or give --time-unit)")
    if tu[1] != "s":
        raise TraceError(source, f"column {header[kt]!r}: unit is a {QUANTITIES[tu[1]]}, not a time "
                                 "(expected e.g. 's' or 'ms'; choose another column with --time-col)")
    if value_unit is not None:
        vu = unit_scale(value_unit, ("A", "V"))
    else:
        vu = units[kv]
    if vu is None:
        raise TraceError(source, f"column {header[kv]!r}: no unit in the header (expected e.g. 'I [mA]' or "
                                 "'Vshunt [mV]', or give --value-unit)")
    if vu[1] == "s":
        raise TraceError(source, f"column {header[kv]!r}: holds a time, not a current or voltage "
                                 "(choose the signal with --value-col)")
    for k, given in ((kt, time_unit), (kv, value_unit)):
        if given is not None and units[k] is not None and units[k] != unit_scale(given):
            notes.append(f"the given unit {given!r} overrides the header of column {header[k]!r}")
    t = data[:, kt] * tu[0]
    v = data[:, kv] * vu[0]
    finite = np.isfinite(t) & np.isfinite(v)
    if not finite.all():
        notes.append(f"dropped {int((~finite).sum())} rows with non-finite values")
        t, v = t[finite], v[finite]
    if t.size == 0:
        raise TraceError(source, "no numeric rows with finite values (expected numbers)")
    from kickback.casebounds import MAGNITUDE

    for k, x, unit in ((kt, t, "s"), (kv, v, vu[1])):
        big = float(np.max(np.abs(x)))
        if big > MAGNITUDE[1]:
            raise TraceError(source, f"column {header[k]!r}: values up to {big:.3g} {unit} are outside the range "
                                     f"kickback computes with (expected at most {MAGNITUDE[1]:g} {unit})")
    if t.size > 1 and np.any(np.diff(t) <= 0):
        k = int(np.nonzero(np.diff(t) <= 0)[0][0])
        raise TraceError(source, f"column {header[kt]!r}: time does not increase after row {k + 1} of "
                                 "the data (expected one sample per increasing time)")
    quantity = "current" if vu[1] == "A" else "voltage"
    if shunt is not None:
        if quantity == "current":
            raise TraceError(source, f"column {header[kv]!r} is already a current; --shunt expects a "
                                     "shunt-voltage column (unit V)")
        if not (shunt > 0 and math.isfinite(shunt)):
            raise TraceError(source, f"--shunt must be a positive resistance, got {shunt!r} Ω")
        v = v / shunt
        quantity = "current"
        notes.append(f"column {header[kv]!r} read as the voltage across a {shunt:.4g} Ω shunt (a shunt in "
                     "series with the coil is part of any resistance fitted from this trace)")
    if want == "current" and quantity != "current":
        raise TraceError(source, f"column {header[kv]!r} holds a voltage; give --shunt R to read it as a "
                                 "shunt voltage (expected a current column, unit A)")
    if trigger:
        notes.append(f"time zero moved to the trigger at {trigger:.6g} s")
    return Trace(source=source, t=t - trigger, values=v, quantity=quantity, time_column=header[kt],
                 value_column=header[kv], columns=tuple(header), notes=tuple(notes))
