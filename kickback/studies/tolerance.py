"""Tolerance study: Monte Carlo over the case's [tolerance] bands, corners, worst-case search,
sensitivity and yield against every check."""

from __future__ import annotations

import itertools

import numpy as np

from kickback import parallel
from kickback.case import Case
from kickback.errors import CaseError
from kickback.keypath import get_value, set_value
from kickback.models.passive import copper_resistance
from kickback.studies.tolresult import (
    FIGURES,
    PERCENTILES,
    ToleranceResult,
    clopper_pearson,
    json_float,
    params_row,
)
from kickback.studies.tolsample import DRAW_BLOCK, draw, draw_rows, evaluate, sample, variations_of

__all__ = ["CHUNK", "DRAW_BLOCK", "GATHER", "PERCENTILES", "ToleranceResult", "apply", "check_varied", "draw",
           "draw_rows", "evaluate", "figure_list", "nominal", "run_tolerance", "sample", "variations_of"]

MAX_CORNER_VALUES = 10  # 2^10 corners at most
#: samples per batch of the Monte Carlo (memory is bounded by it, not by the number of samples)
CHUNK = 10_000
#: samples per task when the detailed engine runs them (each sample is solved on its own)
DETAILED_TASK = 8
#: studies of up to this many samples keep every sample in this process: exact percentiles, and
#: every sample's figures in the result; larger ones keep only the merged per-chunk summaries
#: (percentiles within a stated bracket, :mod:`kickback.studies.tolstats`) and each task draws its
#: own samples
GATHER = 100_000
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
    _check_box(case, [matrix])


def _check_box(case: Case, blocks) -> None:
    """:func:`check_varied` over the samples given block by block (the box merged from each block's)."""
    from kickback.casevary import check_ranges

    ends = np.array([[t.low for t in case.tolerances], [t.high for t in case.tolerances]], float)
    box: dict = {}
    for block in [ends, *blocks]:
        rows = np.atleast_2d(np.asarray(block, float)).reshape(-1, len(case.tolerances))
        if not len(rows):
            continue
        for p, v in variations_of(case, rows).items():
            lo, hi = float(np.min(v)), float(np.max(v))
            box[p] = (min(lo, box[p][0]), max(hi, box[p][1])) if p in box else (lo, hi)
    check_ranges(case, box, "tolerance")


def _scan(case: Case, n: int, seed: int, idx) -> np.ndarray:
    """Draw the samples block by block without keeping them: check their box (:func:`check_varied`)
    and return the rows ``idx`` (the recheck's samples)."""
    idx = np.zeros(0, np.int64) if idx is None else np.asarray(idx, np.int64)
    picked = np.zeros((idx.size, len(case.tolerances)))

    def blocks():
        for g in parallel.groups(n, DRAW_BLOCK):
            block = draw_rows(case, n, seed, g.start, g.stop)
            here = (idx >= g.start) & (idx < g.stop)
            picked[here] = block[idx[here] - g.start]
            yield block

    _check_box(case, blocks())
    return picked


def nominal(case: Case) -> np.ndarray:
    out = []
    for tol in case.tolerances:
        out.append(tol.reference if tol.path == "coil_temperature" else get_value(case, tol.path))
    return np.array(out, dtype=float)


def run_tolerance(case: Case, n: int, seed: int, *, workers: int = 1, progress=None,
                  search_budget: int | None = None, engine: str = "auto", chunk: int = CHUNK,
                  recheck: int = RECHECK, executor=None, gather: int = GATHER, sink=None) -> ToleranceResult:
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
    gather : int — up to this many samples (:data:`GATHER`), every sample is kept in this process:
        the result holds each sample's values, figures and verdict, and exact percentiles. Above
        it, only the per-chunk summaries are merged (:mod:`kickback.studies.tolchunks`): yield,
        worst samples and the worst-case search's starts exactly, percentiles within a stated
        bracket (:mod:`kickback.studies.tolstats`); the samples are not kept.
    sink : callable or None — ``sink(start, rows, figures, passed, errors)`` with each chunk's
        samples, in chunk order (whatever the workers), e.g. to stream them to a file

    Raises
    ------
    CaseError — the case has no [tolerance] section
    SolverError — ``engine="batch"`` for a case the batch engine does not cover
    """
    from kickback.studies.points import pick_engine
    from kickback.studies.tolchunks import run_chunks

    if not case.tolerances:
        raise CaseError("the case has no [tolerance] section (expected at least one toleranced value, "
                        'e.g. [tolerance."coil.inductance"] band = "10 %")', source=case.source, key="tolerance")
    used, note = pick_engine(case, engine)
    names = tuple(t.path for t in case.tolerances)
    flist = figure_list(case)
    keep = n <= gather
    idx = np.sort(_recheck_rng(seed, n).choice(n, size=min(recheck, n), replace=False)) \
        if used == "batch" and recheck > 0 else None
    if keep:
        matrix = draw(case, n, seed)
        check_varied(case, matrix)
        picked = None if idx is None else matrix[idx]
    else:
        matrix, picked = None, _scan(case, n, seed, idx)
    size = max(1, chunk) if used == "batch" else DETAILED_TASK
    with parallel.using(executor), _Recheck(case, picked, workers) as later:
        mc = run_chunks(case, seed, n, matrix, flist, used, workers, progress, size, keep=keep, recheck_idx=idx,
                        sink=sink)
        study = _rest(case, names, flist, mc, used, workers, search_budget)
        check = None if idx is None else recheck_detailed(idx, mc["recheck_figures"], mc["recheck_passed"], flist,
                                                          later.points())
    if mc["retried"]:
        note = (note + "; " if note else "") + (f"{mc['retried']} sample(s) the batch engine could not simulate were "
                                                "run by the detailed engine")
    if mc["audit"][0]:
        from kickback.studies.pointtable import audit_note

        note = (note + "; " if note else "") + audit_note(*mc["audit"])
    pct, brackets = _percentiles(mc, keep)
    worst_per_check = {name: {"margin": json_float(m), "value": json_float(v), "limit": json_float(lim), "unit": unit,
                              "params": params_row(names, row)}
                       for name, (_key, _j, v, lim, m, unit, row) in mc["worst"].items()}
    corners, search, sens = study
    return ToleranceResult(
        case, names, matrix, mc.get("figures"), mc.get("passed"), None if not keep else list(mc["errors"]),
        clopper_pearson(mc["n_passed"], n), pct, worst_per_check, corners, search, sens, seed, flist, used,
        mc["fits"], note, check, engine, mc["engines"], n=n, n_passed=mc["n_passed"], n_errors=mc["n_errors"],
        summaries=mc["summaries"], brackets=brackets)


def _percentiles(mc: dict, exact: bool) -> tuple[dict, dict | None]:
    """Every figure's :data:`PERCENTILES`: numpy's on the gathered samples (``exact``), or the midpoints
    of their brackets from the merged summaries, with the brackets (figure → {p: (low, high)})."""
    from kickback.studies import tolstats

    if exact:
        return ({f: {p: (float(np.nanpercentile(a, p)) if np.isfinite(a).any() else None) for p in PERCENTILES}
                 for f, a in mc["figures"].items()}, None)
    pct, brackets = {}, {}
    for f, s in mc["summaries"].items():
        found = {p: tolstats.percentile(s, p) for p in PERCENTILES}
        pct[f] = {p: None if v is None else v[0] for p, v in found.items()}
        brackets[f] = {p: None if v is None else (v[1], v[2]) for p, v in found.items()}
    return pct, brackets


class _Recheck:
    """The detailed engine's run of the recheck samples, started in worker processes before the
    batch engine runs the Monte Carlo (the two share the machine's cores), or run when asked."""

    def __init__(self, case, rows, workers):
        self.case, self.rows, self.workers = case, rows, workers
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


def _rest(case, names, flist, mc, used, workers, search_budget):
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
    search = _search(mc, corner_best, lows, highs, figures_at, names, flist,
                     search_budget or (40 if used == "detailed" else 2 * len(names) * SEARCH_ROUNDS),
                     accuracy=_figure_accuracy(used, mc["fits"]))
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


def _figure_accuracy(used: str, fits) -> float:
    """The relative accuracy of the figures the study's engine gives: the bound on a fitted law's
    effect on every figure when the batch engine fits a Shockley diode or varistor, else the
    agreement of the engines on exact laws (both as :mod:`kickback.studies.choose` states them)."""
    from kickback.studies.choose import CONFIRM_EXACT, CONFIRM_FIT

    return CONFIRM_FIT if used == "batch" and fits else CONFIRM_EXACT


def _search(mc, corner_best, lows, highs, figures_at, names, flist, budget, accuracy=1e-6) -> dict:
    """The worst-case search of every figure that varies over the samples, from the worst sample
    (merged from each chunk's, :mod:`kickback.studies.tolchunks`), or the worst corner when it is
    worse. A maximum inside the bands counts as one the corners miss (``interior``) only when it
    exceeds the worst corner by more than the figures' relative ``accuracy``: a smaller excess is
    not a finding the engine can resolve."""
    from kickback.studies.worstcase import compass_search

    starts = {}
    for f, _, _ in flist:
        s, best = mc["summaries"][f], mc["maxima"][f]
        if best is None or s.low == s.high:
            continue  # absent or constant over the samples (e.g. no avalanche at all)
        start_val, start = best[0], best[2]
        if f in corner_best and corner_best[f][0] > start_val:
            start_val, start = corner_best[f]
        starts[f] = (np.clip(start, lows, highs), start_val)
    found = compass_search(figures_at, starts, lows, highs, budget)
    search = {}
    for f, (best_val, best_x) in found.items():
        c_max = corner_best.get(f, (None,))[0]
        search[f] = {"max": float(best_val), "params": params_row(names, best_x), "corner_max": c_max,
                     "interior": bool(c_max is not None
                                      and best_val > c_max + accuracy * abs(c_max) + 1e-300)}
    return search


def recheck_detailed(idx, figs, passed, flist, pts) -> dict:
    """Samples ``idx`` as run again by the detailed engine (``pts``, :class:`Points`) against the
    batch engine's figures ``figs`` (figure → the values at ``idx``) and verdicts ``passed`` (at
    ``idx``): per figure the largest absolute and relative difference (batch − detailed) and where,
    times present in one engine only, and verdicts that differ."""
    out = {}
    for f, unit, _ in flist:
        a, b = np.asarray(figs[f]), pts.figures.get(f, np.full(idx.size, np.nan))
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
            "verdicts_differ": int(np.sum(np.asarray(passed) != pts.passed)),
            "detailed_errors": int(sum(e is not None for e in pts.errors))}
