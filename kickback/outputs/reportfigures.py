"""Figures of the HTML review report: the energy ledger bars and the waveforms with limits."""

from __future__ import annotations

from kickback.figures import chain_signals
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
    colour = {"in": "#3b6ea8", "out": "#c8742c", "left": "#8c8c8c"}
    ys = list(range(len(items)))[::-1]
    ax.barh(ys, [x for _, _, x in items], color=[colour[s] for s, _, _ in items], height=0.62)
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


def _limits(ax, result, annotate: bool):
    case, f = result.case, result.figures
    ax.axhline(case.supply.voltage, color="0.45", ls=":", lw=1, label=f"supply {q(case.supply.voltage, 'V')}")
    if case.switch.rated_voltage is not None:
        lim = case.switch.rated_voltage * case.checks.derating
        ax.axhline(lim, color="#c0392b", ls="--", lw=1.1,
                   label=f"switch limit {q(lim, 'V')} ({q(case.switch.rated_voltage, 'V')} × {case.checks.derating:g})")
    if case.checks.max_peak_voltage is not None:
        ax.axhline(case.checks.max_peak_voltage, color="#7d3c98", ls="--", lw=1,
                   label=f"case limit {q(case.checks.max_peak_voltage, 'V')}")
    bv = case.switch.breakdown_voltage
    if bv is not None and bv < 1.6 * max(f.peak_voltage_V, case.supply.voltage):
        ax.axhline(bv, color="0.3", ls="-.", lw=0.9, label=f"avalanche onset {q(bv, 'V')}")
    ax.plot([f.peak_time_s], [f.peak_voltage_V], "v", color="C0", ms=6)
    if annotate:
        ax.annotate(f"peak {q(f.peak_voltage_V, 'V')}\nat {q(f.peak_time_s, 's')}", (f.peak_time_s, f.peak_voltage_V),
                    textcoords="offset points", xytext=(10, -4), fontsize=7.5, va="top")


def _time_span(result) -> float:
    """End [s] of the whole-transient axis: the run and the release, and the release limit unless it is far off
    (it would squash the transient into the left edge; the legend then names it)."""
    end = max(float(result.waveforms.t[-1]), 1.06 * (result.figures.release_s or 0.0))
    limit = result.case.checks.max_release_time
    return max(end, 1.06 * limit) if limit is not None and limit <= 2.5 * end else end


def _release(ax, result, whole: bool):
    case, f = result.case, result.figures
    rel = case.coil.release_current
    if rel is None:
        return
    ax.axhline(rel, color="0.45", ls=":", lw=1, label=f"release current {q(rel, 'A')}")
    if f.release_s is not None and whole:
        t_below = f.release_s - case.coil.release_delay
        ax.plot([t_below], [rel], "o", color="C2", ms=5, label=f"below release current at {q(t_below, 's')}")
        ax.axvline(f.release_s, color="C2", ls="--", lw=1,
                   label=f"released at {q(f.release_s, 's')} (+ {q(case.coil.release_delay, 's')} delay)")
    limit = case.checks.max_release_time
    if limit is not None and whole:
        if limit <= _time_span(result):
            ax.axvline(limit, color="#7d3c98", ls="--", lw=1, label=f"release limit {q(limit, 's')}")
        else:
            ax.plot([], [], " ", label=f"release limit {q(limit, 's')} (beyond the axis)")


def waveform_figure(result, t_zoom: float | None):
    """Switch-node voltage with its limits, coil current with the release point, and clamp and
    switch power — over the whole transient and, when ``t_zoom`` [s] is given, on the turn-off edge."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    w = result.waveforms
    power = _power_signals(result)
    cols = [(None, "whole transient")] if t_zoom is None else [(t_zoom, f"turn-off edge (first {q(t_zoom, 's')})"),
                                                               (None, "whole transient")]
    end = _time_span(result)
    fig = Figure(figsize=(9.2, 8.6) if t_zoom else (7.6, 7.6), layout="constrained")
    grid = fig.subplots(3, len(cols), sharex="col", squeeze=False,
                        gridspec_kw={"width_ratios": [1, 1.45]} if t_zoom else None)
    for c, (t_end, title) in enumerate(cols):
        av, ai, ap = grid[:, c]
        whole = t_end is None
        m = slice(None) if whole else w.t <= t_end * 1.0001
        t = w.t[m]
        av.plot(t, w.v[m], color="C0", lw=1.4, label="switch node")
        _limits(av, result, annotate=whole)
        ai.plot(t, w.i_coil[m], color="C1", lw=1.4, label="coil current")
        if not whole:
            ai.plot(t, (w.i_channel + w.i_offstate)[m], color="C4", lw=1.0, ls="--", label="switch current")
        for n, k in enumerate(w.circuit.active_chains):
            ai.plot(t, w.i_chains[n][m], lw=0.9, color=f"C{5 + n % 4}", label=f"clamp {w.circuit.chains[k].name}")
        _release(ai, result, whole)
        for n, (label, p) in enumerate(power):
            style = {"color": "C4", "ls": "--"} if label == "switch" else {"color": f"C{5 + n % 4}"}
            ap.plot(t, p[m], lw=1.1, label="switch (crossover, avalanche)" if label == "switch" else label, **style)
        if whole:
            ap.set_xlim(-0.02 * end, end)
            if end > 1.05 * w.t[-1]:
                for ax in (av, ai, ap):
                    ax.axvline(w.t[-1], color="0.55", lw=0.8, ls=(0, (1, 3)))
                av.annotate("end of run:\ncurrent at zero", (w.t[-1], 0.5), xycoords=("data", "axes fraction"),
                            xytext=(4, 0), textcoords="offset points", fontsize=7, color="0.35")
        av.set_title(title, fontsize=9.5)
        for ax, unit, name in ((av, "V", "switch-node voltage"), (ai, "A", "current"),
                               (ap, "W", "dissipated power")):
            ax.yaxis.set_major_formatter(EngFormatter(unit=unit))
            ax.xaxis.set_major_formatter(EngFormatter(unit="s"))
            ax.tick_params(labelsize=8)
            ax.grid(True, lw=0.4, alpha=0.6)
            if c == 0:
                ax.set_ylabel(name, fontsize=9)
            if whole or ax is ai:
                ax.legend(fontsize=7.5, loc="best", framealpha=0.92)
        lo, hi = ai.get_ylim()
        ai.set_ylim(min(lo, -0.04 * hi), hi)  # the current axis always shows zero
        ap.set_xlabel("time after turn-off", fontsize=9)
    return fig
