"""Tolerance study: Monte Carlo over the case's [tolerance] bands, corners, worst-case search,
sensitivity and yield against every check."""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from kickback.case import Case
from kickback.errors import CaseError
from kickback.keypath import get_value, set_value
from kickback.models.passive import copper_resistance

#: figures followed by the study, with their unit and whether a larger value is worse
FIGURES = (("peak_voltage_V", "V", True), ("clamp_energy_J", "J", True), ("avalanche_energy_J", "J", True),
           ("to_zero_s", "s", True), ("release_s", "s", True))
PERCENTILES = (0.0, 0.1, 1.0, 50.0, 99.0, 99.9, 100.0)
MAX_CORNER_VALUES = 10  # 2^10 corners at most


def figure_list(case: Case) -> tuple[tuple[str, str, bool], ...]:
    """The figures followed for ``case``: the common ones, and each clamp's energy when there are
    several clamps."""
    extra = tuple((f"clamp[{k}].energy_J", "J", True) for k in range(len(case.clamps))) \
        if len(case.clamps) > 1 else ()
    return FIGURES + extra


def sample(case: Case, n: int, rng: np.random.Generator) -> np.ndarray:
    """``n`` draws of every toleranced value, shape (n, k) [SI]; normal draws are kept inside the
    physical range by redrawing the few that cross zero."""
    cols = []
    for tol in case.tolerances:
        if tol.distribution == "uniform":
            x = rng.uniform(tol.low, tol.high, n)
        else:
            mid, sd = 0.5 * (tol.low + tol.high), 0.5 * (tol.high - tol.low) / tol.k_sigma
            x = rng.normal(mid, sd, n)
            if tol.path != "coil_temperature":
                bad = x <= 0
                while bad.any():
                    x[bad] = rng.normal(mid, sd, int(bad.sum()))
                    bad = x <= 0
        cols.append(x)
    return np.column_stack(cols) if cols else np.zeros((n, 0))


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


def nominal(case: Case) -> np.ndarray:
    out = []
    for tol in case.tolerances:
        out.append(tol.reference if tol.path == "coil_temperature" else get_value(case, tol.path))
    return np.array(out, dtype=float)


def evaluate(case: Case, matrix: np.ndarray, *, workers: int = 1, progress=None) -> list[dict]:
    """Figures of every row of ``matrix`` (detailed engine; worker processes when workers > 1)."""
    from kickback.studies.pool import map_points
    from kickback.studies.sweep import point_figures

    return map_points(point_figures, [apply(case, row) for row in matrix], workers=workers, progress=progress)


def clopper_pearson(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Exact binomial confidence interval of a proportion k/n.

    References
    ----------
    C. J. Clopper and E. S. Pearson, "The use of confidence or fiducial limits illustrated in
    the case of the binomial", Biometrika 26(4), 1934.
    """
    from scipy.stats import beta

    a = 1.0 - confidence
    lo = 0.0 if k == 0 else float(beta.ppf(a / 2, k, n - k + 1))
    hi = 1.0 if k == n else float(beta.ppf(1 - a / 2, k + 1, n - k))
    return lo, hi


@dataclass(frozen=True)
class ToleranceResult:
    case: Case
    names: tuple[str, ...]
    samples: np.ndarray  # (n, k) [SI]
    figures: dict  # figure → array (NaN where a time does not occur)
    passed: np.ndarray
    errors: list
    yield_ci: tuple[float, float]
    percentiles: dict  # figure → {percentile: value}
    worst_per_check: dict  # check → {"margin", "value", "limit", "params"}
    corners: dict  # figure → {"max", "params"} over all band corners (None when too many)
    search: dict  # figure → {"max", "params", "corner_max", "interior"}
    sensitivity: dict  # figure → [(name, swing)] sorted by |swing|
    seed: int
    figure_list: tuple = FIGURES
    engine: str = "detailed"

    @property
    def yield_(self) -> float:
        return float(self.passed.mean()) if self.passed.size else float("nan")

    def to_dict(self) -> dict:
        def clean(x):
            return None if x is None or (isinstance(x, float) and np.isnan(x)) else x

        return {"title": self.case.title, "seed": self.seed, "samples": int(len(self.samples)),
                "engine": self.engine, "parameters": list(self.names),
                "yield": self.yield_, "yield_ci95": list(self.yield_ci),
                "percentiles": {f: {str(p): clean(v) for p, v in d.items()} for f, d in self.percentiles.items()},
                "worst_per_check": self.worst_per_check, "corners": self.corners, "worst_case_search": self.search,
                "sensitivity": {f: [{"parameter": n, "swing": s} for n, s in v] for f, v in self.sensitivity.items()},
                "failed_samples": int(sum(e is not None for e in self.errors))}


def _fig_arrays(rows: list[dict], figures) -> dict:
    return {f: np.array([np.nan if r.get(f) is None else r[f] for r in rows], dtype=float) for f, _, _ in figures}


def _params(names, row) -> dict:
    return {n: float(x) for n, x in zip(names, row, strict=True)}


def run_tolerance(case: Case, n: int, seed: int, *, workers: int = 1, progress=None,
                  search_budget: int = 40) -> ToleranceResult:
    """Monte Carlo with ``n`` samples (seeded), corners, worst-case search and sensitivity."""
    if not case.tolerances:
        raise CaseError("the case has no [tolerance] section (expected at least one toleranced value, "
                        'e.g. [tolerance."coil.inductance"] band = "10 %")', source=case.source, key="tolerance")
    names = tuple(t.path for t in case.tolerances)
    flist = figure_list(case)
    rng = np.random.default_rng(seed)
    matrix = sample(case, n, rng)
    rows = evaluate(case, matrix, workers=workers, progress=progress)
    figs = _fig_arrays(rows, flist)
    passed = np.array([bool(r.get("pass")) and r.get("error") is None for r in rows])
    k = int(passed.sum())
    pct = {f: {p: (float(np.nanpercentile(a, p)) if np.isfinite(a).any() else None) for p in PERCENTILES}
           for f, a in figs.items()}
    worst = {}
    for j, r in enumerate(rows):
        for name, value, limit, margin, _ok in r.get("checks", []):
            m = -np.inf if margin is None else margin
            if name not in worst or m < worst[name]["margin_key"]:
                worst[name] = {"margin_key": m, "margin": margin, "value": value, "limit": limit,
                               "params": _params(names, matrix[j])}
    for w in worst.values():
        w.pop("margin_key")
    lows = np.array([t.low for t in case.tolerances])
    highs = np.array([t.high for t in case.tolerances])
    corners, corner_best = {}, {}
    if len(names) <= MAX_CORNER_VALUES:
        cm = np.array(list(itertools.product(*zip(lows, highs, strict=True))), dtype=float)
        crow = _fig_arrays(evaluate(case, cm, workers=workers), flist)
        for f, a in crow.items():
            if np.isfinite(a).any():
                j = int(np.nanargmax(a))
                corners[f] = {"max": float(a[j]), "min": float(np.nanmin(a)), "params": _params(names, cm[j])}
                corner_best[f] = (float(a[j]), cm[j])
    search = {}
    for f, _, _ in flist:
        a = figs[f]
        if not np.isfinite(a).any() or np.nanmax(a) == np.nanmin(a):
            continue  # absent or constant over the samples (e.g. no avalanche at all)
        j = int(np.nanargmax(a))
        start_val, start = float(a[j]), matrix[j]
        if f in corner_best and corner_best[f][0] > start_val:
            start_val, start = corner_best[f]
        best_val, best_x = _local_search(case, f, np.clip(start, lows, highs), lows, highs, search_budget)
        if best_val < start_val:
            best_val, best_x = start_val, start
        c_max = corner_best.get(f, (None,))[0]
        search[f] = {"max": best_val, "params": _params(names, best_x), "corner_max": c_max,
                     "interior": bool(c_max is not None and best_val > c_max * (1 + 1e-6) + 1e-300)}
    nom = nominal(case)
    sens = {}
    one_at_a_time = []
    for i in range(len(names)):
        lo_row, hi_row = nom.copy(), nom.copy()
        lo_row[i], hi_row[i] = lows[i], highs[i]
        one_at_a_time += [lo_row, hi_row]
    if one_at_a_time:
        oat = _fig_arrays(evaluate(case, np.array(one_at_a_time), workers=workers), flist)
        for f, a in oat.items():
            swings = [(names[i], float(a[2 * i + 1] - a[2 * i])) for i in range(len(names))
                      if np.isfinite(a[2 * i]) and np.isfinite(a[2 * i + 1])]
            sens[f] = sorted(swings, key=lambda s: -abs(s[1]))
    return ToleranceResult(case, names, matrix, figs, passed, [r.get("error") for r in rows],
                           clopper_pearson(k, len(rows)), pct, worst, corners, search, sens, seed, flist)


def _local_search(case, figure, x0, lows, highs, budget):
    """Bounded derivative-free search for the maximum of one figure, from ``x0``."""
    from scipy.optimize import minimize

    from kickback.studies.sweep import point_figures

    span = np.where(highs > lows, highs - lows, 1.0)
    seen = {}

    def f(u):
        x = lows + np.clip(u, 0.0, 1.0) * span
        key = tuple(np.round(u, 12))
        if key not in seen:
            r = point_figures(apply(case, x))
            v = r.get(figure)
            seen[key] = (-np.inf if v is None else float(v), x)
        return -seen[key][0]

    u0 = (x0 - lows) / span
    minimize(f, u0, method="Powell", bounds=[(0.0, 1.0)] * len(u0),
             options={"maxfev": budget, "xtol": 1e-4, "ftol": 1e-9})
    best = max(seen.values(), key=lambda t: t[0])
    return best[0], best[1]
