"""Preferred-number series against IEC 60063 (values from memory of the standard's table)."""

from __future__ import annotations

import pytest

from kickback.studies.eseries import E12, E24, nearest, round_down, round_up, values_between

# IEC 60063 E24 and E12 tables (from memory); differ from a rounding of 10^(k/n) at several places
IEC_E24 = [1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2,
           6.8, 7.5, 8.2, 9.1]
IEC_E12 = [1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2]


def test_tables_are_the_standard():
    assert list(E24) == IEC_E24
    assert list(E12) == IEC_E12
    assert set(E12) <= set(E24), "E12 is every second E24 value"


def test_not_a_rounding_of_powers_of_ten():
    rounded = [round(10 ** (k / 24), 1) for k in range(24)]
    differ = [a for a, b in zip(E24, rounded, strict=True) if a != b]
    assert {2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2} <= set(differ)


@pytest.mark.parametrize("x, down, up, near", [(33.9, 33.0, 36.0, 33.0), (47.0, 47.0, 47.0, 47.0),
                                               (0.0123, 0.012, 0.013, 0.012), (9.6, 9.1, 10.0, 10.0)],
                         ids=["33.9", "exact-47", "milli", "decade-edge"])
def test_rounding_e24(x, down, up, near):
    assert round_down(x) == pytest.approx(down, rel=1e-12)
    assert round_up(x) == pytest.approx(up, rel=1e-12)
    assert nearest(x) == pytest.approx(near, rel=1e-12)


def test_values_between_spans_decades():
    v = values_between(8.0, 120.0, "E12")
    assert v == pytest.approx([8.2, 10, 12, 15, 18, 22, 27, 33, 39, 47, 56, 68, 82, 100, 120])
    # successive E12 values step by about 10^(1/12) ≈ 1.21 (the series' definition)
    steps = [b / a for a, b in zip(v, v[1:], strict=False)]
    assert all(1.1 < s < 1.3 for s in steps), steps
