"""Waveform figures with matplotlib (imported only here, when a picture is drawn).

The figure of ``kickback run --out`` has a fixed layout: margins in inches, the legends to the
right of the last column (so they cover no trace) and the figure widened by their measured
width. No layout engine runs at save time (a constrained layout costs ~0.2 s per figure);
``tests/test_plots.py`` checks that no text is clipped or overlaps another.
"""

from __future__ import annotations

from kickback.outputs import style
from kickback.units import format_quantity as q


def _setup():
    """Figure class and formatter; no pyplot (faster to import, and no GUI state is touched)."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    return Figure, EngFormatter


def edge_window(result) -> float | None:
    """End [s] of a zoom on the turn-off edge, or None when the edge is not much faster than the
    whole run (a current that rings through zero early still gets its zoom when the run is long)."""
    f = result.figures
    w = result.waveforms
    edge = max(w.circuit.switch.fall_time, f.peak_time_s)
    end = max(f.to_zero_s or 0.0, float(w.t[-1]))
    if edge <= 0 or end / max(edge, 1e-300) < 50:
        return None
    return min(end, 8 * edge)


class Window:
    """The samples of a time window from the start to ``t_end`` [s] (None: all): those up to it and
    one interpolated at ``t_end``, so that a trace reaches the window's right edge exactly and nothing
    lies beyond it (the line drawn between two samples is straight, so the picture is the same).

    ``Window(t, t_end).t`` are the times; calling it on a signal sampled at ``t`` gives its values.
    """

    def __init__(self, t, t_end: float | None):
        import numpy as np

        self._t, self._end = np.asarray(t, dtype=float), t_end
        n = len(self._t)
        self._k = n if t_end is None else int(np.searchsorted(self._t, t_end, side="right"))
        self._cut = t_end is not None and 0 < self._k < n and self._t[self._k - 1] < t_end
        self.t = self(self._t)

    def __call__(self, x):
        import numpy as np

        x = np.asarray(x, dtype=float)
        if not self._cut:
            return x[:self._k]
        k, t = self._k, self._t
        share = (self._end - t[k - 1]) / (t[k] - t[k - 1])
        return np.append(x[:k], x[k - 1] + share * (x[k] - x[k - 1]))


def release_marks(result):
    """How to draw the release current: its levels [A] (±, when the coil current rings below
    −release current: the release is judged on |i|), their legend label, and the point (t, i)
    where |i| falls below it for good (None when it never does); None without a release current."""
    import numpy as np

    case, f, w = result.case, result.figures, result.waveforms
    rel = case.coil.release_current
    if rel is None:
        return None
    both = float(np.min(w.i_coil)) < -rel
    levels = (rel, -rel) if both else (rel,)
    label = f"release current {'±' if both else ''}{q(rel, 'A')}"
    if f.release_s is None:
        return levels, label, None
    t_rel = f.release_s - case.coil.release_delay
    side = -1.0 if float(np.interp(t_rel, w.t, w.i_coil)) < 0 else 1.0
    return levels, label, (t_rel, side * rel)


def _draw(ax_v, ax_i, result, t_end=None):
    from matplotlib.ticker import MaxNLocator

    _, Eng = _setup()
    w = result.waveforms
    f = result.figures
    case = result.case
    m = Window(w.t, t_end)
    t = m.t
    ax_v.plot(t, m(w.v), label="switch-node voltage", **style.VOLTAGE)
    ax_i.plot(t, m(w.i_coil), label="coil current", **style.COIL)
    if t_end is not None:
        ax_i.plot(t, m(w.i_channel + w.i_offstate), label="switch current", **style.SWITCH_CURRENT)
    for n, k in enumerate(w.circuit.active_chains):
        ax_i.plot(t, m(w.i_chains[n]), label=f"clamp '{w.circuit.chains[k].name}' current", **style.clamp_style(n))
    rated = case.switch.rated_voltage
    if rated is not None:
        lim = rated * case.checks.derating
        ax_v.axhline(lim, label=f"switch rating × {case.checks.derating:g} = {q(lim, 'V')}", **style.LIMIT)
    ax_v.axhline(case.supply.voltage, label=f"supply {q(case.supply.voltage, 'V')}", **style.SUPPLY)
    bv = case.switch.breakdown_voltage
    if bv is not None and bv < 1.6 * max(f.peak_voltage_V, case.supply.voltage):
        ax_v.axhline(bv, label=f"avalanche onset {q(bv, 'V')}", **style.AVALANCHE)
    if t_end is None or f.peak_time_s <= t_end:
        ax_v.plot([f.peak_time_s], [f.peak_voltage_V], label=f"peak {q(f.peak_voltage_V, 'V')} at "
                  f"{q(f.peak_time_s, 's')}", **style.PEAK_MARKER)
    marks = release_marks(result)
    if marks is not None:
        levels, label, point = marks
        for n, level in enumerate(levels):
            ax_i.axhline(level, label=label if n == 0 else "_", **style.RELEASE_CURRENT)
        if point is not None and (t_end is None or point[0] <= t_end):
            ax_i.plot([point[0]], [point[1]], label=f"below release current at {q(point[0], 's')}",
                      **style.RELEASE_MARKER)
    for ax, unit in ((ax_v, "V"), (ax_i, "A")):
        ax.yaxis.set_major_formatter(Eng(unit=unit))
        ax.xaxis.set_major_formatter(Eng(unit="s"))
        ax.grid(True, lw=0.4, alpha=0.6)
        if t_end is not None:
            ax.set_xlim(min(0.0, float(t[0])), t_end)
            ax.xaxis.set_major_locator(MaxNLocator(nbins=5, steps=[1, 2, 2.5, 5, 10]))
    ax_v.set_ylabel("switch-node voltage")
    ax_i.set_ylabel("current")
    ax_i.set_xlabel("time after turn-off")


#: fixed layout of the run figure [in]
LEFT, GAP, RIGHT_PAD, BOTTOM, ROW_GAP, LEGEND_GAP = 1.05, 1.1, 0.15, 0.6, 0.25, 0.2


def plot_result(result, ax=None):
    """Draw the switch-node voltage and coil current of ``result``.

    Parameters
    ----------
    result : Result
    ax : Axes or None — draw the voltage into ``ax`` and the current into a twin axis; the
        legend goes to a corner where it covers no trace, else outside the axes on the right

    Returns
    -------
    (figure, dict of axes)
    """
    Figure, _ = _setup()
    if ax is not None:
        ax_i = ax.twinx()
        _draw(ax, ax_i, result)
        ax_i.set_xlabel("")
        ax.set_xlabel("time after turn-off")
        handles, labels = style.row_handles(ax, ax_i)
        style.free_legend(ax_i, others=(ax,), handles=handles, labels=labels, fontsize=8)
        return ax.figure, {"voltage": ax, "current": ax_i}
    zoom = edge_window(result)
    widths = [6.6] if zoom is None else [3.5, 5.2]
    height = 6.0
    fig = Figure(figsize=(LEFT + sum(widths) + GAP * (len(widths) - 1) + 3.0, height))
    gs = fig.add_gridspec(2, len(widths), width_ratios=widths)
    grid = gs.subplots(sharex="col", squeeze=False)
    if zoom is None:
        av, ai = grid[:, 0]
        _draw(av, ai, result)
        axes = {"voltage": av, "current": ai}
        rows = [(av,), (ai,)]
    else:
        _draw(grid[0, 0], grid[1, 0], result, t_end=zoom)
        _draw(grid[0, 1], grid[1, 1], result)
        # y given: matplotlib skips placing the titles above the axes' tick labels (none on top
        # here), a measurement of every y tick label at each save
        grid[0, 0].set_title(f"turn-off edge (first {q(zoom, 's')})", fontsize=10, y=1.0)
        grid[0, 1].set_title("whole decay", fontsize=10, y=1.0)
        axes = {"edge voltage": grid[0, 0], "edge current": grid[1, 0], "voltage": grid[0, 1],
                "current": grid[1, 1]}
        rows = [(grid[0, 1], grid[0, 0]), (grid[1, 1], grid[1, 0])]
    legends = [style.outside_legend(r[0], *style.row_handles(*r)) for r in rows]
    renderer = style.renderer_of(fig)
    legend_w = max(leg.get_window_extent(renderer).width for leg in legends) / fig.dpi
    fig_w = LEFT + sum(widths) + GAP * (len(widths) - 1) + LEGEND_GAP + legend_w + RIGHT_PAD
    fig.set_size_inches(fig_w, height)
    verdict = "NO VERDICT (audit failed)" if result.passed is None else ("PASS" if result.passed else "FAIL")
    head = style.title(fig, f"{result.case.title} — {verdict}")
    top = 0.3 + 0.21 * (head.get_text().count("\n") + 1) + (0.3 if zoom else 0.0)
    gs.update(left=LEFT / fig_w, right=(fig_w - RIGHT_PAD - legend_w - LEGEND_GAP) / fig_w,
              bottom=BOTTOM / height, top=1.0 - top / height,
              wspace=GAP / (sum(widths) / len(widths)), hspace=ROW_GAP / ((height - BOTTOM - top) / 2))
    for ax_ in grid.flat:  # GridSpec.update moves only pyplot's figures' axes
        ax_.set_position(ax_.get_subplotspec().get_position(fig))
    for ax_ in grid[:, 0]:
        ax_.yaxis.set_label_coords(-(LEFT - 0.22) / widths[0], 0.5)  # y labels aligned, clear of ticks
    return fig, axes


#: resolution of the pictures written [dots per inch]
DPI = 130


def figure_bytes(fig, fmt: str) -> bytes:
    """``fig`` as PNG or SVG bytes; the SVG is deterministic (fixed hash salt, no date)."""
    import io

    import matplotlib

    meta = {"Date": None} if fmt == "svg" else {"Software": None}
    with matplotlib.rc_context({"svg.hashsalt": "kickback", "svg.fonttype": "path"}):
        buf = io.BytesIO()
        if fmt != "png" or not _opaque_png(fig, buf):
            fig.savefig(buf, format=fmt, dpi=DPI, metadata=meta)
    if fig.get_layout_engine() is not None:
        fig.set_layout_engine("none")  # laid out once: the next format reuses the positions
    return buf.getvalue()


def _opaque_png(fig, buf) -> bool:
    """Write ``fig`` into ``buf`` as a PNG of RGB pixels when every pixel is opaque (our figures
    have a white background): the same picture as matplotlib's RGBA PNG, a quarter less data to
    compress, at zlib level 3 (about half the encoding time of matplotlib's level 6, and still
    smaller than its RGBA file). False, with nothing written, when a pixel is not opaque or the
    pixel buffer has another size than the figure's.
    """
    import io

    from PIL import Image

    raw = io.BytesIO()
    fig.savefig(raw, format="rgba", dpi=DPI)
    w, h = (int(v) for v in fig.get_size_inches() * DPI)  # as matplotlib's Agg renderer sizes it
    data = raw.getbuffer()
    if w * h * 4 != len(data):
        return False
    img = Image.frombuffer("RGBA", (w, h), data, "raw", "RGBA", 0, 1)
    if img.getextrema()[3] != (255, 255):
        return False
    img.convert("RGB").save(buf, format="png", dpi=(DPI, DPI), compress_level=3)
    return True
