"""The audit: what a result must satisfy before it may carry a verdict (DESIGN.md §9).

Four rules, written once over figure columns (arrays of shape (n,), the names of
:mod:`kickback.figures_batch`), so that the single-case :class:`~kickback.result.Result` runs them
with n = 1 and the batch engine's :class:`~kickback.studies.many.ManyResult` over all its variants:

1. **ledger** — the energy ledger's relative residual is at most :data:`LEDGER_LIMIT` (1e-3, the
   limit DESIGN.md §3 sets: above 0.1 % is a defect);
2. **no negative dissipation** — the coil resistance, the switch (turn-off crossover, avalanche,
   body diode) and every clamp element other than a capacitor absorb energy, never supply it:
   each of those energies is at least ``-NEGATIVE_FLOOR × E_in`` with E_in the energy put in
   (stored in the coil and the capacitors at the start, plus what the supply delivered). The floor
   (1e-9) is rounding: the detailed engine integrates the energies to an absolute tolerance of
   rtol·1e-6·E_in, 100× below it at its default rtol;
3. **every check the ratings call for is present** — derived from the case (each ``rated_*`` key
   given, each ``[checks] max_*`` limit, a drive's base current or gate voltage, a thermal
   network with its maximum junction temperature) and from the figures (an avalanche — energy of
   either sign above 1e-9 of the stored energy, or a peak 0.1 % above the breakdown voltage —
   calls for the avalanche check whether or not the switch is rated for it);
4. **finite figures** — no NaN or infinity where a number is expected; a time that does not occur
   (decay, release, a pulse width, a junction temperature without a network) may be absent.

A result that fails its audit gets no PASS or FAIL: ``kickback run`` exits 2 and lists the
findings, :attr:`kickback.result.Result.passed` is None, and the studies solve that variant
again on the other engine or count it as unsolved (:mod:`kickback.studies.points`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kickback.conventions import AVALANCHE_NEGLIGIBLE
from kickback.figures import figure_columns
from kickback.ratings import avalanche_check_applies

#: largest relative ledger residual a result may have (DESIGN.md §3)
LEDGER_LIMIT = 1e-3
#: a dissipated energy may be this far below zero, relative to the energy put in (rounding)
NEGATIVE_FLOOR = 1e-9
#: an avalanche counts when its energy (either sign) is above this fraction of the stored energy
#: (the threshold of the avalanche check and finding, kickback.conventions)
AVALANCHE_FRACTION = AVALANCHE_NEGLIGIBLE
#: a peak this far (relative) above the breakdown voltage means the switch avalanched
OVER_BREAKDOWN = 1e-3
#: column-name endings of figures that may be absent (a time that does not occur)
MAY_BE_ABSENT = ("decay_s.to_10_percent", "decay_s.to_1_percent", "decay_s.to_zero", "release_s",
                 "pulse_width_s", "junction_peak_K")


@dataclass(frozen=True)
class Audit:
    """The audit of one result.

    Attributes
    ----------
    findings : tuple of str — what failed, one line each (empty: the audit passes)
    """

    findings: tuple[str, ...] = ()

    @property
    def passed(self) -> bool:
        """True when the result may carry a verdict."""
        return not self.findings

    def to_dict(self) -> dict:
        return {"passed": self.passed, "findings": list(self.findings)}


def dissipations(case) -> list[tuple[str, str]]:
    """(column, label) of every energy that must not be negative."""
    out = [("coil.resistance_energy_J", "coil resistance"), ("switch.crossover_energy_J", "switch crossover"),
           ("switch.avalanche_energy_J", "switch avalanche"), ("switch.body_diode_energy_J", "switch body diode")]
    for k, cl in enumerate(case.clamps):
        for j, el in enumerate(cl.elements):
            if el.type != "capacitor":
                out.append((f"clamps[{k}].elements[{j}].energy_J", cl.element_label(j)))
    return out


def expected_checks(case, cols: dict, get, n: int) -> dict:
    """The checks the case's ratings call for: check name ("part: quantity") → (n,) bool.

    Parameters
    ----------
    case : Case — the base case (its structure)
    cols : dict — figure columns, (n,) arrays
    get : callable — ``get(path)`` → (n,) values of a case key (NaN where not given)
    n : int
    """
    out: dict = {}
    s = case.switch

    def given(path):
        return np.isfinite(np.asarray(get(path), float))

    out["switch: peak voltage"] = given("switch.rated_voltage")
    stored = np.asarray(cols["coil.stored_energy_J"], float)
    e_av = np.asarray(cols["switch.avalanche_energy_J"], float)
    vbr = np.asarray(get("switch.breakdown_voltage"), float)
    peak = np.asarray(cols["switch.peak_voltage_V"], float)
    with np.errstate(invalid="ignore"):
        over = np.isfinite(vbr) & (peak > vbr * (1.0 + OVER_BREAKDOWN))
        avalanched = (np.abs(e_av) > AVALANCHE_FRACTION * stored) | over
    # the rule that makes the row (kickback.ratings), and evidence the switch avalanched anyway
    out["switch: avalanche energy"] = avalanche_check_applies(
        vbr, np.asarray(get("switch.rated_avalanche_energy"), float)) | avalanched
    keys = {"diode": (("rated_reverse_voltage", "reverse voltage"), ("rated_surge_current", "peak current")),
            "zener": (("rated_pulse_energy", "pulse energy"), ("rated_peak_power", "peak power")),
            "resistor": (("rated_energy", "pulse energy"),), "varistor": (("rated_energy", "pulse energy"),),
            "capacitor": (("rated_voltage", "peak voltage"),)}
    keys["tvs"] = keys["zener"]
    for k, cl in enumerate(case.clamps):
        for j, el in enumerate(cl.elements):
            part = cl.element_label(j)
            for key, quantity in keys[el.type]:
                out[f"{part}: {quantity}"] = given(f"clamp[{k}].element[{j}].{key}")
            if el.thermal_resistance is not None and el.max_junction_temperature is not None:
                out[f"{part}: junction temperature"] = np.ones(n, bool)
        out[f"{cl.name}: clamp energy"] = given("checks.max_clamp_energy")
    if s.thermal_resistance is not None and s.max_junction_temperature is not None:
        out["switch: junction temperature"] = np.ones(n, bool)
    if s.type == "bjt" and s.gain is not None and s.drive_voltage is not None and s.base_resistance is not None:
        out["switch: base current"] = np.ones(n, bool)
    if s.type == "mosfet" and s.gate_voltage is not None and s.on_resistance_gate_voltage is not None:
        out["switch: gate voltage"] = np.ones(n, bool)
    for key, quantity in (("max_peak_voltage", "peak switch voltage"), ("max_release_time", "release time"),
                          ("max_decay_time", "decay to zero")):
        out[f"case: {quantity}"] = given(f"checks.{key}")
    return out


def audit_columns(case, cols: dict, present: dict, get, n: int, rows=None) -> list[tuple[str, ...]]:
    """The four rules over n variants; the findings of each (empty: it passes).

    Parameters
    ----------
    case : Case — the base case
    cols : dict — figure name → (n,) float array (NaN where absent); the names of
        :func:`kickback.figures_batch.columns`
    present : dict — check name ("part: quantity") → (n,) bool, the variant has that check
    get : callable — ``get(path)`` → (n,) values of a case key (NaN where not given)
    n : int
    rows : array of int or None — audit only these variants (the others get no findings)

    Returns
    -------
    list of tuple of str, length n
    """
    sel = np.ones(n, bool) if rows is None else np.isin(np.arange(n), rows)
    found: list[list[str]] = [[] for _ in range(n)]

    def flag(mask, text_of):
        for k in np.nonzero(mask & sel)[0]:
            found[k].append(text_of(int(k)))

    bal = np.asarray(cols["energy_balance_error"], float)
    with np.errstate(invalid="ignore"):
        flag(np.isfinite(bal) & (np.abs(bal) > LEDGER_LIMIT),
             lambda k: f"energy ledger residual {bal[k]:.3g} (limit ±{LEDGER_LIMIT:g})")
    e_in = (np.asarray(cols["coil.stored_energy_J"], float) + np.asarray(cols["initial_capacitor_energy_J"], float)
            + np.maximum(np.asarray(cols["supply.energy_J"], float), 0.0))
    for name, label in dissipations(case):
        if name not in cols:
            continue
        e = np.asarray(cols[name], float)
        with np.errstate(invalid="ignore"):
            flag(e < -NEGATIVE_FLOOR * e_in,
                 lambda k, e=e, label=label: f"negative dissipation: {label} {e[k]:.4g} J "
                                             f"(of {e_in[k]:.4g} J put in)")
    expected = expected_checks(case, cols, get, n)
    for name, want in expected.items():
        have = np.asarray(present.get(name, np.zeros(n, bool)), bool)
        flag(np.asarray(want, bool) & ~have, lambda k, name=name: f"missing check: {name}")
    for name, col in cols.items():
        a = np.asarray(col, float)
        absent_ok = name.endswith(MAY_BE_ABSENT)
        bad = np.isinf(a) if absent_ok else ~np.isfinite(a)
        flag(bad, lambda k, a=a, name=name: f"figure {name} is {a[k]} (expected a finite number)")
    return [tuple(f) for f in found]


def result_columns(result) -> dict:
    """A single :class:`~kickback.result.Result`'s figures as n = 1 columns
    (:func:`kickback.figures.figure_columns`), with its PWM figures.

    None (a time that does not occur) becomes NaN; a NaN given where a time could be None
    becomes +inf, so that the finite rule still sees it.
    """
    out = figure_columns(result.figures, nan_if_absent=math.inf)
    for d, p in enumerate(result.pwm):
        for key, x in _numbers(p.to_dict(), f"pwm[{d}]"):
            out[key] = np.array([math.inf if math.isnan(x) else float(x)])
    return out


def _numbers(obj, prefix):
    """(name, value) of every number in a nested dict/list (None values skipped)."""
    if isinstance(obj, dict):
        for k, v in obj.items():
            yield from _numbers(v, f"{prefix}.{k}")
    elif isinstance(obj, list | tuple):
        for k, v in enumerate(obj):
            yield from _numbers(v, f"{prefix}[{k}]")
    elif isinstance(obj, float | int) and not isinstance(obj, bool):
        yield prefix, obj


def case_getter(case, n: int = 1):
    """``get(path)`` → (n,) values of a case key, NaN where the case does not give it."""
    from kickback.keypath import get_value

    def get(path):
        try:
            val = get_value(case, path)
        except Exception:  # noqa: BLE001 - a key the case structure does not have: not given
            val = None
        ok = isinstance(val, int | float) and not isinstance(val, bool)
        return np.full(n, float(val) if ok else math.nan)

    return get


def audit_result(result) -> Audit:
    """Audit one :class:`~kickback.result.Result` (the four rules with n = 1, plus each check's
    value: a check is finite or a time that does not occur)."""
    cols = result_columns(result)
    present = {f"{c.part}: {c.quantity}": np.ones(1, bool) for c in result.checks}
    findings = list(audit_columns(result.case, cols, present, case_getter(result.case), 1)[0])
    for c in result.checks:
        for what, x in (("value", c.value), ("limit", c.limit)):
            if x is not None and not math.isfinite(x):
                findings.append(f"check {c.part}: {c.quantity} has {what} {x} (expected a finite number)")
    return Audit(tuple(findings))


def audit_many(many) -> list[tuple[str, ...]]:
    """Audit every simulated variant of a :class:`~kickback.studies.many.ManyResult` (status
    other than "failed"); the findings per variant (a variant not simulated has none: it has no
    verdict anyway)."""
    from kickback.engine.batch_params import value_getter

    n = many.n
    present = {name: np.asarray(c.applies, bool) for name, c in many.checks.items()}
    get = value_getter(many.case, many.variations, n)
    return audit_columns(many.case, many.figures, present, get, n, rows=np.nonzero(many.status != "failed")[0])
