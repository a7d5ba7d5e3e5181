"""Tests of kickback.units: reading quantities with their unit checked, and writing them.

Reference for prefixes and units: BIPM, The International System of Units (SI), 9th ed. 2019,
table 7 (SI prefixes: k = 1e3, M = 1e6, m = 1e-3, µ = 1e-6, n = 1e-9, ...) and section 2.3.1
(t/°C = T/K − 273.15). Expected floats are the nearest doubles to the exact decimal values,
written here as Python float literals.
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from kickback.errors import KickbackError
from kickback.units import UnitError, format_number, format_quantity, normalize_unit, parse_quantity

GOOD = [
    ("80 mH", "H", 80e-3),
    ("4.7 kΩ", "Ω", 4.7e3),
    ("4.7 kohm", "Ω", 4.7e3),
    ("4.7 kohms", "Ω", 4.7e3),
    ("4.7 kOhm", "Ω", 4.7e3),
    ("4.7 k\u2126", "Ω", 4.7e3),  # ohm sign U+2126
    ("4.7 kΩ", "ohm", 4.7e3),  # expected unit given by alias
    ("45 mΩ", "Ω", 45e-3),
    ("10 mohm", "Ω", 10e-3),  # milli, not mega
    ("1 MΩ", "Ω", 1e6),
    ("2.2 GΩ", "Ω", 2.2e9),
    ("1 TΩ", "Ω", 1e12),
    ("200 ns", "s", 200e-9),
    ("5 ms", "s", 5e-3),
    ("24V", "V", 24.0),
    ("  24 V  ", "V", 24.0),
    ("1e-3 A", "A", 1e-3),
    ("1.5E3 V", "V", 1.5e3),
    ("-5 V", "V", -5.0),
    ("+3 V", "V", 3.0),
    ("0.2 V", "V", 0.2),
    (".5 A", "A", 0.5),
    ("5 mA", "A", 5e-3),
    ("10 \u00b5F", "F", 10e-6),  # micro sign
    ("10 \u03bcF", "F", 10e-6),  # Greek small mu
    ("10 uF", "F", 10e-6),
    ("220 pF", "F", 220e-12),
    ("5 fF", "F", 5e-15),
    ("3 aA", "A", 3e-18),
    ("2 zJ", "J", 2e-21),
    ("7 yJ", "J", 7e-24),
    ("20 kHz", "Hz", 20e3),
    ("1 MHz", "Hz", 1e6),
    ("3 mHz", "Hz", 3e-3),
    ("600 W", "W", 600.0),
    ("30 mJ", "J", 30e-3),
    ("300 K", "K", 300.0),
    ("25 °C", "K", 298.15),
    ("25 degC", "K", 298.15),
    ("25°C", "K", 298.15),
    ("-40 °C", "K", 233.15),
    ("0 V", "V", 0.0),
    (0.08, "H", 0.08),
    (4700, "ohm", 4700.0),
    (0, "V", 0.0),
    (-5, "V", -5.0),
]


@pytest.mark.parametrize(("text", "unit", "expected"), GOOD, ids=[f"{t!r}->{u}" for t, u, _ in GOOD])
def test_parse_good(text, unit, expected):
    value = parse_quantity(text, unit)
    assert type(value) is float
    assert value == pytest.approx(expected, rel=1e-12, abs=0.0), f"{text!r} read as {value!r}"


def test_parse_is_exact_nearest_double():
    # the decimal string is converted once, so no scaling error: exactly the literal's double
    assert parse_quantity("4.7 kΩ", "Ω") == 4700.0
    assert parse_quantity("80 mH", "H") == 0.08
    assert parse_quantity("200 ns", "s") == 2e-7
    assert parse_quantity("25 °C", "K") == 298.15


def test_negative_zero_reads_as_zero():
    assert math.copysign(1.0, parse_quantity("-0 V", "V")) == 1.0


BAD = [
    ("80 mA", "H", "wrong unit 'mA' (expected a value in H, e.g. '80 mH')"),
    ("5 mH", "s", "wrong unit 'mH' (expected a value in s"),
    ("25 °C", "V", "wrong unit '°C'"),
    ("24 V", "Ω", "wrong unit 'V'"),
    ("4k7", "Ω", "RKM code '4k7' is not accepted; write '4.7 kΩ'"),
    ("4K7", "Ω", "write '4.7 kΩ'"),
    ("4k7Ω", "Ω", "write '4.7 kΩ'"),
    ("2R2", "Ω", "write '2.2 Ω'"),
    ("R47", "Ω", "write '0.47 Ω'"),
    ("1n5", "F", "write '1.5 nF'"),
    ("1 meg", "Ω", "'meg' is not an SI prefix; write '1 MΩ'"),
    ("2.2 megohm", "Ω", "'meg' is not an SI prefix; write '2.2 MΩ'"),
    ("1 MEG", "Ω", "'meg' is not an SI prefix"),
    ("4.7 Kohm", "Ω", "'K' is not an SI prefix, kilo is 'k'; write '4.7 kΩ'"),
    ("80", "H", "no unit in '80' (expected a value in H, e.g. '80 mH'"),
    ("1e-3", "A", "no unit in '1e-3'"),
    ("", "V", "empty string"),
    ("   ", "V", "empty string"),
    ("abc", "V", "cannot read 'abc' as a quantity"),
    ("V 24", "V", "cannot read 'V 24'"),
    ("24 V extra", "V", "cannot read '24 V extra'"),
    ("1.5.3 V", "V", "cannot read '1.5.3 V'"),
    ("5 m A", "A", "cannot read '5 m A'"),
    ("5 m", "H", "unknown unit 'm'"),
    ("24 Volt", "V", "unknown unit 'Volt'"),
    ("1 PV", "V", "unknown unit 'PV'"),
    ("nan V", "V", "is not a finite number"),
    ("inf V", "V", "is not a finite number"),
    ("1e999 V", "V", "is out of range"),
    ("-300 °C", "K", "below absolute zero"),
    (-1.0, "K", "below absolute zero"),
    (True, "V", "got a boolean"),
    (False, "V", "got a boolean"),
    (float("nan"), "V", "is not a finite number"),
    (float("inf"), "V", "is not a finite number"),
    (10**400, "V", "is not a finite number"),
    (None, "V", "got NoneType"),
    ([1], "V", "got list"),
]


@pytest.mark.parametrize(("value", "unit", "message"), BAD, ids=[f"{v!r}->{u}" for v, u, _ in BAD])
def test_parse_bad(value, unit, message):
    with pytest.raises(UnitError) as info:
        parse_quantity(value, unit)
    assert message in str(info.value)
    assert "\n" not in str(info.value)


def test_unit_error_is_value_error_and_package_error():
    with pytest.raises(ValueError):
        parse_quantity("4k7", "Ω")
    with pytest.raises(KickbackError):
        parse_quantity("4k7", "Ω")


def test_key_prefixes_message():
    with pytest.raises(UnitError) as info:
        parse_quantity("80 mA", "H", key="coil.inductance")
    assert str(info.value).startswith("coil.inductance: wrong unit 'mA'")
    assert info.value.message.startswith("wrong unit 'mA'")
    assert info.value.key == "coil.inductance"


@pytest.mark.parametrize("unit", ["Volt", "m", "°C", ""], ids=["Volt", "m", "degC", "empty"])
def test_unknown_expected_unit(unit):
    with pytest.raises(UnitError, match="unknown unit"):
        parse_quantity(1.0, unit)


def test_normalize_unit_aliases():
    assert {normalize_unit(u) for u in ("Ω", "\u2126", "ohm", "ohms", "Ohm")} == {"Ω"}


FORMAT = [
    (0.08, "H", 4, "80 mH"),
    (4700, "Ω", 4, "4.7 kΩ"),
    (4700, "ohm", 4, "4.7 kΩ"),
    (0, "V", 4, "0 V"),
    (-0.0, "V", 4, "0 V"),
    (None, "V", 4, "—"),
    (200e-9, "s", 4, "200 ns"),
    (1e-6, "s", 4, "1 \u00b5s"),
    (-2.2e-3, "A", 4, "-2.2 mA"),
    (1234567, "Ω", 4, "1.235 MΩ"),
    (999.96, "V", 4, "1 kV"),
    (0.1234, "F", 2, "120 mF"),
    (24, "V", 4, "24 V"),
    (float("nan"), "V", 4, "NaN V"),
    (float("inf"), "V", 4, "inf V"),
    (float("-inf"), "V", 4, "-inf V"),
]


@pytest.mark.parametrize(("value", "unit", "digits", "text"), FORMAT,
                         ids=[f"{v!r}{u}/{d}" for v, u, d, _ in FORMAT])
def test_format_quantity(value, unit, digits, text):
    assert format_quantity(value, unit, digits) == text


def test_format_rejects_zero_digits():
    with pytest.raises(ValueError):
        format_quantity(1.0, "V", 0)


ROUND = [(0.08, "H"), (4700.0, "Ω"), (1.5e-7, "s"), (2.2e-10, "F"), (68.0, "V"), (0.03, "J"),
         (1.23456789e-13, "A"), (9.87654321e12, "W"), (20e3, "Hz"), (3.3e-21, "J"), (7.5e15, "V")]


@pytest.mark.parametrize(("value", "unit"), ROUND, ids=[f"{v!r}{u}" for v, u in ROUND])
def test_format_round_trip_full_precision(value, unit):
    assert parse_quantity(format_quantity(value, unit, 15), unit) == pytest.approx(value, rel=1e-14)


@given(st.floats(min_value=1e-20, max_value=1e14), st.sampled_from(["V", "A", "Ω", "H", "F", "s", "J"]),
       st.booleans())
def test_format_round_trip_property(value, unit, negative):
    # 4 significant digits: the round trip is within half a unit of the 4th digit (relative 5e-4)
    x = -value if negative else value
    assert parse_quantity(format_quantity(x, unit, 4), unit) == pytest.approx(x, rel=5e-4)


@pytest.mark.parametrize(("value", "text"), [(1.9, "1.9"), (0.8, "0.8"), (None, "—"), (-0.0, "0"),
                                             (1 / 3, "0.3333")], ids=["1.9", "0.8", "None", "-0", "third"])
def test_format_number(value, text):
    assert format_number(value) == text
