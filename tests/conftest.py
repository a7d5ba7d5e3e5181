"""Shared fixtures: paths of the demo cases."""

from __future__ import annotations

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
CASES = ROOT / "cases"


@pytest.fixture(scope="session")
def cases_dir() -> Path:
    return CASES
