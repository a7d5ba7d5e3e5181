"""The Monte Carlo of a tolerance study, chunk by chunk: each chunk's task draws (or is sent) its
samples, runs them and returns a summary; this process merges the summaries in chunk order.

What a chunk returns and how it is merged (so the merged numbers do not depend on the chunks,
the executor or the worker count):

- the samples that pass, the samples not simulated, the samples per engine — counts, summed;
- per figure, a :class:`kickback.studies.tolstats.Summary` (counts on bins fixed before the run,
  exact minimum and maximum) — merged by :func:`kickback.studies.tolstats.merge`;
- per figure, its largest value, the sample's index and values (the worst-case search starts
  there) — the largest kept, the earliest sample on a tie, as ``numpy.nanargmax``;
- per check, the sample with the smallest margin, its index and values — the smallest kept, the
  earliest on a tie;
- the figures and verdicts of the samples chosen for the detailed recheck (known before the run);
- when asked (``keep``), every sample's values, figures, verdict and error: the caller gathers
  them (a small study) or streams them to a file (``sink``) and lets them go.

References
----------
numpy documentation, "Parallel random number generation" (``SeedSequence.spawn``).
"""

from __future__ import annotations

import numpy as np

from kickback import parallel
from kickback.studies import tolstats
from kickback.studies.tolsample import draw_rows, evaluate


def run_chunks(case, seed: int, n: int, matrix, flist, used: str, workers: int, progress, size: int, *,
               keep: bool, recheck_idx=None, sink=None) -> dict:
    """Every sample, chunk by chunk on the executor (:mod:`kickback.parallel`), merged in order.

    Parameters
    ----------
    matrix : (n, k) array or None — the samples when this process holds them (sent to the tasks);
        None: each task draws its own (:func:`kickback.studies.tolsample.draw_rows`)
    size : int — samples per task
    keep : bool — gather every sample's figures, verdict and error (arrays of length n)
    recheck_idx : int array or None — samples whose figures and verdicts come back for the recheck
    sink : callable or None — ``sink(start, rows, figures, passed, errors)`` per chunk, in order

    Returns
    -------
    dict — the merged counts and summaries (see the module docstring), and with ``keep`` the
    arrays ``figures``, ``passed``, ``errors``
    """
    cuts = parallel.groups(n, size)
    ends = [g.stop for g in cuts]

    def step(done):
        if progress is not None:
            progress(ends[done - 1])

    names = tuple(f for f, _, _ in flist)
    idx = np.zeros(0, np.int64) if recheck_idx is None else np.asarray(recheck_idx, np.int64)
    full = keep or sink is not None
    jobs = [(case, None if matrix is None else matrix[g], seed, n, g.start, g.stop, used, size, names, workers,
             full, idx[(idx >= g.start) & (idx < g.stop)] - g.start) for g in cuts]
    out = {"n_passed": 0, "n_errors": 0, "worst": {}, "fits": [], "retried": 0, "audit": [0, 0, ""],
           "engines": dict.fromkeys(("batch", "detailed"), 0),
           "summaries": {f: tolstats.empty() for f in names}, "maxima": dict.fromkeys(names),
           "recheck_figures": {f: np.full(idx.size, np.nan) for f in names},
           "recheck_passed": np.zeros(idx.size, bool)}
    if keep:
        out |= {"figures": {f: np.full(n, np.nan) for f in names}, "passed": np.zeros(n, bool),
                "errors": np.full(n, None, dtype=object)}
    # a chunk run in this process (one chunk, or workers=1) shares its batches among ``workers``;
    # in a task of the map its inner maps run in the task's process (kickback.parallel)
    for g, part in zip(cuts, parallel.imap_ordered(_chunk_job, jobs, workers=workers, progress=step, group=1),
                       strict=True):
        _merge(out, g, part, idx)
        if keep:
            for f, a in part["figures"].items():
                out["figures"][f][g] = a
            out["passed"][g] = part["passed"]
            out["errors"][g] = part["errors"]
        if sink is not None:
            sink(g.start, part["rows"], part["figures"], part["passed"], part["errors"])
        del part
    out["engines"] = {e: m for e, m in out["engines"].items() if m}
    out["fits"], out["audit"] = tuple(out["fits"]), tuple(out["audit"])
    return out


def _merge(out: dict, g: slice, part: dict, idx) -> None:
    """Add one chunk's summary (``part``, samples ``g``) to the merged one."""
    for e, m in part["engines"].items():
        out["engines"][e] += m
    out["n_passed"] += part["n_passed"]
    out["n_errors"] += part["n_errors"]
    out["fits"] += [x for x in part["fits"] if x not in out["fits"]]
    out["retried"] += part["retried"]
    a, b = out["audit"], part["audit"]
    out["audit"] = [a[0] + b[0], a[1] + b[1], b[2] or a[2]]
    for f, s in part["summaries"].items():
        out["summaries"][f] = tolstats.merge(out["summaries"][f], s)
    for f, m in part["maxima"].items():
        if m is not None:
            out["maxima"][f] = tolstats.better_max(out["maxima"][f], (m[0], g.start + m[1], m[2]))
    for name, (key, j, v, lim, margin, unit, row) in part["worst"].items():
        if name not in out["worst"] or key < out["worst"][name][0]:
            out["worst"][name] = (key, g.start + j, v, lim, margin, unit, row)
    here = np.flatnonzero((idx >= g.start) & (idx < g.stop))
    for f, a in part["recheck_figures"].items():
        out["recheck_figures"][f][here] = a
    out["recheck_passed"][here] = part["recheck_passed"]


def _chunk_job(args) -> dict:
    """One chunk of samples, run where the executor puts it (see the module docstring)."""
    case, rows, seed, n, start, stop, used, size, names, workers, full, idx = args
    if rows is None:
        rows = draw_rows(case, n, seed, start, stop)
    pts = evaluate(case, rows, engine=used, workers=workers, chunk=size)
    worst = {}
    for name, c in pts.checks.items():
        key = np.where(c.applies, np.where(np.isnan(c.margin), -np.inf, c.margin), np.inf)
        j = int(np.argmin(key))
        if c.applies[j]:
            worst[name] = (float(key[j]), j, c.value[j], c.limit[j], c.margin[j], c.unit, rows[j].copy())
    figures = {f: pts.figures[f] for f in names if f in pts.figures}
    maxima = {}
    for f in names:
        m = tolstats.argmax_row(figures[f]) if f in figures else None
        maxima[f] = None if m is None else (m[0], m[1], rows[m[1]].copy())
    part = {"n_passed": int(np.sum(pts.passed)), "n_errors": int(sum(e is not None for e in pts.errors)),
            "worst": worst, "fits": list(pts.fits), "retried": pts.retried, "engines": pts.engine_counts(),
            "audit": (pts.audit_failed, pts.audit_solved, pts.audit_engine),
            "summaries": {f: tolstats.summarize(figures.get(f, np.full(len(rows), np.nan))) for f in names},
            "maxima": maxima,
            "recheck_figures": {f: (figures[f][idx] if f in figures else np.full(idx.size, np.nan)) for f in names},
            "recheck_passed": np.asarray(pts.passed)[idx]}
    if full:
        part |= {"figures": {f: figures.get(f, np.full(len(rows), np.nan)) for f in names},
                 "passed": np.asarray(pts.passed), "errors": list(pts.errors), "rows": rows}
    return part
