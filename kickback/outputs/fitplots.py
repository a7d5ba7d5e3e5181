"""Figures of a coil fit (data, model, residuals) and of a measured trace over a simulation.

matplotlib is imported only inside the functions; no pyplot (see :mod:`kickback.outputs.plots`).
"""

from __future__ import annotations

import numpy as np

from kickback.units import format_quantity as q


def _formatters(*pairs):
    from matplotlib.ticker import EngFormatter

    for ax, unit in pairs:
        ax.yaxis.set_major_formatter(EngFormatter(unit=unit))
        ax.xaxis.set_major_formatter(EngFormatter(unit="s"))
        ax.grid(True, lw=0.4, alpha=0.6)


def fit_figure(fit):
    """Measured current with the fitted model above, residuals below.

    Parameters
    ----------
    fit : CoilFit

    Returns
    -------
    matplotlib Figure
    """
    from matplotlib.figure import Figure

    fig = Figure(figsize=(8, 6), layout="constrained")
    ax, ar = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [2, 1]})
    ax.plot(fit.t, fit.i, ".", ms=2, color="0.45", label=f"measured ({fit.t.size} points)")
    tt = np.linspace(fit.t[0], fit.t[-1], 2000)
    main = ", ".join(f"{e.name} {q(e.value, e.unit)}" for e in fit.estimates if not e.derived)
    ax.plot(tt, fit.curve(tt), color="C3", lw=1.4, label=f"fit: {main}")
    ax.set_ylabel("coil current")
    ax.legend(fontsize=8, loc="best")
    r = fit.i - fit.fitted
    ar.plot(fit.t, r, ".", ms=2, color="C0")
    ar.axhline(0.0, color="k", lw=0.8)
    for s in (-2, 2):
        ar.axhline(s * fit.residual_rms, color="C3", ls=":", lw=0.9)
    ar.set_ylabel("measured − fit")
    ar.set_xlabel("time after switching")
    ar.set_title(f"residual RMS {q(fit.residual_rms, 'A')} (dotted: ±2·RMS)", fontsize=9)
    _formatters((ax, "A"), (ar, "A"))
    fig.suptitle(f"{fit.source}: {fit.kind} fit — {fit.model}", fontsize=9)
    return fig


def measured_figure(result, trace, comparison):
    """The measured coil current or switch-node voltage over the simulated one.

    Parameters
    ----------
    result : Result — the simulation
    trace : Trace — measured, t = 0 at turn-off
    comparison : MeasuredComparison — the figures printed beside it

    Returns
    -------
    matplotlib Figure
    """
    from matplotlib.figure import Figure

    w = result.waveforms
    current = trace.quantity == "current"
    sim = w.i_coil if current else w.v
    unit = "A" if current else "V"
    fig = Figure(figsize=(9, 5), layout="constrained")
    ax = fig.subplots()
    ts, xs = w.t, sim
    if trace.t[0] < 0:  # the simulation starts at turn-off; before it the on-state holds
        ts = np.concatenate([[trace.t[0], 0.0], w.t])
        xs = np.concatenate([[sim[0], sim[0]], sim])
    t_end = max(float(w.t[-1]), float(trace.t[-1]))
    i0 = abs(float(w.i_coil[0])) or 1.0
    if t_end > w.t[-1] and abs(float(w.i_coil[-1])) <= 1e-3 * i0:  # the run ended with the current gone
        rest = 0.0 if current else result.case.supply.voltage
        ts = np.concatenate([ts, [w.t[-1], t_end]])
        xs = np.concatenate([xs, [rest, rest]])
    ax.plot(trace.t, trace.values, color="0.45", lw=0.8, label=f"measured: {trace.source}")
    ax.plot(ts, xs, color="C0" if not current else "C1", lw=1.6,
            label="simulated " + ("coil current" if current else "switch-node voltage"))
    if not current:
        ax.axhline(result.case.supply.voltage, color="0.5", ls=":", lw=1, label="supply")
    text = []
    for row in comparison.rows:
        d = row.difference
        text.append(f"{row.quantity}: sim {q(row.simulated, row.unit)}, meas {q(row.measured, row.unit)}"
                    + ("" if d is None else f", Δ {('+' if d > 0 else '')}{q(d, row.unit)}"))
    ax.text(0.99, 0.97, "\n".join(text), transform=ax.transAxes, ha="right", va="top", fontsize=8,
            bbox={"boxstyle": "round", "fc": "white", "ec": "0.7", "alpha": 0.9})
    ax.set_xlim(float(min(trace.t[0], 0.0)), t_end)
    ax.set_ylabel("coil current" if current else "switch-node voltage")
    ax.set_xlabel("time after turn-off")
    ax.legend(fontsize=8, loc="center right")
    _formatters((ax, unit))
    fig.suptitle(f"{result.case.title} — measured against simulated", fontsize=10)
    return fig
