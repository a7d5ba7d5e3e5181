"""JSON text of results (strict: no NaN or infinity)."""

from __future__ import annotations

import json
import math


def _clean(x):
    if isinstance(x, float) and not math.isfinite(x):
        raise ValueError("a non-finite number reached the JSON output")
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if hasattr(x, "item") and not isinstance(x, (str, bytes)):
        return _clean(x.item())
    return x


def to_json(obj, indent: int | None = 2) -> str:
    """Strict JSON text of ``obj`` (numpy scalars converted, NaN/inf refused)."""
    return json.dumps(_clean(obj), indent=indent, ensure_ascii=False, allow_nan=False) + "\n"


def _null_non_finite(x):
    if isinstance(x, float) and not math.isfinite(x):
        return None
    if isinstance(x, dict):
        return {k: _null_non_finite(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_null_non_finite(v) for v in x]
    return x


def audit_failed_json(obj, indent: int | None = 2) -> str:
    """JSON text of a result that failed its audit: a non-finite figure (one of the audit's
    findings, listed in ``obj["audit"]``) is written as null instead of refused."""
    return to_json(_null_non_finite(_clean_numpy(obj)), indent)


def _clean_numpy(x):
    if isinstance(x, dict):
        return {k: _clean_numpy(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean_numpy(v) for v in x]
    if hasattr(x, "item") and not isinstance(x, (str, bytes)):
        return x.item()
    return x
