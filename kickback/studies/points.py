"""Many variants of one case through either engine, as the columns the studies use.

The sweep, the clamp choice and the tolerance study all need the same thing: a handful of
figures, the verdict and every check's value, limit and margin for n variants of one case that
differ only in values. :func:`evaluate` gives them as a :class:`Points` table whichever engine
runs:

* ``"batch"`` — :func:`kickback.studies.many.simulate_many` (exact piecewise-linear segments,
  vectorised, in chunks; Shockley diodes and varistors as a stated piecewise-linear fit);
* ``"detailed"`` — :func:`kickback.simulation.simulate` point by point, in worker processes;
* ``"auto"`` — the batch engine unless the case has a feature it does not cover (thermal
  networks, a saturating coil, a [drive], a motor); then the detailed engine, and
  :attr:`Points.note` says why.

A variant the batch engine could not simulate (a reason in its status) is run again by the
detailed engine, up to :data:`RETRY_MAX` of them per call, so the reference engine has the last
word on what cannot be simulated.

Every simulated variant is audited (:mod:`kickback.audit`: ledger, negative dissipation, the
checks its ratings call for, finite figures) before it gets a verdict. A variant that fails the
audit is solved again on the other engine (up to :data:`RETRY_MAX` per call; the batch engine only
where it covers the case); if that result fails its audit too, or cannot be had, the variant is
unsolved: no verdict, no figures, its error says why. :attr:`Points.note` says how many and on
which engine.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from kickback.case import Case
from kickback.errors import SolverError
from kickback.ratings import blank_column, put_rows
from kickback.studies.onepoint import point_figures
from kickback.studies.pointtable import FIGURES, Points, audit_note

ENGINES = ("auto", "batch", "detailed")
#: variants the batch engine failed that are run again by the detailed engine, per call
RETRY_MAX = 50
#: the batch engine's column of each figure (clamp energies are added separately)
_BATCH = {"peak_voltage_V": "switch.peak_voltage_V", "avalanche_energy_J": "switch.avalanche_energy_J",
          "to_10_percent_s": "coil.decay_s.to_10_percent", "to_1_percent_s": "coil.decay_s.to_1_percent",
          "to_zero_s": "coil.decay_s.to_zero", "release_s": "coil.release_s",
          "stored_energy_J": "coil.stored_energy_J", "energy_balance_error": "energy_balance_error"}


def pick_engine(case: Case, engine: str = "auto") -> tuple[str, str]:
    """The engine that runs for ``case``: ("batch" or "detailed", note).

    Raises
    ------
    SolverError — ``engine="batch"`` for a case the batch engine does not cover (says why).
    ValueError — an unknown engine name.
    """
    from kickback.studies.many import batch_unsupported

    if engine not in ENGINES:
        raise ValueError(f"unknown engine {engine!r} (expected one of {', '.join(ENGINES)})")
    if engine == "detailed":
        return "detailed", ""
    why = batch_unsupported(case)
    if why is None:
        return "batch", ""
    if engine == "batch":
        raise SolverError(f"the batch engine does not cover this case: {why} (expected --engine detailed or auto)")
    return "detailed", f"the batch engine does not cover this case ({why}): the detailed engine ran"


def evaluate(case: Case, variations: dict | None = None, *, engine: str = "auto", workers: int = 1,
             progress=None, chunk: int | None = None, retry: int = RETRY_MAX) -> Points:
    """Simulate every variant of ``case`` (variant k takes the k-th value of every key).

    Parameters
    ----------
    case : Case — the base case
    variations : dict — key path → values [SI], all of one length n; None: the case itself
    engine : str — "auto", "batch" or "detailed" (see the module docstring)
    workers : int — worker processes for either engine (1: this process; inside a task of a
        parallel map, always this process, see :mod:`kickback.parallel`)
    progress : callable(n_done) or None
    chunk : int or None — variants per batch of the batch engine (its default when None)
    retry : int — at most this many variants the batch engine failed are run by the detailed one

    Returns
    -------
    Points

    Raises
    ------
    CaseError — an unknown key path, a non-numeric key or value arrays of unequal length
    SolverError — ``engine="batch"`` for a case the batch engine does not cover
    """
    from kickback.figures_batch import normalize_variations
    from kickback.studies.many import batch_unsupported

    var, n = normalize_variations(case, variations or {})
    case = _with_first_values(case, var)
    used, note = pick_engine(case, engine)
    if used == "detailed":
        pts = _detailed(case, var, n, workers=workers, progress=progress)
        pts = replace(pts, note=note)
        audit_bad = _audit_failed(pts)
        before = {int(k): pts.findings[k] for k in audit_bad}
        redo = audit_bad[:retry] if batch_unsupported(case) is None else audit_bad[:0]
        if redo.size:
            pts = _replace_rows(pts, redo, _batch(case, _take(var, redo), redo.size, chunk, workers=workers),
                                  count=False)
        return _settle(pts, audit_bad, redo, "detailed", "batch", before)
    step = None if progress is None else (lambda done, _n: progress(done))
    pts = _batch(case, var, n, chunk, progress=step, workers=workers)
    bad = np.nonzero(pts.errors != None)[0][:retry]  # noqa: E711 - elementwise on an object array
    audit_bad = _audit_failed(pts)
    before = {int(k): pts.findings[k] for k in audit_bad}
    redo = audit_bad[:retry]
    rows = np.union1d(bad, redo).astype(int)
    if rows.size:
        again = _detailed(case, _take(var, rows), rows.size, workers=workers)
        pts = _replace_rows(pts, rows, again, count=False)
        pts = replace(pts, retried=pts.retried + int(bad.size))
    return _settle(pts, audit_bad, redo, "batch", "detailed", before)


def _take(var: dict, rows) -> dict:
    return {k: np.asarray(v)[rows] for k, v in var.items()}


def _batch(case: Case, var: dict, n: int, chunk, progress=None, workers: int = 1) -> Points:
    """Every variant by the batch engine, with each variant's audit findings; its chunks on
    ``workers`` processes (or the current executor, :mod:`kickback.parallel`)."""
    from kickback.audit import audit_many
    from kickback.figures_batch import CHUNK
    from kickback.studies.many import simulate_many

    many = simulate_many(case, var, chunk=chunk or CHUNK, progress=progress, workers=workers)
    pts = from_many(case, many)
    found = np.empty(pts.n, dtype=object)
    found[:] = audit_many(many)
    return replace(pts, findings=found)


def _audit_failed(pts: Points) -> np.ndarray:
    """Rows simulated whose result failed its audit."""
    if pts.findings is None:
        return np.zeros(0, int)
    return np.array([k for k in range(pts.n) if pts.errors[k] is None and pts.findings[k]], int)


def _settle(pts: Points, audit_bad: np.ndarray, redo: np.ndarray, first: str, other: str,
            before: dict) -> Points:
    """Rows whose result (still) fails its audit become unsolved: no verdict, no figures, an error
    that says why; the counts and the note say how many and which engine solved the others.

    ``audit_bad`` are the rows that failed the audit of the ``first`` engine (``before``: their
    findings), ``redo`` those of them run again on the ``other`` engine."""
    redo_set = {int(k) for k in redo}
    solved = sum(1 for k in redo_set if pts.errors[k] is None and not pts.findings[k])
    still = _audit_failed(pts)
    unsolved = sorted(set(still.tolist()) | (redo_set - {k for k in redo_set if pts.errors[k] is None}))
    if unsolved:
        figs = {k: v.copy() for k, v in pts.figures.items()}
        checks = {name: put_rows(c, unsolved, blank_column(c.part, c.quantity, c.unit, len(unsolved)))
                  for name, c in pts.checks.items()}
        passed, errors = pts.passed.copy(), pts.errors.copy()
        for k in unsolved:
            if k in before:
                why = f"the {first} engine: " + "; ".join(before[k])
                if k in redo_set:
                    why += (f"; the {other} engine: " + ("; ".join(pts.findings[k]) if errors[k] is None
                                                         else f"could not solve it ({errors[k]})"))
            else:
                why = "the detailed engine: " + "; ".join(pts.findings[k])
            errors[k] = "no verdict: the result failed its audit on " + why
            passed[k] = False
            for a in figs.values():
                a[k] = np.nan
        pts = replace(pts, figures=figs, checks=checks, passed=passed, errors=errors)
    failed = len(set(audit_bad.tolist()) | set(still.tolist()))
    pts = replace(pts, audit_failed=pts.audit_failed + failed, audit_solved=pts.audit_solved + int(solved),
                  audit_engine=other if solved else pts.audit_engine)
    note = "; ".join(x for x in (pts.note, audit_note(failed, int(solved), other)) if x)
    return replace(pts, note=note)


def _with_first_values(case: Case, var: dict) -> Case:
    """``case`` with every varied key set to its first value: a key the case leaves out (a
    saturation current, a breakdown voltage, a gate voltage) is given in every variant, so the
    structure the engines read from the base case — which engine covers it, which laws and
    checks exist — is the variants' own."""
    from kickback.keypath import set_value

    for path, vals in var.items():
        if len(vals):
            case = set_value(case, path, float(vals[0]))
    return case


def from_many(case: Case, many) -> Points:
    """A :class:`~kickback.studies.many.ManyResult` as :class:`Points`."""
    f = many.figures
    n = many.n
    ok = many.status != "failed"  # simulated ("audit failed" rows too: evaluate() settles them)
    figs = {name: np.asarray(f[col], float).copy() for name, col in _BATCH.items()}
    total = np.where(ok, 0.0, np.nan)
    for k in range(len(case.clamps)):
        e = np.asarray(f[f"clamps[{k}].energy_J"], float)
        figs[f"clamp[{k}].energy_J"] = e.copy()
        total = total + e
    figs["clamp_energy_J"] = total
    checks = {f"{c.part} {c.quantity}": c for c in many.checks.values()}
    errors = np.full(n, None, dtype=object)
    errors[~ok] = many.message[~ok]
    return Points("batch", _ordered(figs), checks, np.asarray(many.passed, bool), errors, tuple(many.fits))


def _ordered(figs: dict) -> dict:
    head = {k: figs[k] for k in FIGURES if k in figs}
    return head | {k: v for k, v in figs.items() if k not in head}


def _detailed(case: Case, var: dict, n: int, *, workers: int = 1, progress=None) -> Points:
    """Every variant by the detailed engine (worker processes when workers > 1)."""
    from kickback.keypath import set_value
    from kickback.studies.pool import map_points

    cases = []
    for k in range(n):
        c = case
        for path, vals in var.items():
            c = set_value(c, path, float(vals[k]))
        cases.append(c)
    rows = map_points(point_figures, cases, workers=workers, progress=progress)
    return from_rows(case, rows)


def from_rows(case: Case, rows: list[dict]) -> Points:
    """Rows of :func:`kickback.studies.onepoint.point_figures` (detailed engine) as :class:`Points`."""
    n = len(rows)
    names = list(FIGURES) + [f"clamp[{k}].energy_J" for k in range(len(case.clamps))]
    figs = {name: np.array([np.nan if r.get(name) is None else r[name] for r in rows], float) for name in names}
    order: dict[str, None] = {}
    for r in rows:
        for name, *_ in r.get("checks", []):
            order.setdefault(name, None)
    checks = {}
    for name in order:
        unit = next((r["check_units"][name] for r in rows if name in r.get("check_units", {})), "")
        part, quantity = next((r["check_parts"][name] for r in rows if name in r.get("check_parts", {})), (name, ""))
        c = checks[name] = blank_column(part, quantity, unit, n)
        for k, r in enumerate(rows):
            for nm, v, lim, m, ok in r.get("checks", []):
                if nm == name:
                    c.value[k] = np.nan if v is None else v
                    c.limit[k] = np.nan if lim is None else lim
                    c.margin[k] = np.nan if m is None else m
                    c.passed[k], c.applies[k] = ok, True
    errors = np.empty(n, dtype=object)
    errors[:] = [r.get("error") for r in rows]
    passed = np.array([bool(r.get("pass")) and r.get("error") is None for r in rows], bool)
    found = np.empty(n, dtype=object)
    found[:] = [tuple(r.get("audit") or ()) for r in rows]
    return Points("detailed", _ordered(figs), checks, passed, errors, findings=found)


def _replace_rows(pts: Points, rows: np.ndarray, again: Points, count: bool = True) -> Points:
    """``pts`` with the variants ``rows`` taken from ``again`` (the other engine's run of them);
    ``count``: add them to :attr:`Points.retried`."""
    figs = {k: v.copy() for k, v in pts.figures.items()}
    for k, v in again.figures.items():
        figs.setdefault(k, np.full(pts.n, np.nan))[rows] = v
    checks = dict(pts.checks)
    for name, c in again.checks.items():
        old = checks.get(name) or blank_column(c.part, c.quantity, c.unit, pts.n)
        checks[name] = put_rows(old, rows, c)
    passed = pts.passed.copy()
    passed[rows] = again.passed
    errors = pts.errors.copy()
    errors[rows] = again.errors
    ran = pts.ran_on().copy()
    ran[rows] = again.ran_on()
    found = _findings(pts)
    found[rows] = list(_findings(again))
    fits = tuple(dict.fromkeys(pts.fits + again.fits))
    return replace(pts, figures=figs, checks=checks, passed=passed, errors=errors, fits=fits, findings=found,
                   retried=pts.retried + (int(rows.size) if count else 0), ran=ran)


def _findings(pts: Points) -> np.ndarray:
    """The findings column of ``pts`` (a copy; empty tuples where it has none)."""
    out = np.empty(pts.n, dtype=object)
    out[:] = [()] * pts.n if pts.findings is None else list(pts.findings)
    return out


def concat(parts: list[Points]) -> Points:
    """Several :class:`Points` of variants of one structure, one after the other."""
    if len(parts) == 1:
        return parts[0]
    sizes = [p.n for p in parts]
    n = sum(sizes)
    starts = np.cumsum([0] + sizes)
    figs: dict = {}
    checks: dict = {}
    for p, s0 in zip(parts, starts, strict=False):
        sl = slice(s0, s0 + p.n)
        for k, v in p.figures.items():
            figs.setdefault(k, np.full(n, np.nan))[sl] = v
        for name, c in p.checks.items():
            if name not in checks:
                checks[name] = blank_column(c.part, c.quantity, c.unit, n)
            tgt = checks[name]
            for a, b in zip((tgt.value, tgt.limit, tgt.margin, tgt.passed, tgt.applies),
                            (c.value, c.limit, c.margin, c.passed, c.applies), strict=True):
                a[sl] = b
    fits = tuple(dict.fromkeys(f for p in parts for f in p.fits))
    notes = "; ".join(dict.fromkeys(p.note for p in parts if p.note))
    engines = {p.engine for p in parts}
    if len(engines) > 1:
        on_detailed = sum(p.n for p in parts if p.engine == "detailed")
        notes = "; ".join(x for x in (notes, f"{on_detailed} of {n} variants ran on the detailed engine") if x)
    failed = sum(p.audit_failed for p in parts)
    solved = sum(p.audit_solved for p in parts)
    other = "/".join(dict.fromkeys(p.audit_engine for p in parts if p.audit_engine))
    # the engine picked: the batch engine where it ran any part (the detailed one ran the others
    # because the batch engine does not cover them); ``ran`` says which ran each variant
    picked = "batch" if "batch" in engines else "detailed"
    return Points(picked, figs, checks,
                  np.concatenate([p.passed for p in parts]), np.concatenate([p.errors for p in parts]),
                  fits, notes, sum(p.retried for p in parts), np.concatenate([_findings(p) for p in parts]),
                  failed, solved, other, np.concatenate([p.ran_on() for p in parts]))


def evaluate_cases(cases: list[Case], *, engine: str = "auto", workers: int = 1, progress=None) -> Points:
    """Simulate a list of cases; cases of one topology (see
    :func:`kickback.studies.many.as_variations`) run as one batch, others one by one."""
    from kickback.studies.many import as_variations

    split = as_variations(cases)
    if split is not None:
        base, var = split
        if not var and len(cases) > 1:
            var = {"supply.voltage": np.full(len(cases), base.supply.voltage)}
        return evaluate(base, var, engine=engine, workers=workers, progress=progress)
    parts = []
    for k, c in enumerate(cases):
        parts.append(evaluate(c, engine=engine, workers=1))
        if progress:
            progress(k + 1)
    return concat(parts)
