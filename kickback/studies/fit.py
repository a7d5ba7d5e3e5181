r"""Fit a coil's L and R (and the clamp voltage, or saturation) to a measured current trace.

Three models, each fitted by ``scipy.optimize.least_squares`` to every sample (t < 0 included,
where the model is the state before switching):

* ``rise``: the switch closes at t = 0 on a supply V; linear coil

  .. math:: i(t) = \frac{V}{R}\left(1 - e^{-t R / L}\right)

* ``rise`` with ``saturating``: the Frölich–Kennelly coil of :mod:`kickback.models.coil`
  (L0, I_sat, R), through its exact implicit rise t(i);
* ``decay``: the switch opens at t = 0 after the steady on-state i0 = V/R; the clamp holds the
  switch node V_c + R_c·i above the supply (a diode, Zener or TVS clamp: its knee voltage and its
  series and dynamic resistance R_c), so L·di/dt = −(R + R_c)·i − V_c until i = 0:

  .. math:: i(t) = \left(\frac{V}{R} + \frac{V_c}{R + R_c}\right) e^{-t (R + R_c) / L}
            - \frac{V_c}{R + R_c}

  The trace fixes R (from the on-state level V/R), the time constant L/(R + R_c) and the
  asymptote −V_c/(R + R_c), not R_c itself: L and R_c trade off exactly. R_c is therefore given
  (``clamp_resistance``, from the clamp's parts); left out, R_c = 0 is assumed, which reads L
  low by R/(R + R_c), and the fit says so.

Confidence intervals come from the covariance s²·(JᵀJ)⁻¹ at the optimum (J the Jacobian of
the residuals, s² the residual variance on n − p degrees of freedom) with Student's t
quantile; derived quantities (time constant, stored energy) by first-order propagation.

References
----------
D. M. Bates and D. G. Watts, *Nonlinear Regression Analysis and Its Applications*, Wiley,
1988, ch. 2 (linear-approximation confidence intervals of nonlinear least squares).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from kickback.models.coil import incremental_inductance, rise_current, stored_energy
from kickback.studies.tracecheck import MIN_POINTS, FitError, average_blocks, check_trace, noise_sigma

__all__ = ["CONFIDENCE", "MIN_POINTS", "CoilFit", "Estimate", "FitError", "fit_current", "fit_trace"]

CONFIDENCE = 0.95
#: the derived estimate of the coil's own resistance when a shunt is in series
COIL_RESISTANCE = "coil resistance (without the shunt)"
#: a residual RMS above this many noise standard deviations means the model misses the shape
RESIDUAL_TO_NOISE = 1.5
#: an I_sat above this many times the final current is "no saturation seen"
SATURATION_SEEN = 100.0


@dataclass(frozen=True)
class Estimate:
    """One fitted (or derived) value with its standard error and confidence half-width."""

    name: str
    unit: str
    value: float
    stderr: float
    half_width: float
    derived: bool = False
    at_bound: bool = False

    @property
    def interval(self) -> tuple[float, float]:
        return self.value - self.half_width, self.value + self.half_width

    def to_dict(self) -> dict:
        return {"name": self.name, "unit": self.unit, "value": self.value, "stderr": self.stderr,
                "half_width": self.half_width, "derived": self.derived, "at_bound": self.at_bound}


@dataclass(frozen=True)
class CoilFit:
    """The outcome of one fit, SI units.

    Attributes
    ----------
    source : str — the trace's file name
    kind : str — "rise" or "decay"
    saturating : bool
    supply_V : float — [V]
    model : str — the law fitted, in words
    estimates : tuple of Estimate — fitted values first, then derived ones
    t, i, fitted : ndarray — [s], [A], [A] the samples fitted (after any block averaging, sign
        as fitted) and the model at them
    residual_rms : float — [A]
    dof : int — degrees of freedom n − p
    confidence : float — level of the intervals (0.95)
    notes : tuple of str — what was assumed or found
    curve : callable — model current [A] at any times [s]
    """

    source: str
    kind: str
    saturating: bool
    supply_V: float
    model: str
    estimates: tuple[Estimate, ...]
    t: np.ndarray = field(repr=False)
    i: np.ndarray = field(repr=False)
    fitted: np.ndarray = field(repr=False)
    residual_rms: float = 0.0
    dof: int = 0
    confidence: float = CONFIDENCE
    notes: tuple[str, ...] = ()
    curve: Callable = field(default=None, repr=False, compare=False)
    shunt_ohm: float = 0.0  # [Ω] a shunt in series with the coil, inside the fitted resistance

    def estimate(self, name: str) -> Estimate:
        for e in self.estimates:
            if e.name == name:
                return e
        raise KeyError(name)

    @property
    def span(self) -> float:
        """[A] range of the fitted samples."""
        return float(np.ptp(self.i))

    @property
    def saturation_seen(self) -> bool:
        """A saturating fit whose I_sat is determined: inside its bounds, below 100× the final
        current, and with an interval that excludes zero."""
        if not self.saturating:
            return False
        e = self.estimate("saturation current")
        final = self.estimate("final current V/R").value
        return not e.at_bound and e.value < SATURATION_SEEN * final and e.half_width < e.value

    def coil_values(self) -> dict[str, float]:
        """The case file's [coil] keys this fit determines (SI): inductance, resistance, and
        ``saturation_current`` for a saturating fit that sees saturation (the inductance is
        then L0)."""
        return {k: self.estimate(n).value for k, n in self.coil_estimate_names().items()}

    def coil_estimate_names(self) -> dict[str, str]:
        """[coil] key → the estimate that gives it (the coil's own resistance, without a shunt)."""
        r = COIL_RESISTANCE if self.shunt_ohm else "resistance"
        keys = {"inductance": "inductance", "resistance": r}
        if self.saturating:
            keys = {"inductance": "inductance at zero current", "resistance": r}
            if self.saturation_seen:
                keys["saturation_current"] = "saturation current"
        return keys

    def to_dict(self) -> dict:
        return {"source": self.source, "kind": self.kind, "saturating": self.saturating,
                "supply_V": self.supply_V, "model": self.model, "confidence": self.confidence,
                "estimates": [e.to_dict() for e in self.estimates], "residual_rms_A": self.residual_rms,
                "points": int(self.t.size), "dof": self.dof,
                "coil": {f"{k}_{_COIL_UNITS[k]}": v for k, v in self.coil_values().items()},
                "notes": list(self.notes)}


#: the unit suffix of each [coil] key in the JSON (SI; ASCII "ohm" for Ω, as a key name)
_COIL_UNITS = {"inductance": "H", "resistance": "ohm", "saturation_current": "A"}


# ---- models: current [A] at times t [s] for parameters p ---------------------------------------

def _rise_linear(t, p, v):
    L, R = p
    return np.where(t > 0, -(v / R) * np.expm1(-np.maximum(t, 0.0) * R / L), 0.0)


def _rise_saturating(t, p, v):
    L0, R, i_sat = p
    return rise_current(t, v, R, L0, i_sat)


def _decay_with(rc: float):
    """The decay model with a clamp series resistance ``rc`` [Ω] (see the module docstring)."""
    def decay(t, p, v):
        L, R, vc = p
        i0, ic = v / R, vc / (R + rc)
        on = (i0 + ic) * np.exp(-np.maximum(t, 0.0) * (R + rc) / L) - ic
        return np.where(t <= 0, i0, np.maximum(on, 0.0))

    return decay


_decay = _decay_with(0.0)


# ---- the fit ------------------------------------------------------------------------------------

def _solve(func, t, i, v, starts, lower, upper, source):
    from scipy.optimize import least_squares

    best = None
    for p0 in starts:
        p0 = np.clip(np.asarray(p0, dtype=float), lower * 1.0001, upper / 1.0001)
        with np.errstate(over="ignore", invalid="ignore"):
            res = least_squares(lambda p: func(t, p, v) - i, p0, bounds=(lower, upper), x_scale="jac",
                                ftol=1e-12, xtol=1e-12, gtol=1e-12, max_nfev=400 * len(p0))
        if res.status > 0 and np.all(np.isfinite(res.x)) and (best is None or res.cost < best.cost):
            best = res
    if best is None:
        raise FitError(source, f"the fit did not converge from {len(starts)} starting points "
                               "(expected a trace that follows the chosen --kind; check --supply and --trigger)")
    return best


def _covariance(res, n: int, names, source):
    J = res.jac
    p = J.shape[1]
    _, s, vt = np.linalg.svd(J, full_matrices=False)
    if s[-1] <= s[0] * max(J.shape) * np.finfo(float).eps * 1e3:
        raise FitError(source, f"the trace does not determine {', '.join(names)} separately "
                               "(a longer record or one that reaches the plateau is expected)")
    s2 = 2.0 * res.cost / (n - p)
    return (vt.T / s**2) @ vt * s2


def _estimates(names, units, x, cov, tq, bound, derived):
    out = [Estimate(n, u, float(v), float(math.sqrt(cov[k, k])), float(tq * math.sqrt(cov[k, k])),
                    at_bound=bool(bound[k]))
           for k, (n, u, v) in enumerate(zip(names, units, x, strict=True))]
    for name, unit, f in derived:
        val = float(f(x))
        if not math.isfinite(val):
            continue
        g = np.zeros_like(x)
        for k in range(x.size):
            h = 1e-6 * abs(x[k])
            xp, xm = x.copy(), x.copy()
            xp[k] += h
            xm[k] -= h
            g[k] = (f(xp) - f(xm)) / (2 * h)
        se = float(math.sqrt(max(g @ cov @ g, 0.0)))
        out.append(Estimate(name, unit, val, se, tq * se, derived=True))
    return tuple(out)


def _tail_level(t, i):
    ia = i[t >= 0]
    return float(np.median(ia[-max(3, ia.size // 20):]))


def _crossing(t, i, level, falling: bool) -> float:
    """First time [s] at t >= 0 where ``i`` passes ``level`` (linear interpolation)."""
    a = t >= 0
    ta, ia = t[a], i[a]
    hit = np.nonzero(ia <= level if falling else ia >= level)[0]
    if hit.size == 0:
        return float(ta[-1])
    k = int(hit[0])
    if k == 0:
        return float(ta[0])
    x0, x1 = ia[k - 1], ia[k]
    return float(ta[k - 1] + (ta[k] - ta[k - 1]) * (level - x0) / (x1 - x0)) if x1 != x0 else float(ta[k])


def fit_current(t, i, *, kind: str, supply: float, saturating: bool = False, source: str = "<trace>",
                shunt: float = 0.0, clamp_resistance: float | None = None) -> CoilFit:
    """Fit a coil model to a measured current.

    Parameters
    ----------
    t : array — [s] sample times, t = 0 at the switching instant
    i : array — [A] coil current
    kind : str — "rise" (switch-on) or "decay" (switch-off)
    supply : float — [V] the voltage applied to the coil and its resistance while on
    saturating : bool — rise only: fit the Frölich–Kennelly coil (L0, I_sat) instead of a constant L
    source : str — name for messages
    shunt : float — [Ω] a current shunt in series with the coil: part of the fitted resistance,
        left out of the coil's resistance (``coil_values``)
    clamp_resistance : float or None — decay only: [Ω] the clamp's series resistance R_c (diode
        series plus Zener/TVS dynamic resistance); None: 0 assumed, and a note says what that
        does to L

    Returns
    -------
    CoilFit

    Raises
    ------
    FitError
        Trace too short, flat, clipped, going the wrong way, or the fit does not converge.
    """
    from scipy.stats import t as student_t

    if kind not in ("rise", "decay"):
        raise ValueError(f"kind must be 'rise' or 'decay', got {kind!r}")
    if saturating and kind != "rise":
        raise FitError(source, "--saturating fits a rise only (expected --kind rise)")
    if not (supply > 0 and math.isfinite(supply)):
        raise FitError(source, f"the supply voltage must be positive, got {supply!r} V")
    t = np.asarray(t, dtype=float)
    i = np.asarray(i, dtype=float)
    i, notes = check_trace(t, i, kind, source)
    t, i, avg = average_blocks(t, i)
    notes += [avg] if avg else []
    v = supply
    if kind == "rise":
        i_f = _tail_level(t, i)
        r0 = v / i_f
        tau0 = max(_crossing(t, i, (1 - math.exp(-1)) * i_f, falling=False), t[t > 0][0])
        lin_names, lin_units = ("inductance", "resistance"), ("H", "Ω")
        lin = _solve(_rise_linear, t, i, v, [(tau0 * r0 * k, r0) for k in (1.0, 0.5, 2.0)],
                     np.array([1e-12, 1e-9]), np.array([np.inf, np.inf]), source)
        if not saturating:
            func, res, names, units = _rise_linear, lin, lin_names, lin_units
            model = "linear coil, rise i = V/R·(1 − e^(−t·R/L))"
            derived = [("time constant L/R", "s", lambda x: x[0] / x[1]),
                       ("final current V/R", "A", lambda x: v / x[1]),
                       ("stored energy at V/R", "J", lambda x: 0.5 * x[0] * (v / x[1]) ** 2)]
        else:
            L, R = lin.x
            i_f = v / R
            starts = [(L * (1 + i_f / (2 * k * i_f)) ** 2, R, k * i_f) for k in (0.25, 1.0, 4.0, 30.0)]
            func = _rise_saturating
            names = ("inductance at zero current", "resistance", "saturation current")
            units = ("H", "Ω", "A")
            res = _solve(func, t, i, v, starts, np.array([1e-12, 1e-9, 1e-3 * i_f]),
                         np.array([np.inf, np.inf, 1e3 * i_f]), source)
            model = "saturating coil λ(i) = L0·i/(1 + |i|/I_sat), rise dλ/dt = V − R·i (exact t(i))"
            derived = [("final current V/R", "A", lambda x: v / x[1]),
                       ("incremental inductance at V/R", "H",
                        lambda x: incremental_inductance(v / x[1], x[0], x[2])),
                       ("stored energy at V/R (∫ i dλ)", "J", lambda x: stored_energy(v / x[1], x[0], x[2]))]
            if res.active_mask[2] > 0 or res.x[2] > SATURATION_SEEN * i_f:
                notes.append("the trace shows little saturation (I_sat far above the final current): "
                             "the linear fit describes it as well")
    else:
        pre = i[t < 0]
        i0 = float(np.median(pre)) if pre.size >= 3 else float(np.max(i[t >= 0][:3]))
        r0 = v / i0
        t_half = max(_crossing(t, i, 0.5 * i0, falling=True), t[t > 0][0])
        starts = [(t_half / math.log((1 + k) / (0.5 + k)) * r0, r0, k * v) for k in (0.02, 0.2, 1.0, 5.0)]
        rc = 0.0 if clamp_resistance is None else float(clamp_resistance)
        if not (rc >= 0 and math.isfinite(rc)):
            raise FitError(source, f"the clamp resistance must be >= 0, got {clamp_resistance!r} Ω")
        func = _decay_with(rc)
        names, units = ("inductance", "resistance", "clamp voltage"), ("H", "Ω", "V")
        res = _solve(func, t, i, v, starts, np.array([1e-12, 1e-9, 0.0]), np.array([np.inf] * 3), source)
        model = ("linear coil, decay from V/R against a clamp V_c + R_c·i above the supply "
                 f"(R_c = {rc:.4g} Ω {'given' if clamp_resistance is not None else 'assumed'}): "
                 "i = (V/R + V_c/(R + R_c))·e^(−t·(R + R_c)/L) − V_c/(R + R_c) until 0")
        derived = [("time constant L/(R + R_c)", "s", lambda x: x[0] / (x[1] + rc)),
                   ("initial current V/R", "A", lambda x: v / x[1]),
                   ("stored energy at V/R", "J", lambda x: 0.5 * x[0] * (v / x[1]) ** 2),
                   ("switch-node voltage V + V_c + R_c·V/R", "V", lambda x: v + x[2] + rc * v / x[1])]
        if res.x[2] > 0:
            derived.append(("decay to zero", "s",
                            lambda x: x[0] / (x[1] + rc) * math.log1p(v * (x[1] + rc) / (x[1] * x[2]))))
        if clamp_resistance is None:
            notes.append("the clamp's series resistance R_c (a Zener's dynamic resistance, a diode's series "
                         "resistance) is not seen apart from L in a current trace: the decay fixes L/(R + R_c). "
                         "R_c = 0 is assumed, which reads L low by the factor R/(R + R_c); give the clamp's "
                         "resistance (--clamp-resistance) to remove that bias")
        if pre.size < 3:
            notes.append("no samples before the trigger: the on-state current V/R comes from the fit alone")
    if shunt:
        if not (shunt > 0 and math.isfinite(shunt)):
            raise FitError(source, f"the shunt must be a positive resistance, got {shunt!r} Ω")
        derived = [(COIL_RESISTANCE, "Ω", lambda x: x[1] - shunt)] + list(derived)
        notes.append(f"the fitted resistance includes the {shunt:.4g} Ω shunt; the [coil] block gives the "
                     "coil's own resistance without it")
    n, p = t.size, len(names)
    if n - p < 1:  # pragma: no cover - MIN_POINTS guards this
        raise FitError(source, "too few samples for the parameters")
    cov = _covariance(res, n, names, source)
    tq = float(student_t.ppf(0.5 + CONFIDENCE / 2, n - p))
    est = _estimates(names, units, res.x, cov, tq, res.active_mask, derived)
    for e in est[:p]:
        if e.at_bound and e.name != "saturation current":
            notes.append(f"{e.name} is at its bound ({e.value:.4g} {e.unit}); its interval is not meaningful")
    fitted = func(t, res.x, v)
    rms = float(np.sqrt(np.mean((fitted - i) ** 2)))
    span = float(np.ptp(i))
    sigma = noise_sigma(i)
    if rms > 0.05 * span:
        notes.append(f"the residual RMS is {100 * rms / span:.1f} % of the span: the model does not describe "
                     "this trace well (check --kind, --trigger, --supply)")
    elif sigma > 0 and rms > RESIDUAL_TO_NOISE * sigma:
        hint = "; a saturating core: try --saturating" if kind == "rise" and not saturating else ""
        notes.append(f"the residual RMS ({rms:.3g} A) is {rms / sigma:.1f}× the sample noise ({sigma:.3g} A): "
                     f"the model misses part of the shape, and the intervals understate the error{hint}")
    x = res.x.copy()
    return CoilFit(source=source, kind=kind, saturating=saturating, supply_V=v, model=model, estimates=est,
                   t=t, i=i, fitted=fitted, residual_rms=rms, dof=n - p, notes=tuple(notes),
                   curve=lambda tt: func(np.asarray(tt, dtype=float), x, v), shunt_ohm=float(shunt or 0.0))


def fit_trace(trace, *, kind: str, supply: float, saturating: bool = False, shunt: float | None = None,
              clamp_resistance: float | None = None) -> CoilFit:
    """Fit a coil model to a :class:`kickback.traceio.Trace` holding a current (see :func:`fit_current`;
    ``shunt`` [Ω] the shunt the current was read across, None: none)."""
    if trace.quantity != "current":
        raise FitError(trace.source, f"column {trace.value_column!r} holds a voltage (expected a current; "
                                     "give --shunt R for a shunt voltage)")
    fit = fit_current(trace.t, trace.values, kind=kind, supply=supply, saturating=saturating,
                      source=trace.source, shunt=shunt or 0.0, clamp_resistance=clamp_resistance)
    if trace.notes:
        from dataclasses import replace

        fit = replace(fit, notes=tuple(trace.notes) + fit.notes)
    return fit
