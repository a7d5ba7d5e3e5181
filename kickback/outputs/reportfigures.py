"""Figures of the HTML review report: the energy ledger bars and the waveforms with limits."""

from __future__ import annotations

from kickback.figures import chain_signals
from kickback.outputs import style
from kickback.outputs.reportparts import ledger_items, ledger_total, share
from kickback.units import format_quantity as q


def ledger_figure(result):
    """Horizontal bars of the ledger terms, each labelled with its energy and share."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    f = result.figures
    total = ledger_total(result)
    items = [it for it in ledger_items(result) if abs(it[2]) > 1e-9 * total or it[1] == "stored in the coil"]
    fig = Figure(figsize=(6.6, 0.7 + 0.26 * len(items)), layout="constrained")
    ax = fig.subplots()
    colour = {"in": style.BLUE, "out": style.ORANGE, "left": style.LIGHT_GREY}
    ys = list(range(len(items)))[::-1]
    bars = ax.barh(ys, [x for _, _, x in items], color=[colour[s] for s, _, _ in items], height=0.62)
    for bar, (side, _, _) in zip(bars, items, strict=True):
        if side == "left":  # hatched: apart from the orange of "out" in greyscale print too
            bar.set(facecolor="white", edgecolor=style.GREY, hatch="////", linewidth=0.6)
    ax.set_yticks(ys, [f"{s}: {lab}" for s, lab, _ in items], fontsize=8)
    for y, (side, _, x) in zip(ys, items, strict=True):
        pct = "" if side == "in" else f"  ({share(x, total)})"
        ax.text(max(x, 0.0), y, f" {q(x, 'J')}{pct}", va="center", fontsize=8)
    ax.set_xlim(0, 1.3 * max(x for _, _, x in items))
    ax.xaxis.set_major_formatter(EngFormatter(unit="J"))
    ax.tick_params(axis="x", labelsize=8)
    ax.grid(True, axis="x", lw=0.4, alpha=0.6)
    ax.set_title(f"energy ledger — balance residual {f.energy_balance_error:.1e}", fontsize=9)
    return fig


def _power_signals(result):
    """(label, dissipated power [W]) of each clamp chain (capacitors excluded) and of the switch."""
    w = result.waveforms
    out = []
    for k, ch in enumerate(w.circuit.chains):
        dissipating = [j for j, el in enumerate(ch.clamp.elements) if el.type != "capacitor"]
        if dissipating:  # a lone capacitor stores, it does not dissipate
            ic, _, ev = chain_signals(w, k)
            out.append((f"clamp {ch.name}", sum(ev[j] * ic for j in dissipating)))
    out.append(("switch", w.v * (w.i_channel + w.i_offstate)))
    return out


def _limits(ax, result, show_peak: bool):
    case, f = result.case, result.figures
    ax.axhline(case.supply.voltage, label=f"supply {q(case.supply.voltage, 'V')}", **style.SUPPLY)
    if case.switch.rated_voltage is not None:
        lim = case.switch.rated_voltage * case.checks.derating
        ax.axhline(lim, label=f"switch limit {q(lim, 'V')} ({q(case.switch.rated_voltage, 'V')} × "
                   f"{case.checks.derating:g})", **style.LIMIT)
    if case.checks.max_peak_voltage is not None:
        ax.axhline(case.checks.max_peak_voltage, label=f"case limit {q(case.checks.max_peak_voltage, 'V')}",
                   **style.CASE_LIMIT)
    bv = case.switch.breakdown_voltage
    if bv is not None and bv < 1.6 * max(f.peak_voltage_V, case.supply.voltage):
        ax.axhline(bv, label=f"avalanche onset {q(bv, 'V')}", **style.AVALANCHE)
    if show_peak:
        ax.plot([f.peak_time_s], [f.peak_voltage_V], label=f"peak {q(f.peak_voltage_V, 'V')} at "
                f"{q(f.peak_time_s, 's')}", **style.PEAK_MARKER)


def _time_span(result) -> float:
    """End [s] of the whole-transient axis: the run and the release, and the release limit unless it is far off
    (it would squash the transient into the left edge; the legend then names it)."""
    end = max(float(result.waveforms.t[-1]), 1.06 * (result.figures.release_s or 0.0))
    limit = result.case.checks.max_release_time
    return max(end, 1.06 * limit) if limit is not None and limit <= 2.5 * end else end


def _release(ax, result, whole: bool):
    from kickback.outputs.plots import release_marks

    case, f = result.case, result.figures
    marks = release_marks(result)
    if marks is None:
        return
    levels, label, point = marks
    for n, level in enumerate(levels):
        ax.axhline(level, label=label if n == 0 else "_", **style.RELEASE_CURRENT)
    if point is not None and whole:
        ax.plot([point[0]], [point[1]], label=f"below release current at {q(point[0], 's')}", **style.RELEASE_MARKER)
        ax.axvline(f.release_s, label=f"released at {q(f.release_s, 's')} (+ {q(case.coil.release_delay, 's')} "
                   "delay)", **style.RELEASE)
    limit = case.checks.max_release_time
    if limit is not None and whole:
        if limit <= _time_span(result):
            ax.axvline(limit, label=f"release limit {q(limit, 's')}", **style.LIMIT)
        else:
            ax.plot([], [], " ", label=f"release limit {q(limit, 's')} (beyond the axis)")


def waveform_figure(result, t_zoom: float | None):
    """Switch-node voltage with its limits, coil current with the release point, and clamp and
    switch power — over the whole transient and, when ``t_zoom`` [s] is given, on the turn-off edge
    (drawn from 0 to exactly ``t_zoom``, the window its title states). One legend per row, to the
    right of the figure, so that none covers a trace."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter, MaxNLocator

    from kickback.outputs.plots import Window

    w = result.waveforms
    power = _power_signals(result)
    cols = [(None, "whole transient")] if t_zoom is None else [(t_zoom, f"turn-off edge (first {q(t_zoom, 's')})"),
                                                               (None, "whole transient")]
    end = _time_span(result)
    fig = Figure(figsize=(11.6, 8.6) if t_zoom else (9.4, 7.6), layout="constrained")
    grid = fig.subplots(3, len(cols), sharex="col", squeeze=False,
                        gridspec_kw={"width_ratios": [1, 1.45]} if t_zoom else None)
    for c, (t_end, title) in enumerate(cols):
        av, ai, ap = grid[:, c]
        whole = t_end is None
        m = Window(w.t, t_end)
        t = m.t
        av.plot(t, m(w.v), label="switch-node voltage", **style.VOLTAGE)
        _limits(av, result, show_peak=whole or result.figures.peak_time_s <= t_end)
        ai.plot(t, m(w.i_coil), label="coil current", **style.COIL)
        if not whole:
            ai.plot(t, m(w.i_channel + w.i_offstate), label="switch current", **style.SWITCH_CURRENT)
        for n, k in enumerate(w.circuit.active_chains):
            ai.plot(t, m(w.i_chains[n]), label=f"clamp {w.circuit.chains[k].name}", **style.clamp_style(n))
        _release(ai, result, whole)
        for n, (label, p) in enumerate(power):
            if label == "switch":
                ap.plot(t, m(p), label="switch (crossover, avalanche)", **style.SWITCH_CURRENT)
            else:
                ap.plot(t, m(p), label=label, **style.clamp_style(n))
        if whole:
            ap.set_xlim(-0.02 * end, end)
            if end > 1.05 * w.t[-1]:
                for ax in (av, ai, ap):
                    ax.axvline(w.t[-1], color=style.LIGHT_GREY, lw=0.8, ls=(0, (1, 3)),
                               label="end of run: current at zero" if ax is ai else "_")
        else:
            ap.set_xlim(min(0.0, float(t[0])), t_end)
            ap.xaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
        av.set_title(title, fontsize=9.5)
        for ax, unit, name in ((av, "V", "switch-node voltage"), (ai, "A", "current"),
                               (ap, "W", "dissipated power")):
            ax.yaxis.set_major_formatter(EngFormatter(unit=unit))
            ax.xaxis.set_major_formatter(EngFormatter(unit="s"))
            ax.tick_params(labelsize=8)
            ax.grid(True, lw=0.4, alpha=0.6)
            if c == 0:
                ax.set_ylabel(name, fontsize=9)
        lo, hi = ai.get_ylim()
        ai.set_ylim(min(lo, -0.04 * hi), hi)  # the current axis always shows zero
        ap.set_xlabel("time after turn-off", fontsize=9)
    for row in grid:
        style.outside_legend(row[-1], *style.row_handles(*row[::-1]), fontsize=7.5)
    return fig
