"""Waveform figures with matplotlib (imported only here, when a picture is drawn)."""

from __future__ import annotations

from kickback.units import format_quantity as q


def _setup():
    """Figure class and formatter; no pyplot (faster to import, and no GUI state is touched)."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    return Figure, EngFormatter


def edge_window(result) -> float | None:
    """End [s] of a zoom on the turn-off edge, or None when the edge is not much faster than the decay."""
    f = result.figures
    w = result.waveforms
    edge = max(w.circuit.switch.fall_time, f.peak_time_s)
    end = f.to_zero_s or w.t[-1]
    if edge <= 0 or end / max(edge, 1e-300) < 50:
        return None
    return min(end, 8 * edge)


def _draw(ax_v, ax_i, result, t_end=None, annotate=True):
    _, Eng = _setup()
    w = result.waveforms
    f = result.figures
    case = result.case
    m = slice(None) if t_end is None else w.t <= t_end * 1.0001
    t = w.t[m]
    ax_v.plot(t, w.v[m], color="C0", lw=1.4, label="switch node")
    ax_i.plot(t, w.i_coil[m], color="C1", lw=1.4, label="coil current")
    if t_end is not None:
        ax_i.plot(t, (w.i_channel + w.i_offstate)[m], color="C4", lw=1.0, ls="--", label="switch current")
    for n, k in enumerate(w.circuit.active_chains):
        ax_i.plot(t, w.i_chains[n][m], lw=0.9, color=f"C{5 + n % 4}", alpha=0.9,
                  label=f"clamp '{w.circuit.chains[k].name}' current")
    rated = case.switch.rated_voltage
    if rated is not None:
        lim = rated * case.checks.derating
        ax_v.axhline(lim, color="C3", ls="--", lw=1,
                     label=f"switch rating × {case.checks.derating:g} = {q(lim, 'V')}")
    ax_v.axhline(case.supply.voltage, color="0.5", ls=":", lw=1, label="supply")
    if t_end is None or f.peak_time_s <= t_end:
        ax_v.plot([f.peak_time_s], [f.peak_voltage_V], "v", color="C0", ms=7)
        if annotate:
            ax_v.annotate(f"peak {q(f.peak_voltage_V, 'V')} at {q(f.peak_time_s, 's')}",
                          (f.peak_time_s, f.peak_voltage_V),
                          textcoords="offset points", xytext=(8, 4), fontsize=8)
    rel = case.coil.release_current
    if rel is not None and t_end is None:
        ax_i.axhline(rel, color="0.5", ls=":", lw=1, label="release current")
        if f.release_s is not None:
            t_rel = f.release_s - case.coil.release_delay
            if t_end is None or t_rel <= t_end:
                ax_i.plot([t_rel], [rel], "o", color="C2", ms=6,
                          label=f"below release current at {q(t_rel, 's')}")
    for ax, unit in ((ax_v, "V"), (ax_i, "A")):
        ax.yaxis.set_major_formatter(Eng(unit=unit))
        ax.xaxis.set_major_formatter(Eng(unit="s"))
        ax.grid(True, lw=0.4, alpha=0.6)
    ax_v.set_ylabel("switch-node voltage")
    ax_i.set_ylabel("current")
    ax_i.set_xlabel("time after turn-off")


def plot_result(result, ax=None):
    """Draw the switch-node voltage and coil current of ``result``.

    Parameters
    ----------
    result : Result
    ax : Axes or None — draw the voltage into ``ax`` and the current into a twin axis

    Returns
    -------
    (figure, dict of axes)
    """
    Figure, _ = _setup()
    if ax is not None:
        ax_i = ax.twinx()
        _draw(ax, ax_i, result)
        return ax.figure, {"voltage": ax, "current": ax_i}
    zoom = edge_window(result)
    if zoom is None:
        fig = Figure(figsize=(8, 6), layout="constrained")
        av, ai = fig.subplots(2, 1, sharex=True)
        axes = {"voltage": av, "current": ai}
        _draw(av, ai, result)
    else:
        fig = Figure(figsize=(11, 6), layout="constrained")
        grid = fig.subplots(2, 2, sharex="col", gridspec_kw={"width_ratios": [1, 1.6]})
        _draw(grid[0, 0], grid[1, 0], result, t_end=zoom, annotate=False)
        _draw(grid[0, 1], grid[1, 1], result)
        grid[0, 0].set_title("turn-off edge", fontsize=10)
        grid[0, 1].set_title("whole decay", fontsize=10)
        axes = {"edge voltage": grid[0, 0], "edge current": grid[1, 0], "voltage": grid[0, 1],
                "current": grid[1, 1]}
    axes["voltage"].legend(fontsize=8, loc="center right")
    axes["current"].legend(fontsize=8, loc="upper right")
    if "edge current" in axes:
        axes["edge current"].legend(fontsize=8, loc="center right")
    verdict = "NO VERDICT (audit failed)" if result.passed is None else ("PASS" if result.passed else "FAIL")
    fig.suptitle(f"{result.case.title} — {verdict}", fontsize=11)
    return fig, axes


def figure_bytes(fig, fmt: str) -> bytes:
    """``fig`` as PNG or SVG bytes; the SVG is deterministic (fixed hash salt, no date)."""
    import io

    import matplotlib

    meta = {"Date": None} if fmt == "svg" else {"Software": None}
    with matplotlib.rc_context({"svg.hashsalt": "kickback", "svg.fonttype": "path"}):
        buf = io.BytesIO()
        fig.savefig(buf, format=fmt, dpi=130, metadata=meta)
    if fig.get_layout_engine() is not None:
        fig.set_layout_engine("none")  # laid out once: the next format reuses the positions
    return buf.getvalue()
