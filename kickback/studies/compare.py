"""Compare clamp options on one coil and switch: the case's own clamps against alternatives."""

from __future__ import annotations

from dataclasses import dataclass, replace

from kickback.case import Case, Option
from kickback.errors import KickbackError
from kickback.result import Result
from kickback.simulation import simulate
from kickback.studies.designs import builtin_options, derated_rating, impractical


@dataclass(frozen=True)
class CompareRow:
    """One clamp option's outcome; ``result`` is None when it could not be simulated (see ``error``)."""

    name: str
    own: bool  # the case's own clamp set
    result: Result | None
    error: str | None = None
    flag: str | None = None  # why no one would build this option (it is then not simulated)
    v_allow: float | None = None  # the derated switch voltage [V] (None: the switch has no rating)
    min_margin: float = 0.0  # the case's checks.min_margin, as choose applies it

    @property
    def margin(self) -> float | None:
        """Switch-voltage margin under the derated rating, (V_allow − peak)/V_allow (as choose ranks it)."""
        if self.result is None or self.v_allow is None:
            return None
        return (self.v_allow - self.result.figures.peak_voltage_V) / self.v_allow

    @property
    def thin(self) -> bool:
        """Every check passes but the margin is under ``checks.min_margin`` (choose would reject it)."""
        m = self.margin
        return self.result is not None and self.result.passed and m is not None and m < self.min_margin

    @property
    def failing(self) -> list[str]:
        if self.result is None:
            return []
        return [f"{c.part} {c.quantity}" for c in self.result.checks if not c.passed]

    def to_dict(self) -> dict:
        d = {"name": self.name, "own": self.own, "error": self.error, "impractical": self.flag}
        if self.result is None:
            return d | {"pass": False}
        f = self.result.figures
        return d | {
            "peak_voltage_V": f.peak_voltage_V,
            "clamp_energy_J": sum(c.energy_J for c in f.clamps),
            "clamp_peak_current_A": max((c.peak_current_A for c in f.clamps), default=0.0),
            "avalanche_energy_J": f.avalanche_energy_J,
            "to_10_percent_s": f.to_10_percent_s,
            "to_zero_s": f.to_zero_s,
            "release_s": f.release_s,
            "pass": self.result.passed,
            "margin": self.margin,
            "below_min_margin": self.thin,
            "failing_checks": self.failing,
        }


@dataclass(frozen=True)
class Comparison:
    case: Case
    rows: tuple[CompareRow, ...]
    builtin: bool  # options were sized by kickback, not given by the case

    @property
    def own(self) -> CompareRow:
        return next(r for r in self.rows if r.own)

    def to_dict(self) -> dict:
        return {"title": self.case.title, "builtin_options": self.builtin,
                "options": [r.to_dict() for r in self.rows], "pass": bool(self.own.result and self.own.result.passed)}


def options_for(case: Case) -> tuple[tuple[Option, ...], bool]:
    """The alternatives to compare: the case's ``[[option]]`` sets, else the built-in sized set."""
    if case.options:
        return case.options, False
    return builtin_options(case), True


def compare(case: Case, **sim_options) -> Comparison:
    """Simulate the case's own clamps and each alternative with the detailed engine.

    Parameters
    ----------
    case : Case
    sim_options : passed to :func:`kickback.simulation.simulate` (e.g. ``rtol``)

    Returns
    -------
    Comparison — the case's own clamp set first; an option that cannot be simulated carries
    its error message instead of a result; a built-in option no one would build
    (:func:`kickback.studies.designs.impractical`) carries the reason and is not simulated.
    """
    alternatives, builtin = options_for(case)
    own_name = "case: " + (", ".join(c.name for c in case.clamps) if case.clamps else "no clamp")
    rows = [_row(case, own_name, True, sim_options)]
    for opt in alternatives:
        why = impractical(opt) if builtin else None
        if why is not None:
            rows.append(CompareRow(opt.name, False, None, None, why))
            continue
        rows.append(_row(replace(case, clamps=opt.clamps, options=()), opt.name, False, sim_options))
    return Comparison(case, tuple(rows), builtin)


def _row(case: Case, name: str, own: bool, sim_options) -> CompareRow:
    try:
        return CompareRow(name, own, simulate(case, **sim_options), v_allow=derated_rating(case),
                          min_margin=case.checks.min_margin)
    except KickbackError as err:
        msg = getattr(err, "message", None) or str(err)
        return CompareRow(name, own, None, msg)
