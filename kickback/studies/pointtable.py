"""The table of many variants' figures, checks and verdicts that the studies share
(:class:`Points`, one :class:`kickback.ratings.CheckColumn` per rating check), and the words a
study says about it.

:func:`kickback.studies.points.evaluate` fills it from either engine.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: the figures of every variant: name → unit
FIGURES = {"peak_voltage_V": "V", "clamp_energy_J": "J", "avalanche_energy_J": "J", "to_10_percent_s": "s",
           "to_1_percent_s": "s", "to_zero_s": "s", "release_s": "s", "stored_energy_J": "J",
           "energy_balance_error": ""}


@dataclass(frozen=True)
class Points:
    """Figures, checks and verdicts of n variants of one case.

    Attributes
    ----------
    engine : str — "batch" or "detailed": the engine picked for the case (:func:`pick_engine`);
        single variants may have run on the other one, see ``ran``
    figures : dict — name → float array (NaN: the time does not occur, or not simulated);
        the names of :data:`FIGURES` and ``clamp[k].energy_J`` for every clamp
    checks : dict — "part quantity" → :class:`kickback.ratings.CheckColumn` (the rating rules'
        own columns), in the order of :func:`kickback.ratings.rating_checks`
    passed : bool array — simulated and every check passes
    errors : object array — None, or why the variant could not be simulated
    fits : tuple of str — piecewise-linear fits of nonlinear laws the batch engine used
    note : str — why the detailed engine ran where the batch engine was asked for ("" otherwise)
    retried : int — variants the batch engine could not simulate, run again by the detailed one
    findings : object array or None — per variant, the audit findings of the engine that ran it
        (an empty tuple: it passed)
    audit_failed : int — variants whose result failed the audit of the first engine
    audit_solved : int — of those, solved again on ``audit_engine`` with a passing audit
    audit_engine : str — the engine that solved them again ("" when none did)
    ran : object array or None — per variant, the engine whose result it holds ("batch" or
        "detailed"; None: every variant on ``engine``)
    """

    engine: str
    figures: dict
    checks: dict
    passed: np.ndarray
    errors: np.ndarray
    fits: tuple = ()
    note: str = ""
    retried: int = 0
    findings: np.ndarray | None = None
    audit_failed: int = 0
    audit_solved: int = 0
    audit_engine: str = ""
    ran: np.ndarray | None = None

    @property
    def n(self) -> int:
        return int(self.passed.size)

    def ran_on(self) -> np.ndarray:
        """Per variant, the engine whose result it holds ("batch" or "detailed")."""
        if self.ran is None:
            out = np.empty(self.n, dtype=object)
            out[:] = self.engine
            return out
        return self.ran

    def engine_counts(self) -> dict:
        """Variants per engine whose result they hold, e.g. ``{"batch": 19, "detailed": 2}``
        (engines that ran none left out)."""
        return engine_counts(self.ran_on())

    @property
    def audit_note(self) -> str:
        """How many variants failed their audit, how many another engine solved ("" when none)."""
        return audit_note(self.audit_failed, self.audit_solved, self.audit_engine)

    def failing(self, k: int) -> list[str]:
        """Names of the checks variant k fails."""
        return [name for name, c in self.checks.items() if c.applies[k] and not c.passed[k]]

    def point(self, k: int) -> dict:
        """Variant k as :func:`kickback.studies.onepoint.point_figures` gives one point (None for NaN)."""
        if self.errors[k] is not None:
            return {"error": self.errors[k]}
        out = {name: opt(a[k]) for name, a in self.figures.items()}
        out |= {"pass": bool(self.passed[k]), "failing_checks": self.failing(k), "error": None,
                "checks": [(name, opt(c.value[k]), opt(c.limit[k]), opt(c.margin[k]), bool(c.passed[k]))
                           for name, c in self.checks.items() if c.applies[k]]}
        return out


def opt(x):
    """A float, or None for NaN (JSON)."""
    x = float(x)
    return None if np.isnan(x) else x


def engine_counts(ran) -> dict:
    """How many of ``ran`` (engine names, one per variant) ran on each engine: batch first, then
    detailed; an engine that ran none is left out."""
    ran = list(ran)
    return {e: ran.count(e) for e in ("batch", "detailed") if e in ran}


def audit_note(failed: int, solved: int, other: str) -> str:
    """The sentence a study prints about variants that failed their audit ("" when none did)."""
    if not failed:
        return ""
    text = f"{failed} variant(s) failed the audit of their result (kickback.audit)"
    if solved:
        text += f": {solved} solved again on the {other} engine"
    if failed - solved:
        text += f"{',' if solved else ':'} {failed - solved} unsolved (no verdict, counted as failed)"
    return text
