"""The ``[tolerance]`` section of a case file: one sub-table per varied value.

```toml
[tolerance."coil.inductance"]
band = "10 %"                 # ± relative band, or "±12 mH" in the key's unit
distribution = "normal"       # uniform (default) | normal: the band sits at ±sigmas standard deviations
sigmas = 3

[tolerance."supply.voltage"]
min = "21.6 V"                # or an absolute range
max = "26.4 V"

[tolerance.coil_temperature]  # the coil resistance follows copper's coefficient, IEC 60028:
min = "-20 °C"                # R(T) = R_ref·(1 + α20·(T − 20 °C))/(1 + α20·(T_ref − 20 °C)), α20 = 0.00393/K
max = "85 °C"
reference = "20 °C"           # the temperature coil.resistance is given at (default 20 °C)
```
"""

from __future__ import annotations

import re
from typing import Any

from kickback.case import Case, Tolerance
from kickback.casevary import check_ranges, resolve
from kickback.errors import CaseError
from kickback.keypath import get_value
from kickback.units import UnitError, format_quantity, parse_quantity

_KEYS = {"band", "min", "max", "distribution", "sigmas", "reference"}
_PERCENT = re.compile(r"\s*[±+]?\s*(?:[+-]/-)?\s*(\d+(?:\.\d*)?|\.\d+)\s*%\s*")
_PLUSMINUS = re.compile(r"\s*(?:±|\+/-|\+-)\s*")


def tolerances(ctx, raw: Any, case: Case) -> tuple[Tolerance, ...]:
    """Parse and check ``[tolerance]`` against the case it varies (``ctx`` is caseio's context)."""
    if raw is None:
        return ()
    if not isinstance(raw, dict):
        raise ctx.error(("tolerance",), "expected a table [tolerance] with one sub-table per value")
    out = []
    for key, spec in raw.items():
        path = ("tolerance", key)
        if not isinstance(spec, dict):
            raise ctx.error(path, f'expected a table, e.g. [tolerance."{key}"] with band = "5 %"')
        for k in spec:
            if k not in _KEYS:
                raise ctx.error(path + (k,), f"unknown key (allowed keys: {', '.join(sorted(_KEYS))})")
        out.append(_one(ctx, path, key, spec, case))
    return tuple(out)


def _one(ctx, path, key: str, spec: dict, case: Case) -> Tolerance:
    temperature = key == "coil_temperature"
    if temperature:
        unit, nominal = "K", None
    else:
        try:
            unit = resolve(case, key)  # a numeric key that applies to this case
            nominal = get_value(case, key)
        except CaseError as err:
            raise ctx.error(path, f"{err.message}") from None
        if nominal is None or isinstance(nominal, bool):
            raise ctx.error(path, "the case gives no value here to vary (expected a key the case sets)")

    def q(k):
        raw = spec[k]
        if isinstance(raw, bool):
            raise ctx.error(path + (k,), f"got a boolean (expected a value in {unit or 'plain numbers'})")
        try:
            return parse_quantity(raw, unit) if unit else float(raw)
        except (UnitError, ValueError) as err:
            raise ctx.error(path + (k,), getattr(err, "message", str(err))) from None

    if "band" in spec and ("min" in spec or "max" in spec):
        raise ctx.error(path, "give either band or min and max, not both")
    if "band" in spec:
        if temperature:
            raise ctx.error(path + ("band",), "a temperature takes min and max (expected e.g. min = \"-20 °C\")")
        band = spec["band"]
        m = _PERCENT.fullmatch(band) if isinstance(band, str) else None
        if m:
            half = abs(nominal) * float(m[1]) / 100.0
        else:
            text = _PLUSMINUS.sub("", band, count=1) if isinstance(band, str) else band
            try:
                half = abs(parse_quantity(text, unit)) if unit else abs(float(text))
            except (UnitError, ValueError) as err:
                msg = getattr(err, "message", str(err))
                if "expected" not in msg:
                    msg += ' (expected e.g. band = "5 %" or a ± value in the key\'s unit)'
                raise ctx.error(path + ("band",), msg) from None
        low, high = nominal - half, nominal + half
    elif "min" in spec and "max" in spec:
        low, high = q("min"), q("max")
    else:
        raise ctx.error(path, 'missing band, or min and max (expected e.g. band = "5 %")')
    if not low < high:
        raise ctx.error(path, f"empty range {low:g} … {high:g} (expected min < max)")
    if not temperature:
        try:  # the band's ends pass the case file's own rules (the file's message for a value it refuses)
            check_ranges(case, {key: (float(low), float(high))}, "band")
        except CaseError as err:
            raise ctx.error(path, err.message) from None
    if not temperature and low <= 0 and nominal > 0:  # a key whose file rule allows 0 (a capacitance, a speed)
        shown = format_quantity(low, unit) if unit else f"{low:g}"
        raise ctx.error(path, f"the range reaches {shown}, not a physical value here (expected a range above 0)")
    dist = spec.get("distribution", "uniform")
    if dist not in ("uniform", "normal"):
        raise ctx.error(path + ("distribution",), f"{dist!r} is not allowed (expected uniform or normal)")
    sig = spec.get("sigmas", 3.0)
    if isinstance(sig, bool) or not isinstance(sig, int | float) or not 0 < sig <= 10:
        raise ctx.error(path + ("sigmas",), "expected a plain number in (0, 10], the band's width in σ")
    ref = None
    if temperature:
        ref = q("reference") if "reference" in spec else 293.15
        from kickback.models.passive import COPPER_ZERO_K

        # the linear copper law gives zero resistance at 20 °C − 1/α20 (IEC 60028): nothing at or below it
        if ref <= COPPER_ZERO_K:
            raise ctx.error(path + ("reference",), f"{ref - 273.15:.4g} °C is at or below copper's zero-resistance "
                            f"point {COPPER_ZERO_K - 273.15:.4g} °C (expected a winding temperature above it)")
        if low <= COPPER_ZERO_K:
            raise ctx.error(path, f"the range reaches {low - 273.15:.4g} °C, at or below copper's zero-resistance "
                            f"point {COPPER_ZERO_K - 273.15:.4g} °C (expected a range above it)")
    elif "reference" in spec:
        raise ctx.error(path + ("reference",), "only coil_temperature takes a reference")
    line = ctx.where.line_of(path)
    return Tolerance(key, float(low), float(high), dist, float(sig), ref, line)
