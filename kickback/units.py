"""Quantities: read "80 mH" as 0.08 with the unit checked, and write 0.08 as "80 mH".

A quantity in a case file is either a plain number (already in SI) or a string made of a
decimal number, an optional space, an optional SI prefix and a unit symbol. The unit must be
the one the key expects; nothing is guessed. Temperatures for a key in kelvin may also be
given in degrees Celsius ("25 °C", "25 degC").

Formatting uses the ``quantiphy`` library in engineering notation ("4.7 kΩ", "200 ns").

References
----------
BIPM, *The International System of Units (SI)*, 9th ed., 2019: unit symbols (section 2.3),
SI prefixes (section 3, table 7) and the kelvin / degree Celsius relation t/°C = T/K − 273.15.
"""

from __future__ import annotations

import math
import re
from decimal import Decimal, InvalidOperation
from numbers import Real

from quantiphy import Quantity

from kickback.errors import KickbackError

__all__ = ["UNITS", "UnitError", "example", "format_number", "format_quantity", "normalize_unit",
           "parse_quantity"]

#: SI prefixes accepted on input, with their power of ten (BIPM SI brochure, table 7).
PREFIXES: dict[str, int] = {
    "y": -24, "z": -21, "a": -18, "f": -15, "p": -12, "n": -9,
    "u": -6, "\u00b5": -6, "\u03bc": -6,  # u, micro sign, Greek small mu
    "m": -3, "k": 3, "M": 6, "G": 9, "T": 12,
}

#: Canonical unit symbols kickback knows.
UNITS = ("V", "A", "Ω", "H", "F", "s", "W", "J", "Hz", "K", "K/W")

#: Spellings accepted for each unit symbol (after an optional prefix).
_ALIASES: dict[str, str] = {u: u for u in UNITS}
_ALIASES.update({"\u2126": "Ω", "ohm": "Ω", "ohms": "Ω", "Ohm": "Ω"})  # U+2126 is the ohm sign

#: Spellings of degree Celsius (no prefix allowed); accepted where kelvin is expected.
_CELSIUS = ("°C", "degC", "\u2103")
_KELVIN_AT_0_CELSIUS = Decimal("273.15")  # exact by definition of the degree Celsius

_EXAMPLES = {"V": "24 V", "A": "500 mA", "Ω": "4.7 kΩ", "H": "80 mH", "F": "220 pF", "s": "200 ns",
             "W": "600 W", "J": "30 mJ", "Hz": "20 kHz", "K": "25 °C", "K/W": "2.5 K/W"}

_NUMBER = r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?"  # ASCII digits only: no "１０"
_QUANTITY_RE = re.compile(rf"(?P<num>{_NUMBER})\s*(?P<unit>.*)", re.DOTALL)
# resistor/capacitor code with the prefix letter as decimal mark: 4k7, 2R2, R47, 1n5, 4K7Ω
_RKM_RE = re.compile(r"[+-]?(?P<int>[0-9]*)(?P<letter>[RrKkMGTmunpfµμ])(?P<frac>[0-9]+)\s*\S*")
_NONFINITE_RE = re.compile(r"[+-]?(?:nan|inf(?:inity)?)\b.*", re.IGNORECASE | re.DOTALL)
_UNIT_TOKEN_RE = re.compile(r"(?:[^\W\d_]|°|/)+")


class UnitError(KickbackError, ValueError):
    """A quantity could not be read, or carries the wrong unit.

    ``message`` is the reason alone; ``str(err)`` is ``"key: message"`` when ``key`` is known.
    """

    def __init__(self, message: str, *, key: str | None = None):
        self.message = message
        self.key = key
        super().__init__(self.__str__())

    def __str__(self) -> str:
        return f"{self.key}: {self.message}" if self.key else self.message


class _Quantity(Quantity):
    """quantiphy with kickback's own output preferences (the library's globals stay untouched)."""


_Quantity.set_prefs(output_sf="TGMkmunpfa", map_sf={"u": "\u00b5"}, strip_zeros=True, spacer=" ")


def normalize_unit(unit: str) -> str:
    """Return the canonical symbol of ``unit`` ("ohm" → "Ω").

    Parameters
    ----------
    unit : str
        A unit symbol or alias from :data:`UNITS` (no prefix).

    Returns
    -------
    str
        The canonical symbol.

    Raises
    ------
    UnitError
        If the unit is not one kickback knows.
    """
    try:
        return _ALIASES[unit]
    except (KeyError, TypeError):
        raise UnitError(f"unknown unit {unit!r} (expected one of {', '.join(UNITS)})") from None


def example(unit: str) -> str:
    """Return a typical quantity string for ``unit``, used in messages ("H" → "80 mH")."""
    return _EXAMPLES[normalize_unit(unit)]


def _expected(unit: str) -> str:
    if unit == "K":
        return "expected a value in K, e.g. '298.15 K' or '25 °C'"
    return f"expected a value in {unit}, e.g. '{_EXAMPLES[unit]}'"


def _resolve(token: str) -> tuple[int, str] | None:
    """Split a unit token into (power of ten, canonical unit); °C gives (0, "°C")."""
    if token in _CELSIUS:
        return 0, "°C"
    if token in _ALIASES:  # an exact unit first: "Hz" is hertz, not a prefix
        return 0, _ALIASES[token]
    if len(token) > 1 and token[0] in PREFIXES and token[1:] in _ALIASES:
        return PREFIXES[token[0]], _ALIASES[token[1:]]
    return None


def _rkm_hint(text: str, unit: str) -> str | None:
    m = _RKM_RE.fullmatch(text)
    if m is None:
        return None
    letter = m["letter"]
    prefix = "" if letter in "Rr" else ("k" if letter == "K" else letter)
    return (f"RKM code {text!r} is not accepted; write "
            f"'{m['int'] or '0'}.{m['frac']} {prefix}{unit}'")


def _parse_text(text: str, unit: str) -> float:
    s = text.strip()
    if not s:
        raise UnitError(f"empty string ({_expected(unit)})")
    hint = _rkm_hint(s, unit)
    if hint:
        raise UnitError(hint)
    m = _QUANTITY_RE.fullmatch(s)
    if m is None:
        if _NONFINITE_RE.fullmatch(s):
            raise UnitError(f"{s!r} is not a finite number ({_expected(unit)})")
        raise UnitError(f"cannot read {s!r} as a quantity ({_expected(unit)})")
    num, token = m["num"], m["unit"].strip()
    if not token:
        raise UnitError(f"no unit in {s!r} ({_expected(unit)}; a plain number, not a string, is read as SI)")
    if token.lower().startswith("meg"):
        raise UnitError(f"'meg' is not an SI prefix; write '{num} M{unit}'")
    if not _UNIT_TOKEN_RE.fullmatch(token):
        raise UnitError(f"cannot read {s!r} as a quantity ({_expected(unit)})")
    resolved = _resolve(token)
    if resolved is None:
        if token[0] == "K" and token[1:] in _ALIASES:
            raise UnitError(f"'K' is not an SI prefix, kilo is 'k'; write '{num} k{_ALIASES[token[1:]]}'")
        raise UnitError(f"unknown unit {token!r} ({_expected(unit)})")
    power, found = resolved
    if found == "°C" and unit == "K":
        value = Decimal(num) + _KELVIN_AT_0_CELSIUS
    elif found != unit:
        raise UnitError(f"wrong unit {token!r} ({_expected(unit)})")
    else:
        value = Decimal(num).scaleb(power)
    try:
        result = float(value)  # Decimal -> float rounds correctly: "4.7 k" is exactly 4700.0
    except (InvalidOperation, OverflowError):  # pragma: no cover - float() of a Decimal saturates
        result = math.inf
    if not math.isfinite(result):
        raise UnitError(f"{s!r} is out of range ({_expected(unit)})")
    return result + 0.0  # -0.0 -> 0.0


def parse_quantity(value: object, unit: str, *, key: str | None = None) -> float:
    """Read a quantity as an SI float, checking its unit.

    Parameters
    ----------
    value : int, float or str
        A plain number, taken as already in SI units of ``unit``, or a string such as
        ``"80 mH"``, ``"4.7 kΩ"``, ``"4.7 kohm"``, ``"200 ns"``, ``"-5 V"``, ``"1e-3 A"``.
        For ``unit="K"`` the string may be in degrees Celsius (``"25 °C"``, ``"25 degC"``).
    unit : str
        The unit the value must carry: one of :data:`UNITS` or an alias ("ohm").
    key : str, optional
        Name of the value, prefixed to error messages.

    Returns
    -------
    float
        The value in SI units [``unit``]. Celsius converts as

        .. math:: T = t + 273.15

    Raises
    ------
    UnitError
        On a wrong or missing unit, an RKM code ("4k7"), "meg", a boolean, NaN, infinity,
        an empty string or anything else that is not a quantity.

    References
    ----------
    BIPM, *The International System of Units (SI)*, 9th ed., 2019, sections 2.3 and 3.
    """
    unit = normalize_unit(unit)
    try:
        if isinstance(value, bool):
            raise UnitError(f"expected a number or a string, got a boolean ({_expected(unit)})")
        if isinstance(value, str):
            result = _parse_text(value, unit)
        elif isinstance(value, int) and abs(value) > 2**1023:
            raise UnitError(f"an integer of about {value.bit_length() * 0.30103:.0f} digits "
                            "is not a finite number in floating point "
                            f"({_expected(unit)})")
        elif isinstance(value, Real):
            try:
                result = float(value) + 0.0
            except OverflowError:
                result = math.inf
            if not math.isfinite(result):
                raise UnitError(f"{value!r} is not a finite number ({_expected(unit)})")
        else:
            raise UnitError(f"expected a number or a string, got {type(value).__name__} ({_expected(unit)})")
        if unit == "K" and result < 0:
            raise UnitError(f"{value!r} is below absolute zero ({_expected(unit)})")
        return result
    except UnitError as err:
        if key is not None and err.key is None:
            raise UnitError(err.message, key=key) from None
        raise


def format_quantity(value: float | None, unit: str, digits: int = 4) -> str:
    """Write a quantity in engineering notation with an SI prefix.

    Parameters
    ----------
    value : float or None
        The value in SI units [``unit``]; None gives "—".
    unit : str
        Unit symbol or alias (see :data:`UNITS`).
    digits : int
        Significant digits at most (trailing zeros are dropped).

    Returns
    -------
    str
        For example ``format_quantity(0.08, "H") == "80 mH"`` and
        ``format_quantity(4700, "ohm") == "4.7 kΩ"``; non-finite values read "NaN V", "inf V".
    """
    if value is None:
        return "—"
    if digits < 1:
        raise ValueError(f"digits must be >= 1, got {digits}")
    unit = normalize_unit(unit)
    v = float(value) + 0.0
    if math.isnan(v):
        return f"NaN {unit}"
    if math.isinf(v):
        return f"{'-' if v < 0 else ''}inf {unit}"
    return _Quantity(v, unit).render(prec=digits - 1)


def format_number(value: float | None, digits: int = 4) -> str:
    """Write a plain number (no unit) with up to ``digits`` significant digits; None gives "—".

    Parameters
    ----------
    value : float or None
        The number [1].
    digits : int
        Significant digits at most.

    Returns
    -------
    str
        For example ``format_number(1.9) == "1.9"`` and ``format_number(0.8) == "0.8"``.
    """
    if value is None:
        return "—"
    return f"{float(value) + 0.0:.{digits}g}"
