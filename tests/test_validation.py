"""The README's validation table, held to its tolerances: every row of benchmarks/validation.py
computes its reference there (closed forms, scipy quad, a tight scipy solve; sources named beside
each) and runs kickback on the same case."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

_PATH = Path(__file__).resolve().parent.parent / "benchmarks" / "validation.py"
_spec = importlib.util.spec_from_file_location("kickback_validation", _PATH)
validation = importlib.util.module_from_spec(_spec)
sys.modules[_spec.name] = validation  # dataclasses look their module up there
_spec.loader.exec_module(validation)


@pytest.mark.parametrize("make", validation.ROWS, ids=[f.__name__ for f in validation.ROWS])
def test_validation_row_within_tolerance(make):
    row = make()
    assert row.rel_error <= row.tolerance, (
        f"{row.name}: expected {row.expected!r} ({row.source}), got {row.got!r}, "
        f"relative error {row.rel_error:.2e} > {row.tolerance:.0e}")


def test_e24_table_is_the_published_series():
    # IEC 60063 E24, values from memory: the whole table, not only its worst value
    from kickback.studies.eseries import E24

    assert E24 == (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
                   3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)


def test_table_lists_every_row():
    rows = [make() for make in validation.ROWS[:2]]
    text = validation.table(rows)
    assert text.count("\n") == 3 and "| expected | got | rel. error |" in text
