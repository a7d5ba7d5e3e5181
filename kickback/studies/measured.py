"""Compare a measured turn-off trace with a simulated one: peak voltage and decay times.

The trace is either the coil current (unit A) or the switch-node voltage (unit V), with
t = 0 at the turn-off instant. Both the simulated and the measured figures here are computed
by the same rules from their own waveforms, so a difference is a difference of the circuits,
not of definitions:

* current: initial current (median before t = 0, else the first samples), the first time the
  current falls below 10 % of its own initial value, and below a "zero" level set by the
  trace's noise (the larger of 1 % and 4 noise standard deviations, the same fraction for the
  simulation);
* voltage: peak voltage (the raw maximum of the trace, as read on the instrument: a real
  overshoot may last one sample, so it is not smoothed; noise adds to it), and the first time
  after the peak the node is back within 10 % of its excursion above the supply (the clamp
  has stopped conducting).

Crossings are read on the measured signal smoothed by a 5-sample running median, so a single
noise spike does not count as one.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kickback.studies.tracecheck import noise_sigma

__all__ = ["ComparisonRow", "MeasuredComparison", "compare_measured"]

ZERO_FRACTION_MIN = 0.01
NOISE_SIGMAS = 4.0
#: a simulation that ends with the coil current below this fraction of i0 has released the node
END_FRACTION = 1e-3


@dataclass(frozen=True)
class ComparisonRow:
    """One figure, simulated and measured (None where it does not occur in the record)."""

    quantity: str
    unit: str
    simulated: float | None
    measured: float | None

    @property
    def difference(self) -> float | None:
        """measured − simulated, in ``unit``."""
        if self.simulated is None or self.measured is None:
            return None
        return self.measured - self.simulated

    @property
    def relative(self) -> float | None:
        d = self.difference
        return None if d is None or not self.simulated else d / abs(self.simulated)

    def to_dict(self) -> dict:
        return {"quantity": self.quantity, "unit": self.unit, "simulated": self.simulated,
                "measured": self.measured, "difference": self.difference}


@dataclass(frozen=True)
class MeasuredComparison:
    source: str
    signal: str  # "current" | "voltage"
    rows: tuple[ComparisonRow, ...]
    notes: tuple[str, ...] = ()

    def row(self, quantity: str) -> ComparisonRow:
        for r in self.rows:
            if r.quantity == quantity:
                return r
        raise KeyError(quantity)

    def to_dict(self) -> dict:
        return {"source": self.source, "signal": self.signal, "rows": [r.to_dict() for r in self.rows],
                "notes": list(self.notes)}


def running_median(x: np.ndarray, width: int = 5) -> np.ndarray:
    """Running median over ``width`` samples (odd), edges padded with the end values."""
    if x.size < width:
        return x.copy()
    h = width // 2
    padded = np.concatenate([np.full(h, x[0]), x, np.full(h, x[-1])])
    return np.median(np.lib.stride_tricks.sliding_window_view(padded, width), axis=1)


def _first_below(t, x, level, start: float = 0.0) -> float | None:
    """First time [s] at or after ``start`` where ``x`` falls below ``level`` (linear interpolation)."""
    m = t >= start
    ts, xs = t[m], x[m]
    hit = np.nonzero(xs < level)[0]
    if hit.size == 0:
        return None
    k = int(hit[0])
    if k == 0:
        return float(ts[0])
    x0, x1 = xs[k - 1], xs[k]
    return float(ts[k - 1] + (ts[k] - ts[k - 1]) * (x0 - level) / (x0 - x1))


def compare_measured(result, trace) -> MeasuredComparison:
    """Figures of a measured trace beside the same figures of a simulated result.

    Parameters
    ----------
    result : Result — a simulated turn-off
    trace : Trace — measured coil current [A] or switch-node voltage [V], t = 0 at turn-off

    Returns
    -------
    MeasuredComparison
    """
    w = result.waveforms
    t = trace.t
    x = running_median(trace.values)
    notes = []
    if trace.quantity == "current":
        pre = trace.values[t < 0]
        after = x[t >= 0]
        if after.size == 0:
            return MeasuredComparison(trace.source, "current", (), ("the trace has no samples after t = 0",))
        i0_m = float(np.median(pre)) if pre.size >= 3 else float(np.max(after[:3]))
        if i0_m < 0:  # probe the other way round
            x, i0_m = -x, -i0_m
            notes.append("the measured current is negative; compared with its sign reversed")
        i_sim = w.i_coil
        i0_s = float(result.figures.initial_current_A)
        frac = max(ZERO_FRACTION_MIN, NOISE_SIGMAS * noise_sigma(trace.values[t >= 0]) / max(abs(i0_m), 1e-300))
        rows = [
            ComparisonRow("initial current", "A", i0_s, i0_m),
            ComparisonRow("decay to 10 %", "s", _first_below(w.t, i_sim, 0.1 * i0_s),
                          _first_below(t, x, 0.1 * i0_m)),
            ComparisonRow(f"decay to {100 * frac:.2g} % (≈ zero)", "s", _first_below(w.t, i_sim, frac * i0_s),
                          _first_below(t, x, frac * i0_m)),
        ]
        if frac > ZERO_FRACTION_MIN:
            notes.append(f"'zero' read as {100 * frac:.2g} % of the initial current (the trace's noise floor)")
        return MeasuredComparison(trace.source, "current", tuple(rows), tuple(notes))
    vs = result.case.supply.voltage
    k_m = int(np.argmax(trace.values))  # the raw maximum: a real overshoot may be one sample wide
    pk_m, tpk_m = float(trace.values[k_m]), float(t[k_m])
    f = result.figures
    lvl_s = vs + 0.1 * (f.peak_voltage_V - vs)
    lvl_m = vs + 0.1 * (pk_m - vs)
    back_s = _first_below(w.t, w.v, lvl_s, f.peak_time_s)
    if back_s is None and abs(float(w.i_coil[-1])) <= END_FRACTION * abs(f.initial_current_A):
        back_s = float(w.t[-1])  # the run ends when the current is gone: the clamp lets go there
    rows = [
        ComparisonRow("peak voltage", "V", f.peak_voltage_V, pk_m),
        ComparisonRow("node back within 10 % of its excursion", "s", back_s, _first_below(t, x, lvl_m, tpk_m)),
    ]
    if pk_m <= vs:
        notes.append("the measured node never rises above the supply voltage of the case")
    return MeasuredComparison(trace.source, "voltage", tuple(rows), tuple(notes))
