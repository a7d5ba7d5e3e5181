"""The tolerance study's result (:class:`ToleranceResult`), its JSON rows and the yield's
Clopper–Pearson interval; :func:`kickback.studies.tolerance.run_tolerance` fills it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kickback.case import Case

#: figures followed by the study, with their unit and whether a larger value is worse
FIGURES = (("peak_voltage_V", "V", True), ("clamp_energy_J", "J", True), ("avalanche_energy_J", "J", True),
           ("to_zero_s", "s", True), ("release_s", "s", True))
PERCENTILES = (0.0, 0.1, 1.0, 50.0, 99.0, 99.9, 100.0)


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
    """A tolerance study's numbers.

    A study of at most :data:`kickback.studies.tolerance.GATHER` samples keeps every sample
    (``samples``, ``figures``, ``passed``, ``errors``) and its percentiles are numpy's, exact; a
    larger one keeps only the merged per-chunk summaries (those four are None) and its
    percentiles are the midpoints of ``brackets`` (:mod:`kickback.studies.tolstats`). The yield,
    the worst samples and the histograms come from the merged counts either way.
    """

    case: Case
    names: tuple[str, ...]
    samples: np.ndarray | None  # (n, k) [SI]; None when not gathered
    figures: dict | None  # figure → array (NaN where a time does not occur); None when not gathered
    passed: np.ndarray | None  # None when not gathered
    errors: list | None  # None when not gathered
    yield_ci: tuple[float, float]
    percentiles: dict  # figure → {percentile: value}
    worst_per_check: dict  # check → {"margin", "value", "limit", "params"}
    corners: dict  # figure → {"max", "params"} over all band corners (None when too many)
    search: dict  # figure → {"max", "params", "corner_max", "interior"}
    sensitivity: dict  # figure → [(name, swing)] sorted by |swing|
    seed: int
    figure_list: tuple = FIGURES
    engine: str = "detailed"  # the engine picked to run the samples ("batch" or "detailed")
    fits: tuple = ()  # piecewise-linear fits of nonlinear laws the batch engine used
    engine_note: str = ""  # why the detailed engine ran where the batch engine would have
    recheck: dict | None = None  # batch samples run again by the detailed engine (see recheck())
    asked: str = "auto"  # the --engine given: auto, batch or detailed
    engines: dict | None = None  # samples per engine whose figures they hold (None: all on ``engine``)
    n: int = 0  # samples
    n_passed: int = 0  # samples that pass every check
    n_errors: int = 0  # samples that could not be simulated (they fail)
    summaries: dict | None = None  # figure → tolstats.Summary merged from the chunks'
    brackets: dict | None = None  # figure → {percentile: (low, high)}; None: percentiles exact

    @property
    def yield_(self) -> float:
        return self.n_passed / self.n if self.n else float("nan")

    @property
    def exact(self) -> bool:
        """True when the percentiles are numpy's on the gathered samples."""
        return self.brackets is None

    def to_dict(self) -> dict:
        def clean(x):
            return None if x is None or (isinstance(x, float) and np.isnan(x)) else x

        units = {f: u for f, u, _ in self.figure_list}
        brackets = None if self.brackets is None else \
            {f: {str(p): (None if v is None else list(v)) for p, v in d.items()} for f, d in self.brackets.items()}
        return {"title": self.case.title, "seed": self.seed, "samples": self.n,
                "engine": self.asked, "engines": self.engines or {self.engine: self.n},
                "fits": list(self.fits), "engine_note": self.engine_note or None,
                "parameters": [parameter_dict(t) for t in self.case.tolerances],
                "yield": self.yield_, "yield_ci95": list(self.yield_ci),
                "percentiles": {f: {str(p): clean(v) for p, v in d.items()} for f, d in self.percentiles.items()},
                "percentiles_from": PERCENTILES_FROM[self.exact], "percentile_brackets": brackets,
                "worst_per_check": self.worst_per_check, "corners": self.corners, "worst_case_search": self.search,
                "sensitivity": {f: [{"parameter": n, "swing": s, "unit": units.get(f, "")} for n, s in v]
                                for f, v in self.sensitivity.items()},
                "failed_samples": self.n_errors,
                "detailed_recheck": self.recheck}


#: how the percentiles were found, as the JSON says it (key: exact or not)
PERCENTILES_FROM = {True: "every sample (numpy.percentile, linear)",
                    False: "merged per-chunk histograms: the midpoint of a bracket at most 0.025 % wide holding "
                           "numpy.percentile of the samples (min and max exact)"}


def parameter_unit(path: str) -> str:
    """SI symbol of a toleranced value: the case key's unit; K for the coil temperature."""
    from kickback.keypath import unit_of

    return "K" if path == "coil_temperature" else unit_of(path)


def parameter_dict(t) -> dict:
    """One [tolerance] entry as the JSON gives it: key, unit, band ends [SI], distribution (and
    the sigmas of a normal one, the reference temperature of the coil's)."""
    out = {"key": t.path, "unit": parameter_unit(t.path), "low": t.low, "high": t.high,
           "distribution": t.distribution}
    if t.distribution == "normal":
        out["sigmas"] = t.k_sigma
    if t.reference is not None:
        out["reference_K"] = t.reference
    return out


def params_row(names, row) -> dict:
    return {n: float(x) for n, x in zip(names, row, strict=True)}


def json_float(x):
    return None if x is None or not np.isfinite(x) else float(x)
