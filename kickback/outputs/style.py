"""One colour scheme and one set of line styles for every figure, and legends that keep traces visible.

Colours are the Okabe–Ito palette, published for readers with any common colour-vision
deficiency. Colour alone does not separate lines that share an axes: each role also has its
own line style (or marker), so a greyscale print still tells them apart — wherever two roles
drawn together are within 0.15 of each other in BT.601 luma, their dash patterns differ
(``tests/test_plots.py`` holds every figure to that).

Roles are fixed across the project: switch quantities blue, the coil black, clamps orange
(then sky blue, reddish purple for further chains), the release green, limits vermillion,
the supply and other references grey.

matplotlib is imported only inside the functions (see :mod:`kickback.outputs.plots`).

References
----------
.. [1] M. Okabe and K. Ito, "Color Universal Design (CUD): How to make figures and presentations
   that are friendly to colorblind people", J*Fly, 2008. https://jfly.uni-koeln.de/color/
.. [2] B. Wong, "Points of view: Color blindness", Nature Methods 8, 441 (2011),
   doi:10.1038/nmeth.1618 (the same eight colours).
.. [3] ITU-R Recommendation BT.601: luma Y' = 0.299 R' + 0.587 G' + 0.114 B'.
"""

from __future__ import annotations

#: the Okabe–Ito palette [1]_ (yellow #F0E442 left out: too pale for a line on white)
BLACK = "#000000"
ORANGE = "#E69F00"
SKY_BLUE = "#56B4E9"
GREEN = "#009E73"
BLUE = "#0072B2"
VERMILLION = "#D55E00"
PURPLE = "#CC79A7"
GREY = "#767676"
LIGHT_GREY = "#A0A0A0"

#: what each quantity looks like in every figure: matplotlib line keywords
VOLTAGE = {"color": BLUE, "ls": "-", "lw": 1.5}
COIL = {"color": BLACK, "ls": "-", "lw": 1.6}
SWITCH_CURRENT = {"color": BLUE, "ls": (0, (5, 2)), "lw": 1.1}
LIMIT = {"color": VERMILLION, "ls": "--", "lw": 1.1}
CASE_LIMIT = {"color": PURPLE, "ls": (0, (6, 2, 1, 2)), "lw": 1.1}
SUPPLY = {"color": GREY, "ls": ":", "lw": 1.1}
RELEASE_CURRENT = {"color": GREEN, "ls": (0, (1, 2.5)), "lw": 1.2}
RELEASE = {"color": GREEN, "ls": (0, (3, 1.5)), "lw": 1.1}
AVALANCHE = {"color": BLACK, "ls": "-.", "lw": 0.9}
WORST = {"color": BLACK, "ls": ":", "lw": 1.3}
PEAK_MARKER = {"color": BLUE, "marker": "v", "ms": 7, "ls": "none"}
RELEASE_MARKER = {"color": GREEN, "marker": "o", "ms": 6, "ls": "none", "mec": BLACK, "mew": 0.6}
FAIL_MARKER = {"color": VERMILLION, "marker": "x", "ms": 8, "mew": 1.5, "ls": "none"}
FILL = BLUE  # histogram bars and areas

_CLAMPS = ((ORANGE, (0, (4, 1.5))), (SKY_BLUE, "-."), (PURPLE, (0, (1, 1.2))), (GREEN, (0, (6, 1.5, 1, 1.5))))


def clamp_style(k: int) -> dict:
    """Line keywords for clamp chain number ``k`` (0-based), drawn over the coil current it may equal."""
    color, ls = _CLAMPS[k % len(_CLAMPS)]
    return {"color": color, "ls": ls, "lw": 1.3}


#: series of like things (clamp options, duties, families): colours without the limit's vermillion
_SERIES_COLOURS = (BLUE, ORANGE, BLACK, SKY_BLUE, GREEN, PURPLE, GREY)
_SERIES_DASHES = ("-", (0, (5, 2)), "-.", (0, (1, 1.2)), (0, (8, 2, 1, 2)), (0, (3, 1, 1, 1, 1, 1)), (0, (2, 2)))
_SERIES_MARKERS = ("o", "s", "^", "D", "v", "P", "X")


def series_style(n: int) -> dict:
    """Line keywords of series ``n``: colour, dash pattern and marker each cycle on their own
    period, so no two of the first 7 series share a colour or a dash pattern (and none of the first 49 both)."""
    return {"color": _SERIES_COLOURS[n % len(_SERIES_COLOURS)], "ls": _SERIES_DASHES[n % len(_SERIES_DASHES)]}


def series_marker(n: int) -> str:
    """Marker of series ``n`` (scatter plots)."""
    return _SERIES_MARKERS[n % len(_SERIES_MARKERS)]


def luma(colour) -> float:
    """Greyscale value (0 black … 1 white) of a matplotlib colour, BT.601 luma [3]_."""
    from matplotlib.colors import to_rgb

    r, g, b = to_rgb(colour)
    return 0.299 * r + 0.587 * g + 0.114 * b


# --- legends -------------------------------------------------------------------------------------

def renderer_of(fig):
    """A renderer to measure text with; our figures get an Agg canvas, a user's keeps its own."""
    canvas = fig.canvas
    if hasattr(canvas, "get_renderer"):
        return canvas.get_renderer()
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    return FigureCanvasAgg(fig).get_renderer()


def _covers(ax, box) -> bool:
    """Whether display box ``box`` covers anything drawn in ``ax`` (lines, markers, bars, texts)."""
    from matplotlib.transforms import Bbox

    box = Bbox.intersection(box, ax.bbox)
    if box is None:
        return False
    for line in ax.lines:
        if not line.get_visible() or len(line.get_xdata()) == 0:
            continue
        path = line.get_transform().transform_path(line.get_path())
        if line.get_linestyle() not in ("None", "none", "", " ") and path.intersects_bbox(box, filled=False):
            return True
        if line.get_marker() not in (None, "None", "none", "", " "):
            pad = line.get_markersize()
            if box.expanded(1.0, 1.0).padded(pad).count_contains(path.vertices):
                return True
    for patch in ax.patches:
        if patch.get_visible() and box.overlaps(patch.get_window_extent()):
            return True
    for coll in ax.collections:
        offsets = coll.get_offsets()
        if len(offsets) and coll.get_offset_transform() is not None:
            pts = coll.get_offset_transform().transform(offsets)
            if box.padded(6).count_contains(pts):
                return True
    renderer = renderer_of(ax.figure)
    return any(t.get_visible() and t.get_text() and box.overlaps(t.get_window_extent(renderer)) for t in ax.texts)


#: corners and edges tried in turn for a legend inside the axes
CORNERS = ("upper right", "upper left", "lower right", "lower left", "center right", "center left",
           "upper center", "lower center")


def free_legend(ax, others=(), candidates=CORNERS, **kw):
    """A legend in the first spot of ``candidates`` where it covers nothing drawn in ``ax`` or
    ``others`` (axes sharing its area, e.g. a twin); outside the axes, on the right, when none is
    free. Call it after the axes' limits and position are final.

    Returns
    -------
    matplotlib Legend
    """
    leg = ax.legend(loc=candidates[0], **kw)
    renderer = renderer_of(ax.figure)
    for loc in candidates:
        leg.set_loc(loc)
        box = leg.get_window_extent(renderer)
        if not any(_covers(a, box) for a in (ax, *others)):
            return leg
    from matplotlib.transforms import offset_copy

    right = max(a.yaxis.get_tightbbox(renderer).x1 for a in (ax, *others)) - ax.bbox.x1  # right-hand ticks
    leg.set_loc("upper left")
    leg.set_bbox_to_anchor((1.0, 1.0), transform=offset_copy(ax.transAxes, fig=ax.figure,
                                                             x=max(right, 0.0) * 72.0 / ax.figure.dpi + 6.0,
                                                             units="points"))
    return leg


def outside_legend(ax, handles=None, labels=None, **kw):
    """A legend to the right of ``ax``, top-aligned with it: it cannot cover a trace."""
    args = () if handles is None else (handles, labels)
    kw.setdefault("fontsize", 8)
    return ax.legend(*args, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0, **kw)


def row_handles(*axes) -> tuple[list, list]:
    """Legend handles and labels of several axes, each label once (the first axes' style wins)."""
    handles, labels = [], []
    for ax in axes:
        for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            if lab not in labels:
                handles.append(h)
                labels.append(lab)
    return handles, labels


# --- titles and notes ----------------------------------------------------------------------------

def wrap_to_width(text: str, width_in: float, fontsize: float) -> str:
    """``text`` wrapped to lines that fit ``width_in`` inches at ``fontsize`` points, measured
    with matplotlib's own glyph outlines (no renderer needed); 8 % is kept free because a raster
    renders small text with hinted, wider advances (a 6.5 pt line at 130 dpi came out 2.5 % wider)."""
    import textwrap

    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import TextPath

    prop = FontProperties(size=fontsize)
    width_in *= 0.92

    def width(s: str) -> float:  # [in]
        return TextPath((0, 0), s, prop=prop).get_extents().width / 72.0

    full = width(text) if text else 0.0
    if full <= width_in:
        return text
    chars = max(20, int(len(text) * width_in / full))
    while chars > 20:
        lines = textwrap.wrap(text, chars)
        if all(width(x) <= width_in for x in lines):
            return "\n".join(lines)
        chars = int(chars * 0.95)
    return "\n".join(textwrap.wrap(text, chars))


def title(fig, text: str, fontsize: float = 11):
    """The figure's title, wrapped to its width so it is never cut at the edges."""
    return fig.suptitle(wrap_to_width(text, fig.get_figwidth() - 0.3, fontsize), fontsize=fontsize)


NOTE_SIZE = 6.5


def note_height(fig, text: str) -> float:
    """Share of the figure's height [1] that a footnote of ``text`` takes, with a gap above it."""
    lines = text.count("\n") + 1
    return (lines * NOTE_SIZE * 1.3 + 10.0) / 72.0 / fig.get_figheight()


def footnote(fig, text: str):
    """``text`` in small grey type at the bottom of ``fig``; under a constrained layout the axes
    are kept above it (their tick and axis labels included)."""
    text = wrap_to_width(text, fig.get_figwidth() - 0.2, NOTE_SIZE)
    h = note_height(fig, text)
    engine = fig.get_layout_engine()
    if engine is not None and hasattr(engine, "set"):
        engine.set(rect=(0.0, h, 1.0, 1.0 - h))
    return fig.text(0.01, 0.004, text, fontsize=NOTE_SIZE, color="0.3", ha="left", va="bottom")
