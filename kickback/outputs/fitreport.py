"""Text of a coil fit (table, [coil] TOML block) and of a measured-versus-simulated comparison."""

from __future__ import annotations

import math

from kickback.outputs.table import grid_lines
from kickback.units import format_quantity as q


def significant_digits(value: float, half_width: float) -> int:
    """Digits to print so that rounding stays well inside the confidence interval (3 to 6)."""
    if not (math.isfinite(half_width) and half_width > 0 and value):
        return 4
    return int(min(6, max(3, math.ceil(math.log10(abs(value) / half_width)) + 1)))


def coil_toml(fit) -> str:
    """A [coil] block ready to paste into a case file (quantities as strings)."""
    lines = ["[coil]"]
    names = fit.coil_estimate_names()
    for key, value in fit.coil_values().items():
        e = fit.estimate(names[key])
        unit = {"inductance": "H", "resistance": "Ω", "saturation_current": "A"}[key]
        text = f'{key} = "{q(value, unit, significant_digits(value, e.half_width))}"'
        if key == "inductance" and fit.saturating:
            text += "   # L0: saturating coil λ(i) = L0·i/(1 + |i|/I_sat)"
        lines.append(text)
    if fit.saturating and not fit.saturation_seen:
        lines.append("# saturation_current left out: the trace shows no measurable saturation")
    if fit.kind == "decay":
        vc = fit.estimate("clamp voltage")
        lines.append(f"# clamp seen in the trace: switch node {q(vc.value, 'V')} above the supply "
                     f"({q(fit.supply_V + vc.value, 'V')}) while the current decayed")
    return "\n".join(lines) + "\n"


def fit_table(fit) -> str:
    """The fit: each value ± its confidence half-width and interval, the residual, the TOML block."""
    pct = f"{100 * fit.confidence:g} %"
    lines = [f"coil fit of {fit.source}: {fit.kind}, supply {q(fit.supply_V, 'V')}",
             f"model: {fit.model}", ""]
    rows = [["quantity", "value", f"± {pct}", "", f"{pct} interval"]]
    for e in fit.estimates:
        d = significant_digits(e.value, e.half_width)
        lo, hi = e.interval
        rel = f"{100 * e.half_width / abs(e.value):.2g} %" if e.value else ""
        label = e.name + (" (derived)" if e.derived else "") + (" [at bound]" if e.at_bound else "")
        rows.append([label, q(e.value, e.unit, d), q(e.half_width, e.unit, 2), rel,
                     f"{q(lo, e.unit, d)} … {q(hi, e.unit, d)}"])
    lines += grid_lines(rows)
    span = fit.span
    lines += ["", f"  residual RMS {q(fit.residual_rms, 'A')} "
                  f"({100 * fit.residual_rms / span:.2g} % of the {q(span, 'A')} span), "
                  f"{fit.t.size} points, {fit.dof} degrees of freedom", ""]
    lines.append(coil_toml(fit).rstrip("\n"))
    return "\n".join(lines) + "\n"


def comparison_text(cmp) -> str:
    """Measured beside simulated: one row per figure with the difference."""
    lines = [f"measured ({cmp.signal}) from {cmp.source} against the simulation"]
    rows = [["figure", "simulated", "measured", "difference", ""]]
    for r in cmp.rows:
        d, rel = r.difference, r.relative
        rows.append([r.quantity, q(r.simulated, r.unit), q(r.measured, r.unit),
                     "—" if d is None else ("+" if d > 0 else "") + q(d, r.unit),
                     "" if rel is None else f"{100 * rel:+.1f} %"])
    lines += grid_lines(rows)
    lines += [f"  note: {n}" for n in cmp.notes]
    return "\n".join(lines) + "\n"
