"""Every figure kickback draws, read back from matplotlib after it is laid out as it is saved:
no legend covers plotted data, no text is cut at the figure's edge or runs into another text,
every drawn line is labelled, and lines sharing an axes stay apart in greyscale print.

The geometry comes from matplotlib itself (window extents of the texts and legends, the lines'
paths transformed to display coordinates), not from kickback's own placement code.
"""

from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.legend import Legend
from matplotlib.text import Text
from matplotlib.transforms import Bbox

from kickback import load_case, simulate
from kickback.outputs import style
from kickback.outputs.plots import edge_window, figure_bytes
from kickback.units import format_quantity

ROOT = Path(__file__).resolve().parent.parent
CASES = sorted((ROOT / "cases").glob("*.toml"))
EXAMPLES = ROOT / "examples"
VALVE = ROOT / "cases" / "irrigation_valve.toml"

#: two lines in one axes must differ by this much in BT.601 luma (0 black … 1 white; ITU-R BT.601
#: Y' = 0.299 R' + 0.587 G' + 0.114 B') unless their dash pattern or marker differs: 0.15 is about
#: 38 of 255 grey levels, plainly apart in a laser print (common practice, no source)
LUMA_STEP = 0.15


def _laid_out(fig):
    """Lay ``fig`` out as it is saved (PNG through kickback's own writer) and return a renderer."""
    assert figure_bytes(fig, "png")[:4] == b"\x89PNG"
    fig.set_dpi(130)  # measured at the PNG's resolution (hinted text widths are not proportional to it)
    return FigureCanvasAgg(fig).get_renderer()


def _drawn_tick_labels(ax):
    out = []
    for axis in ax._axis_map.values():  # the ticks matplotlib draws: those inside the view interval
        if not axis.get_visible():
            continue
        for tick in axis._update_ticks():
            for lab in (tick.label1, tick.label2):
                if lab.get_visible() and lab.get_text():
                    out.append(lab)
    return out


def _texts(fig, renderer):
    """(name, display box) of every drawn text outside legends, and of every legend as a whole."""
    legends = [leg for leg in fig.findobj(Legend) if leg.get_visible()]
    inside = {id(t) for leg in legends for t in leg.findobj(Text)}
    tick_labels = set()
    boxes = []
    for ax in fig.axes:
        for axis in ax._axis_map.values():
            tick_labels |= {id(t) for t in axis.get_ticklabels(which="both")}
            tick_labels |= {id(t.label2) for t in axis.get_major_ticks() + axis.get_minor_ticks()}
        if ax.get_visible():
            boxes += [(f"tick {t.get_text()!r}", t.get_window_extent(renderer)) for t in _drawn_tick_labels(ax)]
    for t in fig.findobj(Text):
        if id(t) in inside or id(t) in tick_labels or not t.get_visible() or not t.get_text().strip():
            continue
        ax = t.axes
        if ax is not None and not ax.get_visible():
            continue
        boxes.append((f"text {t.get_text()[:40]!r}", t.get_window_extent(renderer)))
    boxes += [(f"legend {[x.get_text() for x in leg.get_texts()][:2]}", leg.get_window_extent(renderer))
              for leg in legends]
    return boxes


def _covers(ax, box) -> str | None:
    """What in ``ax`` a display box covers: a line, marker, bar or scatter point (None: nothing)."""
    box = Bbox.intersection(box, ax.bbox)
    if box is None:
        return None
    for line in ax.lines:
        if not line.get_visible() or len(line.get_xdata()) == 0:
            continue
        path = line.get_transform().transform_path(line.get_path())
        if line.get_linestyle() != "None" and path.intersects_bbox(box, filled=False):
            return f"line {line.get_label()!r}"
        if line.get_marker() not in ("None", "", None) and box.count_contains(path.vertices):
            return f"marker {line.get_label()!r}"
    for patch in ax.patches:
        if patch.get_visible() and box.overlaps(patch.get_window_extent()):
            return f"patch {patch.get_label()!r}"
    for coll in ax.collections:
        off = coll.get_offsets()
        if len(off) and box.count_contains(coll.get_offset_transform().transform(off)):
            return f"points {coll.get_label()!r}"
    return None


def _dash(line):
    return line.get_linestyle(), tuple(np.round(line._unscaled_dash_pattern[1] or (), 2))


def audit(fig) -> list[str]:
    """Every defect of ``fig`` that a reader would stumble over, as readable strings."""
    renderer = _laid_out(fig)
    problems = []
    frame = fig.bbox.padded(0.5)
    for a in fig.get_children():  # name what runs over the edge
        box = a.get_tightbbox(renderer) if a.get_visible() and hasattr(a, "get_tightbbox") else None
        if box is not None and box.width and not (frame.containsx(box.x0) and frame.containsx(box.x1)
                                                  and frame.containsy(box.y0) and frame.containsy(box.y1)):
            problems.append(f"{type(a).__name__} {box.bounds} beyond the figure {fig.bbox.bounds}")
    tight = fig.get_tightbbox(renderer)  # inches
    w, h = fig.get_size_inches()
    if tight.x0 < -0.01 or tight.y0 < -0.01 or tight.x1 > w + 0.01 or tight.y1 > h + 0.01:
        problems.append(f"drawn beyond the figure: {tight.bounds} in a {w:.2f} × {h:.2f} in figure")
    boxes = _texts(fig, renderer)
    for name, box in boxes:
        if not frame.containsx(box.x0) or not frame.containsx(box.x1) or not frame.containsy(box.y0) \
                or not frame.containsy(box.y1):
            problems.append(f"{name} cut at the figure's edge")
    for (n1, b1), (n2, b2) in itertools.combinations(boxes, 2):
        if b1.width and b2.width and b1.shrunk(0.98, 0.9).overlaps(b2.shrunk(0.98, 0.9)):
            problems.append(f"{n1} overlaps {n2}")
    for leg in fig.findobj(Legend):
        box = leg.get_window_extent(renderer)
        for ax in fig.axes:
            hit = _covers(ax, box) if ax.get_visible() else None
            if hit:
                problems.append(f"legend {[t.get_text() for t in leg.get_texts()][:2]} covers {hit}")
    for ax in fig.axes:
        lines = [ln for ln in ax.lines if len(ln.get_xdata())]
        for ln in lines:
            if ln.get_label().startswith("_child"):
                problems.append(f"a line without a label in axes {ax.get_ylabel()!r}")
        named = [ln for ln in lines if not ln.get_label().startswith("_")]
        for a, b in itertools.combinations(named, 2):
            if a.get_label() == b.get_label():
                continue
            apart = abs(style.luma(a.get_color()) - style.luma(b.get_color())) >= LUMA_STEP
            if not (apart or _dash(a) != _dash(b) or a.get_marker() != b.get_marker()):
                problems.append(f"{a.get_label()!r} and {b.get_label()!r} alike in greyscale")
    return problems


@pytest.fixture(scope="module")
def results():
    return {p.stem: simulate(load_case(p)) for p in CASES}


@pytest.mark.parametrize("name", [p.stem for p in CASES])
def test_run_figure_reads_cleanly(results, name):
    r = results[name]
    fig, axes = r.plot()
    assert audit(fig) == []
    zoom = edge_window(r)
    if zoom is not None:  # the edge panel's title states the window its axis shows
        assert axes["edge voltage"].get_xlim()[1] == pytest.approx(zoom)
        assert format_quantity(zoom, "s") in axes["edge voltage"].get_title()


@pytest.mark.parametrize("name", [p.stem for p in CASES])
def test_report_figures_read_cleanly(results, name):
    from kickback.outputs.reportfigures import ledger_figure, waveform_figure

    r = results[name]
    zoom = edge_window(r)
    fig = waveform_figure(r, zoom)
    assert audit(fig) == []
    if zoom is not None:
        edge = fig.axes[0]
        assert edge.get_xlim()[1] == pytest.approx(zoom)
        assert f"first {format_quantity(zoom, 's')}" in edge.get_title()
    assert audit(ledger_figure(r)) == []


@pytest.mark.parametrize("name", ["fan_motor_pwm", "valve_pwm_hold"])
def test_pwm_figure_reads_cleanly(results, name):
    from kickback.outputs.pwmplots import pwm_figure

    assert audit(pwm_figure(results[name])) == []


def test_plot_into_a_users_axes_keeps_the_legend_off_the_traces(results):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(9, 4), layout="constrained")  # room for a legend outside, if no corner is free
    ax = fig.subplots()
    results["irrigation_valve"].plot(ax=ax)
    assert audit(fig) == []


def test_compare_figure_reads_cleanly():
    from kickback.outputs.comparison import comparison_figure
    from kickback.studies.compare import compare

    assert audit(comparison_figure(compare(load_case(VALVE)))) == []


@pytest.mark.parametrize("vary", [("clamp[0].element[1].voltage=10V:30V:6",),
                                  ("clamp[0].element[1].voltage=10V:30V:5", "coil.inductance=60mH:200mH:8")],
                         ids=["one value", "two values"])
def test_sweep_figure_reads_cleanly(vary):
    from kickback.outputs.sweeps import sweep_figure
    from kickback.studies.sweep import parse_vary, run_sweep

    sw = run_sweep(load_case(VALVE), tuple(parse_vary(v) for v in vary), engine="batch")
    assert audit(sweep_figure(sw)) == []


def test_tolerance_figure_labels_the_worst_corner_and_reads_cleanly():
    from kickback.outputs.tolerances import tolerance_figure
    from kickback.studies.tolerance import run_tolerance

    tr = run_tolerance(load_case(VALVE), 200, seed=3, workers=1, search_budget=6)
    fig = tolerance_figure(tr)
    assert audit(fig) == []
    worst = [ln.get_label() for ax in fig.axes for ln in ax.lines if "worst" in ln.get_label()]
    assert worst and all("corner" in lab for lab in worst)


def test_tradeoff_figure_reads_cleanly():
    from kickback.outputs.choice import tradeoff_figure
    from kickback.studies.choose import choose

    assert audit(tradeoff_figure(choose(load_case(VALVE), engine="batch"))) == []


@pytest.mark.parametrize("kind, trace, options", [
    ("decay", "valve_decay_trace.csv", {"clamp_resistance": 1.5}),
    ("rise", "valve_rise_trace.csv", {"shunt": 0.5, "saturating": True}),
])
def test_fit_figure_title_is_whole(kind, trace, options):
    from kickback.outputs.fitplots import fit_figure
    from kickback.studies.fit import fit_trace
    from kickback.traceio import read_trace

    tr = read_trace(EXAMPLES / trace, shunt=options.get("shunt"), want="current",
                    trigger=2e-3 if kind == "rise" else 0.0)
    fit = fit_trace(tr, kind=kind, supply=24.0, **options)
    assert audit(fit_figure(fit)) == []


def test_measured_figure_reads_cleanly(results):
    from kickback.outputs.fitplots import measured_figure
    from kickback.studies.measured import compare_measured
    from kickback.traceio import read_trace

    r = results["irrigation_valve"]
    tr = read_trace(EXAMPLES / "valve_decay_trace.csv", want="current")
    assert audit(measured_figure(r, tr, compare_measured(r, tr))) == []


def test_audit_catches_what_it_is_for():
    """The audit itself: a legend on a trace, a cut title, two labels on top of each other, an
    unlabelled line and two solid lines of one grey are each reported."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(4, 3))
    ax = fig.subplots()
    t = np.linspace(0, 1, 50)
    ax.plot(t, np.full_like(t, 0.95), label="flat")
    ax.plot(t, 1 - t, color="#8c564b", label="brown")  # luma 0.40, solid: alike the default blue (0.42)
    ax.plot(t, 0.5 + 0 * t, color="#7f7f7f")
    ax.legend(loc="upper right")
    ax.set_xlabel("x")
    fig.text(0.5, 0.0, "x", ha="center")
    fig.suptitle("a title much too long for a figure only four inches wide, cut at both ends")
    found = "\n".join(audit(fig))
    assert "covers line 'flat'" in found
    assert "cut at the figure's edge" in found
    assert "overlaps" in found
    assert "without a label" in found
    assert "alike in greyscale" in found


def test_palette_roles_drawn_together_stay_apart_in_greyscale():
    # roles drawn in one axes (the current panel, the voltage panel): luma apart by LUMA_STEP or
    # dash pattern apart; the coil and its first clamp (often the same current) by both
    assert abs(style.luma(style.COIL["color"]) - style.luma(style.clamp_style(0)["color"])) >= LUMA_STEP
    assert style.COIL["ls"] != style.clamp_style(0)["ls"]
    assert abs(style.luma(style.VOLTAGE["color"]) - style.luma(style.COIL["color"])) >= LUMA_STEP
    seen = {(style.series_style(n)["color"], str(style.series_style(n)["ls"])) for n in range(7)}
    assert len({c for c, _ in seen}) == 7 and len({d for _, d in seen}) == 7


def test_edge_window_ends_exactly_at_its_stated_end():
    from kickback.outputs.plots import Window

    t = np.array([0.0, 1e-7, 3e-7, 9e-7, 1.4e-6, 2e-6])
    x = np.array([0.0, 5.0, 20.0, 45.0, 46.0, 40.0])
    win = Window(t, 1.2e-6)
    assert win.t[-1] == pytest.approx(1.2e-6) and win.t.max() <= 1.2e-6 * (1 + 1e-12)
    # the added point lies on the straight segment matplotlib draws between the samples (numpy.interp)
    assert win(x)[-1] == pytest.approx(np.interp(1.2e-6, t, x))
    assert Window(t, None)(x).tolist() == x.tolist()
    assert Window(t, 3e-7)(x).tolist() == [0.0, 5.0, 20.0]  # a sample exactly at the end: nothing added


# (demo data) an invented MOSFET with no breakdown voltage and no clamp: the node rings to kilovolts
# and the coil current swings to about −0.8 A before it decays (through the body diode)
RINGING = """title = "MOSFET without breakdown voltage, no clamp (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "100 mH"
resistance = "30 Ω"
release_current = "100 mA"
[switch]
type = "mosfet"
on_resistance = "50 mΩ"
fall_time = "100 ns"
capacitance = "300 pF"
rated_voltage = "60 V"
"""


def test_ringing_case_gets_an_edge_zoom_and_its_release_point_on_the_curve(tmp_path):
    from kickback.outputs.reportfigures import waveform_figure

    path = tmp_path / "ringing.toml"
    path.write_text(RINGING, encoding="utf-8")
    r = simulate(load_case(path))
    assert r.waveforms.i_coil.min() < -0.1, "the case must ring below −release current"
    fig, axes = r.plot()
    assert audit(fig) == []
    assert "edge voltage" in axes, "the first 10 µs swing is unreadable on the whole-run axis alone"
    for figure in (fig, waveform_figure(r, edge_window(r))):
        marks = [ln for ax in figure.axes for ln in ax.lines if ln.get_label().startswith("below release")]
        assert marks
        for ln in marks:  # on the drawn curve: the current there is −0.1 A (release is judged on |i|)
            t, y = ln.get_xdata()[0], ln.get_ydata()[0]
            assert y == pytest.approx(np.interp(t, r.waveforms.t, r.waveforms.i_coil), abs=2e-3)
        levels = {round(ln.get_ydata()[0], 6) for ax in figure.axes for ln in ax.lines
                  if ln.get_label().startswith("release current") or
                  (ln.get_label() == "_" and ln.get_color() == style.RELEASE_CURRENT["color"])}
        assert {0.1, -0.1} <= levels


@pytest.mark.parametrize("size", [(11, 7), (6, 4)], ids=["wide", "narrow"])
def test_footnote_and_title_stay_whole_however_long(size):
    from matplotlib.figure import Figure

    fig = Figure(figsize=size, layout="constrained")
    ax = fig.subplots()
    ax.plot([0, 1], [0, 1], label="a line")
    ax.set_xlabel("coil.inductance")
    style.title(fig, "A case title that is long, " * 6 + "(demo data)")
    style.footnote(fig, "detailed engine; the batch engine does not cover this case (TVS1: TVS1 has a thermal "
                   "network: junction temperatures are computed by the detailed engine only): " * 3)
    assert audit(fig) == []


def test_free_legend_takes_a_free_corner_and_leaves_the_axes_only_when_none_is():
    from matplotlib.figure import Figure

    t = np.linspace(0.0, 1.0, 200)
    fig = Figure(figsize=(6, 4))
    ax = fig.subplots()
    ax.plot(t, t, label="rising")  # upper left and lower right are free, upper right is not
    leg = style.free_legend(ax, fontsize=8)
    renderer = FigureCanvasAgg(fig).get_renderer()
    box = leg.get_window_extent(renderer)
    assert ax.bbox.containsx(box.x0) and ax.bbox.containsx(box.x1), "a free corner exists: stay inside"
    assert _covers(ax, box) is None
    fig = Figure(figsize=(6, 4), layout="constrained")
    ax = fig.subplots()
    for k in range(7):  # horizontal lines across the whole axes: no corner is free
        ax.plot(t, np.full_like(t, k / 6), label=f"level {k}", **style.series_style(k))
    leg = style.free_legend(ax, fontsize=8)
    assert audit(fig) == []
    assert leg.get_window_extent(FigureCanvasAgg(fig).get_renderer()).x0 >= ax.bbox.x1
