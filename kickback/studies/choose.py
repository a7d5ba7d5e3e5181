"""Choosing a clamp: families × standard values against the case's constraints, ranked."""

from __future__ import annotations

from dataclasses import dataclass, replace

from kickback.case import Case, Option
from kickback.studies.designs import allowed_voltage, family_candidates
from kickback.studies.pool import map_points
from kickback.studies.sweep import point_figures


@dataclass(frozen=True)
class Candidate:
    family: str
    value: float  # the sizing value [SI]; 0 for a family with a single member
    unit: str
    option: Option
    figures: dict  # as kickback.studies.sweep.point_figures
    v_allow: float

    @property
    def ok(self) -> bool:
        return self.figures.get("error") is None and bool(self.figures.get("pass"))

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
        return f["error"] if f.get("error") else ", ".join(f.get("failing_checks", []))

    def to_dict(self) -> dict:
        return {"family": self.family, "name": self.option.name, "value": self.value, "unit": self.unit,
                "parts": self.parts, "margin": self.margin, "release_or_decay_s": self.release,
                "pass": self.ok, "why_not": None if self.ok else self.why_not} | {
                    k: self.figures.get(k) for k in ("peak_voltage_V", "clamp_energy_J", "to_zero_s", "release_s")}


def _rank_key(c: Candidate):
    return (c.release if c.release is not None else float("inf"), -(c.margin or 0.0), c.parts)


def evaluate(case: Case, *, workers: int = 1, progress=None) -> list[Candidate]:
    """Every candidate of every family, simulated (detailed engine, worker processes)."""
    fams = family_candidates(case)
    v_allow = allowed_voltage(case)
    items = [(fam, val, unit, opt) for fam, lst in fams.items() for val, unit, opt in lst]
    variants = [replace(case, clamps=opt.clamps, options=()) for _, _, _, opt in items]
    figs = map_points(point_figures, variants, workers=workers, progress=progress, chunksize=4)
    return [Candidate(fam, val, unit, opt, f, v_allow) for (fam, val, unit, opt), f in zip(items, figs, strict=True)]


@dataclass(frozen=True)
class Choice:
    case: Case
    ranked: tuple[Candidate, ...]  # feasible, best first
    rejected: tuple[Candidate, ...]
    top: tuple  # detailed-engine Results of the first few ranked choices

    def to_dict(self) -> dict:
        return {"title": self.case.title, "v_allow_V": allowed_voltage(self.case),
                "ranked": [c.to_dict() for c in self.ranked], "rejected": [c.to_dict() for c in self.rejected],
                "top": [r.to_dict() for r in self.top]}


def choose(case: Case, *, workers: int = 1, n_top: int = 3, progress=None) -> Choice:
    """Feasible clamp choices ranked: fastest release (or decay to zero) first, then the switch
    voltage margin, then the fewest parts; the others with the checks they fail.

    The first ``n_top`` choices are simulated again with the detailed engine and returned whole.
    """
    from kickback.simulation import simulate

    cands = evaluate(case, workers=workers, progress=progress)
    ranked = sorted((c for c in cands if c.ok), key=_rank_key)
    rejected = [c for c in cands if not c.ok]
    top = tuple(simulate(replace(case, clamps=c.option.clamps, options=())) for c in ranked[:n_top])
    return Choice(case, tuple(ranked), tuple(rejected), top)
