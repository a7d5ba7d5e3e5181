"""Design check of many cases at once: find the case files, run each (through the one executor,
:mod:`kickback.parallel`) and say per case pass, fail, invalid, unsolved or audit-failed.

Which files are cases: a file named on its own is always taken, and one that is not a valid case
is reported *invalid*. A file found in a folder (searched recursively for ``*.toml``) or matched
by a glob is taken when it has a top-level ``[coil]`` table or does not parse as TOML (a broken
case is reported, not skipped); any other TOML file (``pyproject.toml``, a board's own settings)
is listed as skipped, "not a case (no [coil] table)".
"""

from __future__ import annotations

import glob
import time
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from kickback import parallel

__all__ = ["CaseCheck", "check_cases", "find_cases"]

#: what a case came to, in order of severity
STATUSES = ("pass", "fail", "invalid", "unsolved", "audit")


@dataclass(frozen=True)
class Found:
    """The case files found, in the order given (a folder's files sorted), and what was skipped."""

    cases: tuple[str, ...]
    skipped: tuple[tuple[str, str], ...] = ()  # (path, why)
    missing: tuple[str, ...] = ()  # arguments that named nothing


def _is_case(path: Path) -> bool:
    try:
        with open(path, "rb") as fh:
            data = tomllib.load(fh)
    except (tomllib.TOMLDecodeError, UnicodeDecodeError):
        return True  # a broken case is reported, not skipped
    except OSError:
        return True  # unreadable: the loader says why
    return isinstance(data.get("coil"), dict)


def find_cases(paths) -> Found:
    """The case files named by ``paths`` (files, folders searched recursively for ``*.toml``,
    globs), each once."""
    cases, skipped, missing, seen = [], [], [], set()

    def take(p: Path, filtered: bool) -> None:
        key = str(p.resolve())
        if key in seen:
            return
        seen.add(key)
        if filtered and not _is_case(p):
            skipped.append((str(p), "not a case (no [coil] table)"))
            return
        cases.append(str(p))

    for arg in paths:
        p = Path(arg)
        if p.is_dir():
            for f in sorted(p.rglob("*.toml")):
                if f.is_file():
                    take(f, True)
        elif p.is_file():
            take(p, False)
        elif glob.has_magic(str(arg)):
            hits = sorted(glob.glob(str(arg), recursive=True))
            files = [Path(h) for h in hits if Path(h).is_file()]
            for f in files:
                take(f, True)
            for d in (Path(h) for h in hits if Path(h).is_dir()):
                for f in sorted(d.rglob("*.toml")):
                    take(f, True)
            if not hits:
                missing.append(str(arg))
        else:
            missing.append(str(arg))
    return Found(tuple(cases), tuple(skipped), tuple(missing))


@dataclass(frozen=True)
class CaseCheck:
    """What one case came to.

    Attributes
    ----------
    path : str — the case file
    status : str — one of :data:`STATUSES`
    message : str — for invalid, unsolved and audit: the one-line reason
    title : str
    engine : str or None — the engine that simulated it
    checks : tuple of dict — part, quantity, value, limit, margin, pass, unit, note [SI]
    peak_voltage_V, release_s : float or None — the switch-node peak [V], the release time [s]
    seconds : float — wall time of this case [s]
    tolerance : dict or None — with ``--tolerance``: samples, yield, yield_ci95, engine, or
        ``{"none": why}`` for a case without a [tolerance] section
    """

    path: str
    status: str
    message: str = ""
    title: str = ""
    engine: str | None = None
    checks: tuple = ()
    peak_voltage_V: float | None = None
    release_s: float | None = None
    seconds: float = 0.0
    tolerance: dict | None = field(default=None)

    @property
    def verdict(self) -> str:
        return {"pass": "PASS", "fail": "FAIL", "invalid": "INVALID", "unsolved": "UNSOLVED",
                "audit": "NO VERDICT"}[self.status]

    def smallest(self) -> dict | None:
        """The check with the smallest margin, among the checks that have one; a failing check
        without a margin (a clamp conducting while the switch is on) comes first. A row without a
        margin that passes (the switch's avalanche energy of 0 J with no rating) says nothing about
        how close the design is to a limit and is skipped. None when no check has a margin."""
        failing = [c for c in self.checks if c["margin"] is None and not c["pass"]]
        if failing:
            return failing[0]
        return min((c for c in self.checks if c["margin"] is not None), key=lambda c: c["margin"], default=None)

    def failing(self) -> list[dict]:
        return [c for c in self.checks if not c["pass"]]

    def to_dict(self) -> dict:
        low = self.smallest()
        return {"case": self.path, "title": self.title, "status": self.status,
                "pass": {"pass": True, "fail": False}.get(self.status), "message": self.message or None,
                "engine": self.engine, "peak_voltage_V": self.peak_voltage_V, "release_s": self.release_s,
                "smallest_margin": None if low is None else {"check": f"{low['part']} {low['quantity']}",
                                                             "margin": low["margin"]},
                "checks": list(self.checks), "seconds": self.seconds, "tolerance": self.tolerance}


def _check(c) -> dict:
    return {"part": c.part, "quantity": c.quantity, "value": c.value, "limit": c.limit, "margin": c.margin,
            "pass": bool(c.passed), "unit": c.unit, "note": c.note}


def check_one(job: tuple) -> CaseCheck:
    """Load, simulate, audit and judge one case file (a task of the executor); ``job`` is
    ``(path, tolerance_samples, seed, workers)``. Never raises for a bad case: its status says it."""
    from kickback.caseio import load_case
    from kickback.cliguard import located
    from kickback.errors import CaseError, KickbackError
    from kickback.simulation import simulate

    path, n_tol, seed, workers = job
    start = time.perf_counter()
    try:
        case = load_case(Path(path))
    except (CaseError, KickbackError) as err:
        return CaseCheck(path, "invalid", located(err, path), seconds=time.perf_counter() - start)
    except OSError as err:
        return CaseCheck(path, "invalid", f"{path}: {err.strerror or err} (expected a readable case file)")
    try:
        result = simulate(case)
    except KickbackError as err:
        return CaseCheck(path, "unsolved", located(err, path), case.title, seconds=time.perf_counter() - start)
    except (ArithmeticError, ValueError, RuntimeError) as err:
        return CaseCheck(path, "unsolved", f"{path}: the case could not be solved: internal error "
                         f"({type(err).__name__}: {err})", case.title, seconds=time.perf_counter() - start)
    f = result.figures
    base = dict(title=case.title, engine=result.waveforms.engine, checks=tuple(_check(c) for c in result.checks),
                peak_voltage_V=f.peak_voltage_V, release_s=f.release_s)
    if not result.audit.passed:
        return CaseCheck(path, "audit", f"{path}: the result failed its audit, no verdict given: "
                         + "; ".join(result.audit.findings), seconds=time.perf_counter() - start, **base)
    tol = _tolerance(case, n_tol, seed, workers) if n_tol else None
    return CaseCheck(path, "pass" if result.passed else "fail", "", seconds=time.perf_counter() - start,
                     tolerance=tol, **base)


def _tolerance(case, n: int, seed: int, workers: int = 1) -> dict:
    """The case's own [tolerance] study with ``n`` samples: its yield and 95 % interval (on
    ``workers`` processes when run outside a task, e.g. one case checked alone)."""
    from kickback.errors import KickbackError
    from kickback.studies.tolerance import run_tolerance

    if not case.tolerances:
        return {"none": "the case has no [tolerance] section"}
    try:
        tr = run_tolerance(case, n, seed, workers=workers, recheck=0)
    except KickbackError as err:
        return {"none": f"the tolerance study could not run: {err}"}
    return {"samples": n, "seed": seed, "yield": tr.yield_, "yield_ci95": list(tr.yield_ci), "engine": tr.asked,
            "engines": tr.engines,
            "failed_samples": tr.n - tr.n_passed}


def check_cases(paths, *, tolerance: int = 0, seed: int = 1, workers: int = 1, progress=None,
                executor=None) -> list[CaseCheck]:
    """Every case file of ``paths`` (see :func:`find_cases`) checked, in order.

    Parameters
    ----------
    paths : list of str — files, folders, globs (already resolved by :func:`find_cases`)
    tolerance : int — samples of each case's own [tolerance] study (0: none)
    seed : int — random state of the tolerance studies
    workers : int — local processes when no executor is given
    progress : callable(n_done) or None
    executor : concurrent.futures.Executor, Dask Client or None — see :mod:`kickback.parallel`
    """
    jobs = [(p, tolerance, seed, workers) for p in paths]
    with parallel.using(executor):
        return parallel.map_ordered(check_one, jobs, workers=workers, progress=progress,
                                    group=1 if tolerance else None)
