"""Many variants of one case at once: the batch engine's figures and checks as columns.

``simulate_many(case, {"coil.inductance": [...], "clamp[0].element[1].voltage": [...]})`` runs
every variant (variant k takes the k-th value of every key, the case's own value for the rest —
the lists are paired, not crossed; :func:`grid` gives every combination)
with the exact piecewise-linear batch engine, in chunks, and returns a :class:`ManyResult`:
one array per figure (names like the result contract: ``switch.peak_voltage_V``,
``coil.decay_s.to_zero``, ``clamps[0].energy_J``), one column per rating check, the verdict of
each variant, and a status saying why a variant could not be simulated (the others still come
back). Nonlinear laws (Shockley diode, varistor) enter as a stated piecewise-linear fit, listed
in ``fits``; :func:`fit_effect` measures what the fit changes on the case itself.

References
----------
DESIGN.md §6 (the result contract); :mod:`kickback.engine.batch` (the engine).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np

from kickback.case import Case
from kickback.engine.batch_params import value_getter
from kickback.figures_batch import CHUNK, normalize_variations, run_columns
from kickback.ratings import CheckColumn, check_columns


@dataclass(frozen=True)
class ManyResult:
    """Figures and checks of n variants of one case (arrays of shape (n,)).

    Attributes
    ----------
    case : Case — the base case
    variations : dict — key path → the values used [SI]
    figures : dict — figure name → float array; NaN: the time does not occur, or the variant
        was not simulated (see ``status``)
    checks : dict — check name ("part: quantity") → :class:`CheckColumn`
    passed : bool array — every applicable check passes (False for a variant not simulated, and
        for one whose result failed its audit: that variant has no verdict, see ``status``)
    status : str array — "ok", "failed" (not simulated) or "audit failed" (simulated, but the
        result failed :mod:`kickback.audit`: its figures are kept for diagnosis, not trusted)
    message : str array — why a variant failed or what its audit found ("" when ok)
    fits : tuple of str — the piecewise-linear fits of nonlinear laws used (empty: exact models)
    """

    case: Case
    variations: dict
    figures: dict
    checks: dict
    passed: np.ndarray
    status: np.ndarray
    message: np.ndarray
    fits: tuple = field(default_factory=tuple)

    @property
    def n(self) -> int:
        return int(self.passed.size)

    @property
    def ok(self) -> np.ndarray:
        """Variants simulated (bool array)."""
        return self.status == "ok"

    def to_columns(self) -> dict:
        """Flat columns for a table or CSV: the varied values, every figure, every check's value,
        limit and pass, the verdict and the status; all arrays of length n."""
        out = {f"vary.{k}": np.asarray(v) for k, v in self.variations.items()}
        out.update(self.figures)
        for name, c in self.checks.items():
            out[f"check.{name}.value"] = c.value
            out[f"check.{name}.limit"] = c.limit
            out[f"check.{name}.pass"] = np.where(c.applies, c.passed, True)
        out["pass"] = self.passed
        out["status"] = self.status
        out["message"] = self.message
        return out

    def row(self, k: int) -> dict:
        """Variant k as a dict of plain Python values (NaN → None)."""
        out = {}
        for key, col in self.to_columns().items():
            x = col[k]
            if isinstance(x, float | np.floating):
                x = None if np.isnan(x) else float(x)
            elif isinstance(x, np.bool_):
                x = bool(x)
            elif isinstance(x, np.generic):
                x = x.item()
            out[key] = x
        return out


def simulate_many(case: Case, variations: dict | None = None, *, chunk: int = CHUNK, progress=None,
                  workers: int | None = None) -> ManyResult:
    """Simulate many variants of ``case`` with the batch engine.

    Parameters
    ----------
    case : Case — the base case
    variations : dict — key path (as in the case file: "supply.voltage", "coil.inductance",
        "clamp[0].element[1].voltage", "switch.fall_time", …) → values in SI units, all of one
        length n; None or {}: the case itself (n = 1). The lists are paired element by element,
        not crossed: variant k takes the k-th value of every key (n variants, not the product of
        the lengths). For every combination, pass :func:`grid` of the lists.
    chunk : int — variants per batch; memory is bounded by it (times the workers), not by n
    workers : int or None — processes sharing the chunks (None: one per CPU from 5000 variants
        on; 1: in this process only)
    progress : callable or None — progress(done, n) after each batch

    Returns
    -------
    ManyResult

    Raises
    ------
    CaseError — an unknown key path, a non-numeric key, or value arrays of unequal length.
    """
    variations = variations or {}
    from kickback.audit import audit_many

    var, n = normalize_variations(case, variations)
    cols, ok, why, fits = run_columns(case, var, chunk=chunk, progress=progress, workers=workers)
    get = value_getter(case, var, n)
    checks = check_columns(case, cols, get, n)
    passed = ok.copy()
    for c in checks.values():
        passed &= np.where(c.applies, c.passed, True)
    status = np.where(ok, "ok", "failed")
    res = ManyResult(case, var, cols, checks, passed, status, why.astype(str), tuple(fits))
    found = audit_many(res)
    bad = np.array([bool(f) for f in found], bool)
    if bad.any():  # no verdict for a variant whose result fails its audit
        message = res.message.astype(object)
        message[bad] = ["result failed its audit: " + "; ".join(f) for f, b in zip(found, bad, strict=True) if b]
        res = dataclasses.replace(res, passed=passed & ~bad, status=np.where(bad, "audit failed", status),
                                  message=message.astype(str))
    return res


def grid(variations: dict) -> dict[str, np.ndarray]:
    """Every combination of the value lists, as paired columns for :func:`simulate_many`.

    Parameters
    ----------
    variations : dict — key path → values (any lengths n1, n2, …)

    Returns
    -------
    dict — key path → array of n1·n2·… values; the last key varies fastest (the order of
    :func:`itertools.product` and of ``numpy.meshgrid(..., indexing="ij")``)
    """
    keys = list(variations)
    if not keys:
        return {}
    mesh = np.meshgrid(*(np.asarray(variations[k], dtype=float).ravel() for k in keys), indexing="ij")
    return {k: m.ravel() for k, m in zip(keys, mesh, strict=True)}


def fit_effect(case: Case) -> dict:
    """What the batch engine's piecewise-linear fits change on ``case``: for every figure the
    relative difference (batch − detailed)/detailed against the detailed engine's exact laws.

    Returns
    -------
    dict — figure name → relative difference (NaN where the detailed figure is zero or None)
    """
    from kickback.simulation import simulate

    exact = simulate(case)
    fitted = simulate(case, engine="batch")
    a, b = _flat(exact.to_dict()), _flat(fitted.to_dict())
    out = {}
    for k, x in a.items():
        y = b.get(k)
        if isinstance(x, bool) or not isinstance(x, float | int) or not isinstance(y, float | int):
            continue
        out[k] = (y - x) / abs(x) if x else float("nan")
    return out


def batch_unsupported(case: Case) -> str | None:
    """Why the batch engine does not cover ``case`` (thermal networks, a saturating coil, a
    [drive], a motor), or None when it does."""
    from kickback.engine.batch_params import unsupported

    return unsupported(case)


def as_variations(cases) -> tuple[Case, dict] | None:
    """Same-topology cases as one base case and its variations.

    ``cases[0]`` is the base; every numeric case value (a key of :data:`kickback.keypath.UNITS`)
    that differs in another case becomes a variation by its key path
    (``{"clamp[0].element[1].voltage": array}``, one value per case). Returns None when the
    cases differ in anything else (a type, a name, a model, the number of clamps or elements, a
    value given in one case and not in another): they are not variants of one case.

    Parameters
    ----------
    cases : sequence of Case — at least one

    Returns
    -------
    (base, variations) or None
    """
    from kickback.keypath import UNITS

    cases = list(cases)
    if not cases:
        raise ValueError("as_variations needs at least one case")
    base = cases[0]
    found: dict[str, dict[int, float]] = {}

    def walk(a, b, path, k) -> bool:
        if dataclasses.is_dataclass(a):
            if type(a) is not type(b):
                return False
            for f in dataclasses.fields(a):
                if f.name in _NOT_COMPARED:
                    continue
                name = _KEY.get(f.name, f.name)
                if not walk(getattr(a, f.name), getattr(b, f.name), f"{path}.{name}" if path else name, k):
                    return False
            return True
        if isinstance(a, tuple) or isinstance(b, tuple):
            if not (isinstance(a, tuple) and isinstance(b, tuple)) or len(a) != len(b):
                return False
            if a and dataclasses.is_dataclass(a[0]):
                return all(walk(x, y, f"{path}[{j}]", k) for j, (x, y) in enumerate(zip(a, b, strict=True)))
            return a == b
        if a == b and type(a) is type(b):
            return True
        numeric = (isinstance(a, int | float) and isinstance(b, int | float)
                   and not isinstance(a, bool) and not isinstance(b, bool))
        if not numeric or path.rsplit(".", 1)[-1] not in UNITS:
            return False
        found.setdefault(path, {})[k] = float(b)
        return True

    for k, c in enumerate(cases[1:], start=1):
        if not walk(base, c, "", k):
            return None
    variations = {}
    for path, vals in found.items():
        col = np.full(len(cases), float(_value(base, path)))
        for k, x in vals.items():
            col[k] = x
        variations[path] = col
    return base, variations


#: Case fields that are not simulated (descriptions, the text it came from, other studies)
_NOT_COMPARED = ("title", "source", "text", "options", "tolerances", "path", "line")
#: dataclass field → key-path name (as in the case file)
_KEY = {"clamps": "clamp", "elements": "element"}


def _value(case, path):
    from kickback.keypath import get_value

    return get_value(case, path)


def _flat(d, prefix=""):
    out = {}
    if isinstance(d, dict):
        for k, v in d.items():
            out.update(_flat(v, f"{prefix}{k}."))
    elif isinstance(d, list):
        for k, v in enumerate(d):
            out.update(_flat(v, f"{prefix[:-1]}[{k}]."))
    else:
        out[prefix[:-1]] = d
    return out


__all__ = ["CheckColumn", "ManyResult", "as_variations", "batch_unsupported", "fit_effect", "simulate_many"]
