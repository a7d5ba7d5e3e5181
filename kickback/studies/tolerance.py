"""Tolerance study: Monte Carlo over the case's [tolerance] bands, corners, worst-case search,
sensitivity and yield against every check."""

from __future__ import annotations

import itertools

import numpy as np

from kickback import parallel
from kickback.case import Case
from kickback.errors import CaseError
from kickback.keypath import get_value, set_value
from kickback.models.passive import COPPER_ZERO_K, copper_resistance
from kickback.studies.tolresult import (
    FIGURES,
    PERCENTILES,
    ToleranceResult,
    clopper_pearson,
    json_float,
    params_row,
)

MAX_CORNER_VALUES = 10  # 2^10 corners at most
#: samples per batch of the Monte Carlo (memory is bounded by it, not by the number of samples)
CHUNK = 10_000
#: draws per random block (one SeedSequence child each); fixed, so the samples never depend on
#: the workers, the executor or ``chunk``
DRAW_BLOCK = 10_000
#: samples per task when the detailed engine runs them (each sample is solved on its own)
DETAILED_TASK = 8
#: batch-engine samples run again by the detailed engine, drawn at random (seeded)
RECHECK = 16
#: rounds of the worst-case search per figure when the batch engine runs (one batch per round)
SEARCH_ROUNDS = 16


def figure_list(case: Case) -> tuple[tuple[str, str, bool], ...]:
    """The figures followed for ``case``: the common ones, and each clamp's energy when there are
    several clamps."""
    extra = tuple((f"clamp[{k}].energy_J", "J", True) for k in range(len(case.clamps))) \
        if len(case.clamps) > 1 else ()
    return FIGURES + extra


def sample(case: Case, n: int, rng: np.random.Generator) -> np.ndarray:
    """``n`` draws of every toleranced value, shape (n, k) [SI]; normal draws are kept inside the
    physical range by redrawing the few that cross zero (a coil temperature: copper's zero-resistance
    point, IEC 60028)."""
    cols = []
    for tol in case.tolerances:
        if tol.distribution == "uniform":
            x = rng.uniform(tol.low, tol.high, n)
        else:
            mid, sd = 0.5 * (tol.low + tol.high), 0.5 * (tol.high - tol.low) / tol.k_sigma
            x = rng.normal(mid, sd, n)
            # keep the draws physical: above 0, or above copper's zero-resistance point
            floor = COPPER_ZERO_K if tol.path == "coil_temperature" else 0.0
            bad = x <= floor
            while bad.any():
                x[bad] = rng.normal(mid, sd, int(bad.sum()))
                bad = x <= floor
        cols.append(x)
    return np.column_stack(cols) if cols else np.zeros((n, 0))


def draw(case: Case, n: int, seed: int) -> np.ndarray:
    """``n`` draws of every toleranced value (:func:`sample`), shape (n, k) [SI], block by block:
    block j of :data:`DRAW_BLOCK` draws uses child j of ``SeedSequence(seed).spawn`` (see
    :func:`kickback.parallel.chunk_seeds`), so the numbers depend on ``seed`` and ``n`` only."""
    seeds = parallel.chunk_seeds(seed, n, DRAW_BLOCK)
    parts = [sample(case, g.stop - g.start, np.random.default_rng(s))
             for g, s in zip(parallel.groups(n, DRAW_BLOCK), seeds, strict=False)]
    return np.vstack(parts) if parts else np.zeros((0, len(case.tolerances)))


def _recheck_rng(seed: int, n: int) -> np.random.Generator:
    """The generator that picks the recheck samples: the child after the draw blocks' children."""
    k = len(parallel.chunk_seeds(seed, n, DRAW_BLOCK))
    return np.random.default_rng(np.random.SeedSequence(seed).spawn(k + 1)[k])


def apply(case: Case, values) -> Case:
    """``case`` with the toleranced values set; the coil temperature scales the (already
    toleranced) coil resistance by copper's coefficient (IEC 60028)."""
    temperature = None
    for tol, x in zip(case.tolerances, values, strict=True):
        if tol.path == "coil_temperature":
            temperature = (float(x), tol.reference)
        else:
            case = set_value(case, tol.path, float(x))
    if temperature is not None:
        r = copper_resistance(case.coil.resistance, temperature[0], temperature[1])
        case = set_value(case, "coil.resistance", r)
    return case


def check_varied(case: Case, matrix: np.ndarray) -> None:
    """Every value the study sets — the samples, and the band ends its corners and search use —
    passes the case file's own rules (:func:`kickback.casevary.check_ranges` over their box).

    Raises
    ------
    CaseError — ``key="tolerance"``: the values and the rule they break.
    """
    from kickback.casevary import check_ranges

    ends = np.array([[t.low for t in case.tolerances], [t.high for t in case.tolerances]], float)
    rows = np.vstack([np.atleast_2d(np.asarray(matrix, float)).reshape(-1, len(case.tolerances)), ends])
    var = variations_of(case, rows)
    check_ranges(case, {p: (float(np.min(v)), float(np.max(v))) for p, v in var.items()}, "tolerance")


def nominal(case: Case) -> np.ndarray:
    out = []
    for tol in case.tolerances:
        out.append(tol.reference if tol.path == "coil_temperature" else get_value(case, tol.path))
    return np.array(out, dtype=float)


def variations_of(case: Case, matrix) -> dict:
    """The rows of ``matrix`` (one column per toleranced value) as variations of ``case`` by key
    path; the coil temperature scales the (toleranced) coil resistance as :func:`apply` does."""
    matrix = np.atleast_2d(np.asarray(matrix, float))
    out: dict = {}
    temperature = None
    for j, tol in enumerate(case.tolerances):
        if tol.path == "coil_temperature":
            temperature = (matrix[:, j], tol.reference)
        else:
            out[".".join(p.strip() for p in tol.path.split("."))] = matrix[:, j]
    if temperature is not None:
        r = out.get("coil.resistance", np.full(matrix.shape[0], case.coil.resistance))
        out["coil.resistance"] = copper_resistance(r, temperature[0], temperature[1])
    return out


def evaluate(case: Case, matrix: np.ndarray, *, engine: str = "detailed", workers: int = 1, progress=None,
             chunk: int | None = None):
    """Figures, checks and verdicts of every row of ``matrix``
    (:class:`kickback.studies.points.Points`)."""
    from kickback.studies.points import evaluate as run

    return run(case, variations_of(case, matrix), engine=engine, workers=workers, progress=progress, chunk=chunk)


def run_tolerance(case: Case, n: int, seed: int, *, workers: int = 1, progress=None,
                  search_budget: int | None = None, engine: str = "auto", chunk: int = CHUNK,
                  recheck: int = RECHECK, executor=None) -> ToleranceResult:
    """Monte Carlo with ``n`` samples (seeded), corners, worst-case search and sensitivity.

    Parameters
    ----------
    case : Case — with a [tolerance] section
    n : int — samples
    seed : int — random state: the same seed gives the same numbers
    workers : int — worker processes for the detailed engine
    progress : callable(n_done) or None — over the samples
    search_budget : int or None — trial points per figure of the worst-case search; None: 40 for
        the detailed engine, :data:`SEARCH_ROUNDS` rounds for the batch engine
    engine : str — "auto" (the batch engine unless the case has a feature it does not cover),
        "batch" or "detailed"
    chunk : int — samples per batch; memory is bounded by it, not by n
    recheck : int — with the batch engine, this many samples drawn at random are run again by
        the detailed engine and the largest difference per figure is reported (0: none)
    executor : concurrent.futures.Executor, Dask Client or None — runs the chunks (None: the
        persistent local pool of ``workers`` processes, see :mod:`kickback.parallel`); the same
        seed gives the same numbers on any executor and any number of workers

    Raises
    ------
    CaseError — the case has no [tolerance] section
    SolverError — ``engine="batch"`` for a case the batch engine does not cover
    """
    from kickback.studies.points import pick_engine

    if not case.tolerances:
        raise CaseError("the case has no [tolerance] section (expected at least one toleranced value, "
                        'e.g. [tolerance."coil.inductance"] band = "10 %")', source=case.source, key="tolerance")
    used, note = pick_engine(case, engine)
    names = tuple(t.path for t in case.tolerances)
    flist = figure_list(case)
    matrix = draw(case, n, seed)
    check_varied(case, matrix)
    idx = np.sort(_recheck_rng(seed, n).choice(n, size=min(recheck, n), replace=False)) \
        if used == "batch" and recheck > 0 else None
    with parallel.using(executor), _Recheck(case, matrix, idx, workers) as later:
        figs, passed, k, errors, worst, fits, retried, audited, counts = _monte_carlo(case, matrix, flist, used,
                                                                                      workers, progress, chunk)
        study = _rest(case, names, flist, matrix, figs, used, workers, search_budget)
        check = None if idx is None else recheck_detailed(idx, figs, passed, flist, later.points())
    if retried:
        note = (note + "; " if note else "") + (f"{retried} sample(s) the batch engine could not simulate were run "
                                                "by the detailed engine")
    if audited[0]:
        from kickback.studies.pointtable import audit_note

        note = (note + "; " if note else "") + audit_note(*audited)
    pct = {f: {p: (float(np.nanpercentile(a, p)) if np.isfinite(a).any() else None) for p in PERCENTILES}
           for f, a in figs.items()}
    worst_per_check = {name: {"margin": json_float(m), "value": json_float(v), "limit": json_float(lim), "unit": unit,
                              "params": params_row(names, matrix[j])}
                       for name, (_key, j, v, lim, m, unit) in worst.items()}
    corners, search, sens = study
    return ToleranceResult(case, names, matrix, figs, passed, list(errors), clopper_pearson(k, n), pct,
                           worst_per_check, corners, search, sens, seed, flist, used, fits, note, check, engine,
                           counts)


class _Recheck:
    """The detailed engine's run of the recheck samples, started in worker processes before the
    batch engine runs the Monte Carlo (the two share the machine's cores), or run when asked."""

    def __init__(self, case, matrix, idx, workers):
        self.case, self.rows, self.workers = case, None if idx is None else matrix[idx], workers
        self.futures = []

    def __enter__(self):
        if self.rows is not None and len(self.rows) > 1:
            parts = [(self.case, self.rows[g]) for g in parallel.groups(len(self.rows), DETAILED_TASK // 2)]
            futures = [parallel.submit(_detailed_job, part, workers=self.workers) for part in parts]
            self.futures = futures if all(f is not None for f in futures) else []
        return self

    def points(self):
        from kickback.studies.points import concat

        if self.futures:
            return concat([f.result() for f in self.futures])
        return _detailed_points(self.case, self.rows)

    def __exit__(self, *exc):
        for fut in self.futures:
            fut.cancel()
        return False


def _detailed_points(case, rows):
    return evaluate(case, rows, engine="detailed")


def _detailed_job(args):
    return _detailed_points(*args)


def _rest(case, names, flist, matrix, figs, used, workers, search_budget):
    """Corners, the worst-case search and the one-at-a-time sensitivity."""

    def figures_at(x):
        pts = evaluate(case, x, engine=used, workers=workers)
        return {f: pts.figures.get(f, np.full(len(x), np.nan)) for f, _, _ in flist}

    lows = np.array([t.low for t in case.tolerances])
    highs = np.array([t.high for t in case.tolerances])
    corners, corner_best = {}, {}
    if len(names) <= MAX_CORNER_VALUES:
        cm = np.array(list(itertools.product(*zip(lows, highs, strict=True))), dtype=float)
        for f, a in figures_at(cm).items():
            if np.isfinite(a).any():
                j = int(np.nanargmax(a))
                corners[f] = {"max": float(a[j]), "min": float(np.nanmin(a)), "params": params_row(names, cm[j])}
                corner_best[f] = (float(a[j]), cm[j])
    search = _search(figs, matrix, corner_best, lows, highs, figures_at, names, flist,
                     search_budget or (40 if used == "detailed" else 2 * len(names) * SEARCH_ROUNDS))
    nom = nominal(case)
    sens = {}
    one_at_a_time = []
    for i in range(len(names)):
        lo_row, hi_row = nom.copy(), nom.copy()
        lo_row[i], hi_row[i] = lows[i], highs[i]
        one_at_a_time += [lo_row, hi_row]
    if one_at_a_time:
        for f, a in figures_at(np.array(one_at_a_time)).items():
            swings = [(names[i], float(a[2 * i + 1] - a[2 * i])) for i in range(len(names))
                      if np.isfinite(a[2 * i]) and np.isfinite(a[2 * i + 1])]
            sens[f] = sorted(swings, key=lambda s: -abs(s[1]))
    return corners, search, sens


def _monte_carlo(case, matrix, flist, used, workers, progress, chunk):
    """Every sample, chunk by chunk on the executor (:mod:`kickback.parallel`): the followed
    figures, verdicts, the number passed, errors and, per check, the sample with the smallest
    margin (no margin counts as the smallest); the count and the minima are merged from each
    chunk's own. Each chunk's rows go to its task; the figure columns come back (the
    percentiles need them: 8 bytes per sample and figure in this process)."""
    n = len(matrix)
    size = max(1, chunk) if used == "batch" else DETAILED_TASK
    cuts = parallel.groups(n, size)
    ends = [g.stop for g in cuts]

    def step(done):
        if progress is not None:
            progress(ends[done - 1])

    names = tuple(f for f, _, _ in flist)
    # a chunk run in this process (one chunk, or workers=1) shares its batches among ``workers``;
    # in a task of the map its inner maps run in the task's process (kickback.parallel)
    parts = parallel.map_ordered(_chunk_job, [(case, matrix[g], used, size, names, workers) for g in cuts],
                                 workers=workers, progress=step, group=1)
    figs = {f: np.full(n, np.nan) for f, _, _ in flist}
    passed = np.zeros(n, bool)
    k = 0  # samples that passed: the per-chunk counts, summed
    errors = np.full(n, None, dtype=object)
    worst: dict = {}
    fits: list = []
    retried = 0
    audited = [0, 0, ""]  # samples that failed their audit, solved again, on which engine
    counts = dict.fromkeys(("batch", "detailed"), 0)
    for g, part in zip(cuts, parts, strict=True):
        for e, m in part["engines"].items():
            counts[e] += m
        for f, a in part["figures"].items():
            figs[f][g] = a
        passed[g] = part["passed"]
        k += part["n_passed"]
        errors[g] = part["errors"]
        fits += [x for x in part["fits"] if x not in fits]
        retried += part["retried"]
        audited = [audited[0] + part["audit"][0], audited[1] + part["audit"][1], part["audit"][2] or audited[2]]
        for name, (key, j, v, lim, m, unit) in part["worst"].items():
            if name not in worst or key < worst[name][0]:
                worst[name] = (key, g.start + j, v, lim, m, unit)
    return (figs, passed, k, errors, worst, tuple(fits), retried, tuple(audited),
            {e: m for e, m in counts.items() if m})


def _chunk_job(args) -> dict:
    """One chunk of samples, run where the executor puts it: its figures, verdicts and errors,
    its pass count, and per check its sample with the smallest margin (index within the chunk)."""
    case, rows, used, chunk, names, workers = args
    pts = evaluate(case, rows, engine=used, workers=workers, chunk=chunk)
    worst = {}
    for name, c in pts.checks.items():
        key = np.where(c.applies, np.where(np.isnan(c.margin), -np.inf, c.margin), np.inf)
        j = int(np.argmin(key))
        if c.applies[j]:
            worst[name] = (float(key[j]), j, c.value[j], c.limit[j], c.margin[j], c.unit)
    return {"figures": {f: pts.figures[f] for f in names if f in pts.figures}, "passed": pts.passed,
            "n_passed": int(np.sum(pts.passed)), "errors": list(pts.errors), "worst": worst,
            "fits": list(pts.fits), "retried": pts.retried, "engines": pts.engine_counts(),
            "audit": (pts.audit_failed, pts.audit_solved, pts.audit_engine)}


def _search(figs, matrix, corner_best, lows, highs, figures_at, names, flist, budget) -> dict:
    """The worst-case search of every figure that varies over the samples, from the worst sample
    (or corner, when it is worse)."""
    from kickback.studies.worstcase import compass_search

    starts = {}
    for f, _, _ in flist:
        a = figs[f]
        if not np.isfinite(a).any() or np.nanmax(a) == np.nanmin(a):
            continue  # absent or constant over the samples (e.g. no avalanche at all)
        j = int(np.nanargmax(a))
        start_val, start = float(a[j]), matrix[j]
        if f in corner_best and corner_best[f][0] > start_val:
            start_val, start = corner_best[f]
        starts[f] = (np.clip(start, lows, highs), start_val)
    found = compass_search(figures_at, starts, lows, highs, budget)
    search = {}
    for f, (best_val, best_x) in found.items():
        c_max = corner_best.get(f, (None,))[0]
        search[f] = {"max": float(best_val), "params": params_row(names, best_x), "corner_max": c_max,
                     "interior": bool(c_max is not None and best_val > c_max * (1 + 1e-6) + 1e-300)}
    return search


def recheck_detailed(idx, figs, passed, flist, pts) -> dict:
    """Samples ``idx`` as run again by the detailed engine (``pts``, :class:`Points`) against the
    batch engine's figures ``figs``: per figure the largest absolute and relative difference
    (batch − detailed) and where, times present in one engine only, and verdicts that differ."""
    out = {}
    for f, unit, _ in flist:
        a, b = figs[f][idx], pts.figures.get(f, np.full(idx.size, np.nan))
        both = np.isfinite(a) & np.isfinite(b)
        one = int(np.sum(np.isfinite(a) != np.isfinite(b)))
        entry = {"unit": unit, "max_abs": None, "max_rel": None, "sample": None, "present_in_one_only": one}
        if both.any():
            d = np.abs(a - b)
            with np.errstate(invalid="ignore", divide="ignore"):
                rel = np.where(b != 0, d / np.abs(b), np.where(d == 0, 0.0, np.inf))
            j = int(np.argmax(np.where(both, rel, -1.0)))
            entry |= {"max_abs": float(np.max(d[both])), "max_rel": float(rel[j]), "sample": int(idx[j])}
        out[f] = entry
    return {"samples": int(idx.size), "indices": [int(i) for i in idx], "figures": out,
            "verdicts_differ": int(np.sum(passed[idx] != pts.passed)),
            "detailed_errors": int(sum(e is not None for e in pts.errors))}
