"""Choosing a clamp: families × standard values against the case's constraints, ranked.

Every family's candidates share one topology, so each family runs as one batch of variants
(:func:`kickback.studies.points.evaluate_cases`: the batch engine unless the case has a feature
it does not cover). Candidates whose batch figures lie within the batch engine's accuracy of a
limit — the fit's stated effect (:data:`CONFIRM_FIT`) where a nonlinear law enters as a
piecewise-linear fit, :data:`CONFIRM_EXACT` otherwise — are run again by the detailed engine and
judged on its figures. The top choices are simulated again with the detailed engine; one that
fails there is moved to the rejected ones with the reason, and the next one takes its place.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from kickback import parallel
from kickback.case import Case, Option
from kickback.studies.designs import allowed_voltage, family_candidates, impractical
from kickback.studies.onepoint import point_figures, result_figures
from kickback.studies.pool import map_points

#: a batch-screened candidate this close to a limit (relative margin) is confirmed by the detailed
#: engine, where a fit of a nonlinear law is used: the bound on the fit's effect on every figure
#: (tests/test_batch.py::test_fitted_nonlinear_demo_cases_within_two_percent)
CONFIRM_FIT = 0.02
#: … and where every law is exact (piecewise linear): the agreement of the two engines
#: (tests/test_batch.py, relative 1e-6)
CONFIRM_EXACT = 1e-6


@dataclass(frozen=True)
class Candidate:
    family: str
    value: float  # the sizing value [SI]; 0 for a family with a single member
    unit: str
    option: Option
    figures: dict  # as kickback.studies.onepoint.point_figures
    v_allow: float
    engine: str = "detailed"  # the engine whose figures these are

    min_margin: float = 0.0  # the case's checks.min_margin

    @property
    def flag(self) -> str | None:
        """Why no one would build this candidate (:func:`kickback.studies.designs.impractical`)."""
        return impractical(self.option)

    @property
    def passes(self) -> bool:
        """Every check passes (before the minimum margin)."""
        return self.figures.get("error") is None and bool(self.figures.get("pass"))

    @property
    def ok(self) -> bool:
        """Every check passes and the switch voltage keeps at least ``min_margin`` under its
        derated limit."""
        m = self.margin
        return self.passes and m is not None and m >= self.min_margin and self.flag is None

    @property
    def release(self) -> float | None:
        f = self.figures
        return f.get("release_s") if f.get("release_s") is not None else f.get("to_zero_s")

    @property
    def margin(self) -> float | None:
        pk = self.figures.get("peak_voltage_V")
        return None if pk is None else (self.v_allow - pk) / self.v_allow

    @property
    def parts(self) -> int:
        return sum(len(c.elements) for c in self.option.clamps)

    @property
    def why_not(self) -> str:
        f = self.figures
        if f.get("error"):
            return f["error"]
        if self.flag is not None:
            return f"not offered: {self.flag}"
        if not self.passes:
            return ", ".join(f.get("failing_checks", []))
        return (f"switch-voltage margin {100 * (self.margin or 0.0):.1f} % below checks.min_margin "
                f"{100 * self.min_margin:g} %")

    def to_dict(self) -> dict:
        return {"family": self.family, "name": self.option.name, "value": self.value, "unit": self.unit,
                "parts": self.parts, "margin": self.margin, "release_or_decay_s": self.release,
                "pass": self.ok, "why_not": None if self.ok else self.why_not, "engine": self.engine} | {
                    k: self.figures.get(k) for k in ("peak_voltage_V", "clamp_energy_J", "to_zero_s", "release_s")}


#: release (or decay) times closer than this fraction count as equal merit, and the larger
#: switch-voltage margin ranks first among them (1 %: below what a bench measurement of a release
#: time resolves — common practice, no source)
RELEASE_TIE = 0.01


def _rank_key(c: Candidate):
    return (c.release if c.release is not None else float("inf"), -(c.margin or 0.0), c.parts)


def rank(candidates) -> list:
    """Feasible candidates best first: fastest release; among releases within :data:`RELEASE_TIE`
    of the fastest of their group, the larger switch-voltage margin, then the fewest parts."""
    by_release = sorted(candidates, key=_rank_key)
    out, group = [], []
    for c in by_release:
        if group and not (c.release is not None and group[0].release is not None
                          and c.release <= group[0].release * (1.0 + RELEASE_TIE)):
            out += sorted(group, key=lambda g: (-(g.margin or 0.0), g.parts))
            group = []
        group.append(c)
    return out + sorted(group, key=lambda g: (-(g.margin or 0.0), g.parts))


def _near_a_limit(pts, k: int, band: float) -> bool:
    if pts.errors[k] is not None:
        return False
    for c in pts.checks.values():
        if c.applies[k] and np.isfinite(c.margin[k]) and abs(c.margin[k]) <= band:
            return True
    return False


@dataclass(frozen=True)
class Evaluation:
    """Every candidate, and what ran: the engine picked for the case ("batch" or "detailed"; each
    candidate's ``engine`` says which gave its figures), fits, note, and the candidates near a
    limit confirmed by the detailed engine."""

    candidates: list
    engine: str
    fits: tuple
    note: str
    confirmed: tuple


#: a family with fewer candidates than this runs on the detailed engine: a batch costs about as
#: much as a few detailed runs however few variants it holds (measured by benchmarks/bench_studies.py)
MIN_BATCH = 3


def _family_points(cases: list, engine: str, workers: int):
    """One family's candidates (same topology) through :func:`kickback.studies.points.evaluate_cases`;
    a family smaller than :data:`MIN_BATCH` on the detailed engine when the choice is automatic."""
    from kickback.studies.points import evaluate_cases

    if engine == "auto" and len(cases) < MIN_BATCH:
        pts = evaluate_cases(cases, engine="auto", workers=1)
        if pts.engine == "batch":
            pts = evaluate_cases(cases, engine="detailed", workers=1)
            why = (f"a family of fewer than {MIN_BATCH} candidates ran on the detailed engine (a batch costs "
                   "about as much as a few detailed runs)")
            pts = replace(pts, note="; ".join(x for x in (pts.note, why) if x))
        return pts
    return evaluate_cases(cases, engine=engine, workers=workers)


def _family_job(args):
    cases, engine = args
    return _family_points(cases, engine, 1)


def evaluate(case: Case, *, workers: int = 1, progress=None, engine: str = "auto") -> Evaluation:
    """Every candidate of every family, simulated (one batch per family, the families shared out
    over ``workers`` processes; see the module docstring)."""
    from kickback.studies.points import pick_engine

    picked, _ = pick_engine(case, engine)  # raises for engine="batch" on a case the batch engine does not cover
    v_allow = allowed_voltage(case)
    fams = [(fam, lst) for fam, lst in family_candidates(case).items() if lst]
    jobs = [([replace(case, clamps=opt.clamps, options=()) for _, _, opt in lst], engine) for _, lst in fams]
    if (workers > 1 or parallel.current() is not None) and len(jobs) > 1:
        # one task per family, the largest first, so that the workers finish together
        order = sorted(range(len(jobs)), key=lambda j: -len(jobs[j][0]))
        found = parallel.map_ordered(_family_job, [jobs[j] for j in order], workers=workers, group=1)
        results = [found[order.index(j)] for j in range(len(jobs))]
    else:
        results = [_family_points(cs, eng, workers) for cs, eng in jobs]
    out, near, fits, notes = [], [], [], []
    done = 0
    for (fam, lst), pts in zip(fams, results, strict=True):
        ran = pts.ran_on()
        fits += [f for f in pts.fits if f not in fits]
        if pts.note and pts.note not in notes:
            notes.append(pts.note)
        band = CONFIRM_FIT if pts.fits else CONFIRM_EXACT
        for k, (val, unit, opt) in enumerate(lst):
            if ran[k] == "batch" and _near_a_limit(pts, k, band):
                near.append(len(out))
            out.append(Candidate(fam, val, unit, opt, pts.point(k), v_allow, ran[k], case.checks.min_margin))
        done += len(lst)
        if progress:
            progress(done)
    if near:
        figs = map_points(point_figures, [replace(case, clamps=out[j].option.clamps, options=()) for j in near],
                          workers=workers)
        for j, f in zip(near, figs, strict=True):
            out[j] = replace(out[j], figures=f, engine="detailed")
    return Evaluation(out, picked, tuple(fits), "; ".join(notes), tuple(out[j].option.name for j in near))


@dataclass(frozen=True)
class Choice:
    case: Case
    ranked: tuple[Candidate, ...]  # feasible, best first
    rejected: tuple[Candidate, ...]
    top: tuple  # detailed-engine Results of the first few ranked choices
    engine: str = "detailed"  # the engine picked to screen the candidates (each candidate's engine says which ran it)
    fits: tuple = ()  # piecewise-linear fits the batch engine used
    engine_note: str = ""  # why the detailed engine screened them where the batch engine would have
    confirmed: tuple = ()  # candidates near a limit judged on the detailed engine's figures
    demoted: tuple = ()  # screened as feasible, failing when confirmed by the detailed engine
    asked: str = "auto"  # the --engine given: auto, batch or detailed

    @property
    def engines(self) -> dict:
        """Candidates per engine whose figures judged them, e.g. ``{"batch": 40, "detailed": 6}``."""
        from kickback.studies.pointtable import engine_counts

        return engine_counts(c.engine for c in self.ranked + self.rejected)

    def to_dict(self) -> dict:
        return {"title": self.case.title, "v_allow_V": allowed_voltage(self.case),
                "min_margin": self.case.checks.min_margin, "engine": self.asked, "engines": self.engines,
                "fits": list(self.fits), "engine_note": self.engine_note or None,
                "confirmed_by_detailed": list(self.confirmed), "demoted_by_detailed": list(self.demoted),
                "ranked": [c.to_dict() for c in self.ranked], "rejected": [c.to_dict() for c in self.rejected],
                "top": [r.to_dict() for r in self.top]}


def choose(case: Case, *, workers: int = 1, n_top: int = 3, progress=None, engine: str = "auto",
           executor=None) -> Choice:
    """Feasible clamp choices ranked: fastest release (or decay to zero) first — releases within
    :data:`RELEASE_TIE` count as equal and the larger switch-voltage margin wins — then the fewest
    parts; the others with the checks they fail. A choice must keep ``checks.min_margin`` of
    switch-voltage margin under the derated limit.

    The first ``n_top`` choices are simulated again with the detailed engine and returned whole;
    a choice that fails there is rejected with its reason and the next one is taken.
    """
    from kickback.simulation import simulate

    with parallel.using(executor):
        ev = evaluate(case, workers=workers, progress=progress, engine=engine)
    ranked = rank(c for c in ev.candidates if c.ok)
    rejected = [c for c in ev.candidates if not c.ok]
    top, demoted = [], []
    k = 0
    while len(top) < n_top and k < len(ranked):
        c = ranked[k]
        r = simulate(replace(case, clamps=c.option.clamps, options=()))
        if replace(c, figures=result_figures(r), engine="detailed").ok:
            top.append(r)
            k += 1
            continue
        rejected.append(replace(c, figures=result_figures(r), engine="detailed"))
        demoted.append(c.option.name)
        del ranked[k]
    return Choice(case, tuple(ranked), tuple(rejected), tuple(top), ev.engine, ev.fits, ev.note, ev.confirmed,
                  tuple(demoted), engine)
