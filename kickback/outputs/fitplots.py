"""Figures of a coil fit (data, model, residuals) and of a measured trace over a simulation.

matplotlib is imported only inside the functions; no pyplot (see :mod:`kickback.outputs.plots`).
"""

from __future__ import annotations

import numpy as np

from kickback.outputs import style
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
    ax.plot(fit.t, fit.i, ".", ms=2, color=style.GREY, label=f"measured ({fit.t.size} points)")
    tt = np.linspace(fit.t[0], fit.t[-1], 2000)
    main = ", ".join(f"{e.name} {q(e.value, e.unit)}" for e in fit.estimates if not e.derived)
    ax.plot(tt, fit.curve(tt), color=style.VERMILLION, lw=1.4, ls="--", label=f"fit: {main}")
    ax.set_ylabel("coil current")
    ax.legend(fontsize=8, loc="lower left", bbox_to_anchor=(0.0, 1.01), borderaxespad=0.0, ncols=2)
    r = fit.i - fit.fitted
    ar.plot(fit.t, r, ".", ms=2, color=style.BLUE, label="residual")
    ar.axhline(0.0, color=style.BLACK, lw=0.8, label="zero")
    for s in (-2, 2):
        ar.axhline(s * fit.residual_rms, color=style.VERMILLION, ls=":", lw=0.9, label="±2·RMS" if s > 0 else "_")
    ar.set_ylabel("measured − fit")
    ar.set_xlabel("time after switching")
    ar.set_title(f"residual RMS {q(fit.residual_rms, 'A')} (dotted: ±2·RMS)", fontsize=9)
    _formatters((ax, "A"), (ar, "A"))
    style.title(fig, f"{fit.source}: {fit.kind} fit — {fit.model}", fontsize=9)
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
    fig = Figure(figsize=(11, 5), layout="constrained")
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
    ax.plot(trace.t, trace.values, color=style.GREY, lw=0.8, label=f"measured: {trace.source}")
    ax.plot(ts, xs, label="simulated " + ("coil current" if current else "switch-node voltage"),
            **((style.COIL if current else style.VOLTAGE) | {"ls": "--", "lw": 1.6}))
    if not current:
        ax.axhline(result.case.supply.voltage, label=f"supply {q(result.case.supply.voltage, 'V')}", **style.SUPPLY)
    text = []
    for row in comparison.rows:
        d = row.difference
        text.append(f"{row.quantity}: sim {q(row.simulated, row.unit)}, meas {q(row.measured, row.unit)}"
                    + ("" if d is None else f", Δ {('+' if d > 0 else '')}{q(d, row.unit)}"))
    ax.text(1.02, 0.0, "\n".join(text), transform=ax.transAxes, ha="left", va="bottom", fontsize=8,
            bbox={"boxstyle": "round", "fc": "white", "ec": "0.7"})
    ax.set_xlim(float(min(trace.t[0], 0.0)), t_end)
    ax.set_ylabel("coil current" if current else "switch-node voltage")
    ax.set_xlabel("time after turn-off")
    style.outside_legend(ax)
    _formatters((ax, unit))
    style.title(fig, f"{result.case.title} — measured against simulated", fontsize=10)
    return fig
