"""One variant on the detailed engine, kept as the few columns the studies use (sweep points,
the clamp choice's near-limit candidates, the detailed path of :mod:`kickback.studies.points`).

A module of its own so that :mod:`kickback.studies.points` and :mod:`kickback.studies.sweep`
both read it without importing each other.
"""

from __future__ import annotations

from kickback.case import Case
from kickback.errors import KickbackError


def point_figures(case: Case) -> dict:
    """Simulate one point (detailed engine) and keep only the sweep's columns (picklable)."""
    from kickback.simulation import simulate

    try:
        r = simulate(case)
    except KickbackError as err:
        return {"error": getattr(err, "message", None) or str(err)}
    return result_figures(r)


def result_figures(r) -> dict:
    """A detailed-engine :class:`~kickback.result.Result` as :func:`point_figures` keeps it."""
    f = r.figures
    return {"peak_voltage_V": f.peak_voltage_V, "clamp_energy_J": sum(c.energy_J for c in f.clamps),
            "avalanche_energy_J": f.avalanche_energy_J, "to_10_percent_s": f.to_10_percent_s,
            "to_1_percent_s": f.to_1_percent_s, "to_zero_s": f.to_zero_s, "release_s": f.release_s,
            "pass": r.passed, "failing_checks": [f"{c.part} {c.quantity}" for c in r.checks if not c.passed],
            "error": None, "audit": list(r.audit.findings),
            "checks": [(f"{c.part} {c.quantity}", c.value, c.limit, c.margin, c.passed) for c in r.checks],
            "check_units": {f"{c.part} {c.quantity}": c.unit for c in r.checks},
            "check_parts": {f"{c.part} {c.quantity}": (c.part, c.quantity) for c in r.checks},
            "stored_energy_J": f.stored_energy_J, "energy_balance_error": f.energy_balance_error} | {
                f"clamp[{k}].energy_J": c.energy_J for k, c in enumerate(f.clamps)}
