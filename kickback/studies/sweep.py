"""Sweeps: any numeric case value (one or two of them) over a range, every point simulated."""

from __future__ import annotations

import itertools
import re
from dataclasses import dataclass

import numpy as np

from kickback.case import Case
from kickback.casevary import check_ranges, resolve
from kickback.errors import CaseError
from kickback.keypath import unit_of
from kickback.studies.points import evaluate
from kickback.studies.pointtable import engine_counts

#: figures reported per point: column name, unit
COLUMNS = (("peak_voltage_V", "V"), ("clamp_energy_J", "J"), ("avalanche_energy_J", "J"),
           ("to_10_percent_s", "s"), ("to_zero_s", "s"), ("release_s", "s"))
_SPEC = re.compile(r"(?P<key>[^=]+)=(?P<lo>[^:]+):(?P<hi>[^:]+)(?::(?P<n>\d+))?$")


@dataclass(frozen=True)
class Axis:
    """One swept value: key path, the values [SI], unit symbol, logarithmic spacing."""

    path: str
    values: np.ndarray
    unit: str
    log: bool = False


def parse_vary(spec: str, log: bool = False, default_n: int = 11, case=None) -> Axis:
    """Read ``KEY=FROM:TO[:N]``; FROM and TO as quantities ("12 V") or plain SI numbers.

    With ``case`` the key must be one this case can vary (a mistyped key gets a "did you mean"
    with the closest such path).

    Raises
    ------
    CaseError — with key "--vary" and what was expected.
    """
    from kickback.units import parse_quantity

    m = _SPEC.fullmatch(spec.strip())
    if m is None:
        raise CaseError(f"cannot read {spec!r} (expected KEY=FROM:TO[:N], e.g. "
                        "clamp[0].element[1].voltage=12V:36V:13)", key="--vary")
    key = m["key"].strip()
    unit = resolve(case, key) if case is not None else unit_of(key)
    try:
        lo, hi = (parse_quantity(_number_or_text(m[x]), unit or "1", key=key) if unit else float(m[x])
                  for x in ("lo", "hi"))
    except ValueError as err:
        raise CaseError(str(err), key="--vary") from None
    n = int(m["n"]) if m["n"] else default_n
    if n < 2 or n > 100_000:
        raise CaseError(f"N = {n} points (expected 2 to 100000)", key="--vary")
    if log and (lo <= 0 or hi <= 0):
        raise CaseError(f"{key}: FROM and TO must be positive for --log (got {lo:g} and {hi:g})", key="--vary")
    values = np.geomspace(lo, hi, n) if log else np.linspace(lo, hi, n)
    return Axis(key, values, unit, log)


def _number_or_text(text: str):
    text = text.strip()
    try:
        return float(text)
    except ValueError:
        return text


@dataclass(frozen=True)
class SweepResult:
    """Figures at every point of the sweep grid (first axis varies slowest).

    ``engine`` is the engine picked for the case ("batch" or "detailed"), ``asked`` the
    ``--engine`` given ("auto", "batch" or "detailed") and ``ran`` per point the engine whose
    figures it holds (a point the batch engine could not simulate, or whose result failed its
    audit, is run on the detailed engine); ``fits`` the piecewise-linear fits of nonlinear laws
    the batch engine used (empty: exact models); ``engine_note`` why the detailed engine ran where
    the batch engine would have ("" otherwise), and how many points it ran.
    """

    case: Case
    axes: tuple[Axis, ...]
    points: np.ndarray  # (n_points, n_axes) [SI]
    figures: dict  # column → list (None where a time does not occur)
    passed: np.ndarray  # bool per point
    failing: list  # list of failing check names per point
    errors: list  # None or the message why a point could not be simulated
    engine: str
    fits: tuple = ()
    engine_note: str = ""
    asked: str = "auto"
    ran: tuple = ()

    def engine_of(self, k: int) -> str:
        """The engine whose figures point k holds."""
        return self.ran[k] if self.ran else self.engine

    @property
    def engines(self) -> dict:
        """Points per engine, e.g. ``{"batch": 20, "detailed": 1}``."""
        return engine_counts(self.engine_of(k) for k in range(len(self.points)))

    def rows(self) -> list[dict]:
        out = []
        for k in range(len(self.points)):
            row = {ax.path: float(self.points[k, j]) for j, ax in enumerate(self.axes)}
            row |= {c: self.figures[c][k] for c, _ in COLUMNS}
            # a point that could not be simulated (or failed its audit twice) has no verdict
            row |= {"pass": None if self.errors[k] is not None else bool(self.passed[k]),
                    "failing_checks": self.failing[k], "error": self.errors[k], "engine": self.engine_of(k)}
            out.append(row)
        return out

    def to_dict(self) -> dict:
        return {"title": self.case.title, "engine": self.asked, "engines": self.engines, "fits": list(self.fits),
                "engine_note": self.engine_note or None,
                "axes": [{"key": a.path, "unit": a.unit, "log": a.log, "values": a.values.tolist()}
                         for a in self.axes], "points": self.rows()}


def run_sweep(case: Case, axes: tuple[Axis, ...], *, workers: int = 1, progress=None,
              engine: str = "auto", executor=None) -> SweepResult:
    """Simulate every grid point of ``axes`` (one or two).

    Parameters
    ----------
    case : Case
    axes : tuple of Axis — one or two
    workers : int — worker processes for the detailed engine (1: in this process)
    progress : callable(n_done) or None — called as points finish
    engine : str — "auto" (the batch engine unless the case has a feature it does not cover,
        then the detailed engine), "batch" or "detailed"
    executor : concurrent.futures.Executor, Dask Client or None — runs the points (None: the
        persistent local pool, :mod:`kickback.parallel`); the numbers do not depend on it

    Returns
    -------
    SweepResult — a point that cannot be simulated carries its message; the others come back.

    Raises
    ------
    CaseError — not one or two axes, or a key path the case does not have
    SolverError — ``engine="batch"`` for a case the batch engine does not cover
    """
    if not 1 <= len(axes) <= 2:
        raise CaseError(f"{len(axes)} swept values (expected one or two --vary)", key="--vary")
    ranges = {}
    for ax in axes:
        path = ".".join(p.strip() for p in ax.path.split("."))
        if path in ranges:
            raise CaseError(f"{ax.path} is swept twice (expected two different keys)", key="--vary")
        try:
            resolve(case, path)  # a key the case file accepts, and that applies to this case
        except CaseError as err:
            raise CaseError(f"{err.key}: {err.message}", source=case.source, key="--vary") from None
        ranges[path] = (float(np.min(ax.values)), float(np.max(ax.values)))
    # every swept value passes the case file's own rules (the corners of the grid bound them all)
    check_ranges(case, ranges, "--vary")
    points = np.array(list(itertools.product(*(ax.values for ax in axes))), dtype=float)
    variations: dict = {}
    for j, ax in enumerate(axes):
        path = ".".join(p.strip() for p in ax.path.split("."))
        if path in variations:
            raise CaseError(f"{ax.path} is swept twice (expected two different keys)", key="--vary")
        variations[path] = points[:, j]
    from kickback.parallel import using

    with using(executor):
        pts = evaluate(case, variations, engine=engine, workers=workers, progress=progress)
    figs = {c: [None if np.isnan(x) else float(x) for x in pts.figures[c]] for c, _ in COLUMNS}
    note = pts.note
    if pts.retried:
        note = (note + "; " if note else "") + (f"{pts.retried} point(s) the batch engine could not simulate were "
                                                "run by the detailed engine")
    return SweepResult(case, tuple(axes), points, figs, pts.passed.copy(), [pts.failing(k) for k in range(pts.n)],
                       list(pts.errors), pts.engine, pts.fits, note, engine, tuple(pts.ran_on()))
