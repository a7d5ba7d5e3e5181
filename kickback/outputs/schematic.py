"""The schematic of one case's topology, drawn with schemdraw's SVG backend.

:func:`layout` places every part of the case on a grid (pure Python, no drawing): the supply
on the left; the coil from the ``+`` rail down to the switch node ``sw`` and, under it, the
switch from ``sw`` down to ground; each clamp chain that sits across the coil beside the coil,
each chain that sits across the switch beside the switch. Chains are drawn from the switch node
outwards, in case order, each element oriented so the chain conducts when ``sw`` rises (a diode
forward, a Zener or unidirectional TVS in breakdown). :func:`schematic_svg` draws the layout;
schemdraw is imported only there.
"""

from __future__ import annotations

from dataclasses import dataclass

from kickback.case import Case, Element
from kickback.units import format_number as num
from kickback.units import format_quantity as q

#: vertical pitch of one chain element [schemdraw units]
PITCH = 2.3
#: width of one label character at the schematic's font size [schemdraw units] (measured, DejaVu Sans 10 pt)
CHAR_WIDTH = 0.17
FONT_SIZE = 10
#: room for a group's title between a chain and its far rail (coil side) or the switch node (switch side)
TITLE_BAND = 1.2
LABEL_GAP = 0.6  # column to its labels
COLUMN_GAP = 1.0  # a group's right edge to the next column
BOX_PAD = 0.7  # a group box's left edge to its first column
SWITCH_PAD = 2.3  # room for the gate drive left of the switch
SWITCH_LABEL_GAP = 0.5  # the switch column to its labels (the transistor symbol sits left of it)
#: element kinds that conduct in breakdown when sw rises: drawn reversed in the chain (a diode conducts
#: forward; resistor, capacitor, varistor and bidirectional TVS have no orientation)
_BREAKDOWN = ("zener", "tvs")


@dataclass(frozen=True)
class Part:
    """One two-terminal symbol between ``start`` and ``end`` [schemdraw units].

    ``kind``: supply, inductor, resistor, capacitor, diode, zener, tvs, tvs-bi, varistor, mosfet,
    bjt, ideal. ``reverse``: the symbol's forward direction runs from ``end`` to ``start``.
    ``group``: "supply", "coil", "switch" or "clamp <name>".
    """

    kind: str
    name: str
    label: tuple[str, ...]
    start: tuple[float, float]
    end: tuple[float, float]
    group: str
    reverse: bool = False


@dataclass(frozen=True)
class Group:
    """A dashed box around the parts of one group, with its title lines."""

    name: str
    title: tuple[str, ...]
    x0: float
    x1: float
    y0: float
    y1: float
    title_at: tuple[float, float]  # left end of the title's middle line


@dataclass(frozen=True)
class Layout:
    """Where everything goes. ``y_plus`` (+ rail) > ``y_sw`` = 0 > ``y_ground``."""

    parts: tuple[Part, ...]
    groups: tuple[Group, ...]
    wires: tuple[tuple[tuple[float, float], tuple[float, float]], ...]
    dots: tuple[tuple[float, float], ...]
    y_plus: float
    y_sw: float
    y_ground: float
    supply_label: str
    x_sw_start: float  # left end of the switch-node rail


def element_name(el: Element, index: int) -> str:
    """The name an element goes by in the report: its case name, else "<type> <n>" (as the figures)."""
    return el.name or f"{el.type} {index + 1}"


def element_label(el: Element, index: int) -> tuple[str, ...]:
    """Name, kind and the values that set the element's law, one line each."""
    name = element_name(el, index)
    t = el.type

    def head(kind: str) -> str:  # "D1  diode", but "TVS1" rather than "TVS1  TVS"
        return name if name.lower().startswith(kind.lower()) else f"{name}  {kind}"

    if t == "diode":
        lines = [head("diode")]
        if el.model == "constant-drop":
            lines.append(f"{q(el.forward_voltage, 'V')} drop")
        else:
            if el.forward_voltage is not None:
                lines.append(f"{q(el.forward_voltage, 'V')} at {q(el.at_current, 'A')}")
            if el.ideality is not None:
                lines.append(f"n {num(el.ideality)}")
            if el.saturation_current is not None:
                lines.append(f"Is {q(el.saturation_current, 'A')}")
        if el.series_resistance:
            lines.append(f"Rs {q(el.series_resistance, 'Ω')}")
        return tuple(lines)
    if t in ("zener", "tvs"):
        lines = [head("Zener" if t == "zener" else "TVS")]
        if t == "tvs":
            lines.append("bidirectional" if el.bidirectional else "unidirectional")
        if el.standoff_voltage is not None:
            lines.append(f"VWM {q(el.standoff_voltage, 'V')}")
        if el.test_current is not None:  # as the datasheet gives it
            v_at = el.breakdown_voltage if t == "tvs" else el.voltage
            lines.append(f"{'VZ' if t == 'zener' else 'VBR'} {q(v_at, 'V')} at {q(el.test_current, 'A')}")
            if el.clamping_voltage is not None:
                lines.append(f"VC {q(el.clamping_voltage, 'V')} at {q(el.peak_pulse_current, 'A')}")
            if el.impedance is not None:
                lines.append(f"ZZT {q(el.impedance, 'Ω')}")
            return tuple(lines)
        lines.append(f"{'VZ' if t == 'zener' else 'VBR'} {q(el.voltage, 'V')}")
        if el.dynamic_resistance:
            lines.append(f"rd {q(el.dynamic_resistance, 'Ω')}")
        return tuple(lines)
    if t == "resistor":
        return (head("resistor"), q(el.resistance, "Ω"))
    if t == "capacitor":
        return (head("capacitor"), q(el.capacitance, "F"))
    if t == "varistor":
        at = el.at_current if el.at_current is not None else 1e-3
        return (head("varistor"), f"{q(el.voltage, 'V')} at {q(at, 'A')}", f"α {num(el.exponent)}")
    raise ValueError(f"unknown element type {t!r}")


def _kind(el: Element) -> str:
    if el.type == "tvs" and el.bidirectional:
        return "tvs-bi"
    return el.type


def switch_label(case: Case) -> tuple[str, ...]:
    """The switch's type and the values that set its law."""
    s = case.switch
    lines = {"mosfet": ["MOSFET", f"RDS(on) {q(s.on_resistance, 'Ω')}"],
             "bjt": ["BJT", f"VCE(sat) {q(s.saturation_voltage, 'V')}"],
             "ideal": ["ideal switch", "opens at t = 0"]}[s.type]
    lines.append(f"fall {q(s.fall_time, 's')}" if s.fall_time else "instant turn-off")
    if s.breakdown_voltage is not None:
        lines.append(f"avalanche {q(s.breakdown_voltage, 'V')}")
    if s.rated_voltage is not None:
        lines.append(f"rated {q(s.rated_voltage, 'V')}")
    return tuple(lines)


def coil_label(coil) -> tuple[str, ...]:
    """The coil's inductance; a saturating core shows L0 and its saturation current."""
    isat = getattr(coil, "saturation_current", None)
    if isat is None:
        return (f"L {q(coil.inductance, 'H')}",)
    return (f"L0 {q(coil.inductance, 'H')}", f"Isat {q(isat, 'A')}", "saturating core")


def _text_width(lines, small: bool = False) -> float:
    """Width [schemdraw units] of the longest line at the label font size (one point smaller: ``small``)."""
    scale = (FONT_SIZE - 1) / FONT_SIZE if small else 1.0
    return scale * CHAR_WIDTH * max((len(x) for x in lines), default=0)


def _column(parts: list, wires: list, x: float, y_sw: float, y_far: float, items, group: str) -> float:
    """Place a series chain in column ``x`` from the switch node to ``y_far`` (the + rail or ground).

    The chain starts at the switch node and leaves a title band next to the + rail (above sw)
    or next to the switch node (below sw). ``items``: (kind, name, label, reverse) in chain order.
    Returns the widest label [schemdraw units].
    """
    up = y_far > y_sw
    near, far = (y_sw, y_far - TITLE_BAND) if up else (y_sw - TITLE_BAND, y_far)
    wires.append(((x, y_far), (x, far)) if up else ((x, y_sw), (x, near)))  # the lead through the title band
    n = len(items)
    ys = [near + k * (far - near) / n for k in range(n + 1)]
    for k, (kind, name, label, reverse) in enumerate(items):
        parts.append(Part(kind, name, label, (x, ys[k]), (x, ys[k + 1]), group, reverse))
    return max(_text_width(it[2]) for it in items)


def _chain_items(elements) -> list:
    out = []
    for j, el in enumerate(elements):
        kind = _kind(el)
        out.append((kind, element_name(el, j), element_label(el, j), kind in _BREAKDOWN))
    return out


def _group(groups, name, title, x_first, x_right, y_sw, y_far) -> float:
    """A dashed box from the first column's left to ``x_right`` (widened to its title); returns its right edge."""
    right = max(x_right, x_first + LABEL_GAP + _text_width(title, small=True))
    lo, hi = sorted((y_sw, y_far))
    groups.append(Group(name, tuple(title), x_first - BOX_PAD, right, lo + 0.35, hi - 0.35,
                        (x_first + LABEL_GAP, hi - 0.5 * (TITLE_BAND + 0.35))))
    return right


def layout(case: Case) -> Layout:
    """Place the supply, coil, switch and every clamp chain of ``case``.

    Parameters
    ----------
    case : Case

    Returns
    -------
    Layout — coordinates in schemdraw units; the switch node at y = 0, the + rail above, ground below
    """
    coil_clamps = [c for c in case.clamps if c.across == "coil"]
    switch_clamps = [c for c in case.clamps if c.across == "switch"]
    n_top = max([2] + [len(c.elements) for c in coil_clamps])
    n_bot = max([1.4] + [len(c.elements) for c in switch_clamps])  # 1.4: room for the switch's label
    y_sw = 0.0
    y_plus = n_top * PITCH + TITLE_BAND
    y_gnd = -(n_bot * PITCH + TITLE_BAND)
    parts: list[Part] = []
    groups: list[Group] = []
    wires: list = []
    vs = q(case.supply.voltage, "V")
    parts.append(Part("supply", "supply", (vs, "supply"), (0.0, y_gnd), (0.0, y_plus), "supply"))
    top_cols: list[float] = []
    bot_cols: list[float] = []

    # coil: L and its winding resistance in series from + to sw; winding capacitance beside them
    c = case.coil
    x_main = SWITCH_PAD + 1.2  # the coil and, under it, the switch; the gate drive fits left of it
    top_cols.append(x_main)
    width = _column(parts, wires, x_main, y_sw, y_plus,
                    [("resistor", "R", (f"R {q(c.resistance, 'Ω')}", "winding"), False),
                     ("inductor", "L", coil_label(c), False)], "coil")
    right = x_main + LABEL_GAP + width
    if c.capacitance:
        xc = right + COLUMN_GAP
        top_cols.append(xc)
        right = xc + LABEL_GAP + _column(parts, wires, xc, y_sw, y_plus,
                                         [("capacitor", "Cw", (f"Cw {q(c.capacitance, 'F')}", "winding"), False)],
                                         "coil")
    title = ["coil"]
    if c.release_current is not None:
        title.append(f"releases below {q(c.release_current, 'A')}"
                     + (f" + {q(c.release_delay, 's')}" if c.release_delay else ""))
    if c.initial_current is not None:
        title.append(f"starts at {q(c.initial_current, 'A')}")
    x = _group(groups, "coil", title, x_main, right, y_sw, y_plus)
    for cl in coil_clamps:
        xc = x + COLUMN_GAP + BOX_PAD
        top_cols.append(xc)
        width = _column(parts, wires, xc, y_sw, y_plus, _chain_items(cl.elements), f"clamp {cl.name}")
        x = _group(groups, f"clamp {cl.name}", (cl.name, "across the coil"), xc, xc + LABEL_GAP + width,
                   y_sw, y_plus)

    # switch: under the coil, from sw down to ground, gate drive on its left; output capacitance beside it
    s = case.switch
    bot_cols.append(x_main)
    label = switch_label(case)
    width = _column(parts, wires, x_main, y_sw, y_gnd, [(s.type, "switch", label, False)], "switch")
    right = x_main + SWITCH_LABEL_GAP + width
    if s.capacitance:
        xc = right + COLUMN_GAP
        bot_cols.append(xc)
        right = xc + LABEL_GAP + _column(parts, wires, xc, y_sw, y_gnd,
                                         [("capacitor", "Coss", (f"Coss {q(s.capacitance, 'F')}", "output"),
                                           False)], "switch")
    x = _group(groups, "switch", ("switch",), x_main, right, y_sw, y_gnd)
    g = groups[-1]
    groups[-1] = Group(g.name, g.title, x_main - SWITCH_PAD, g.x1, g.y0, g.y1, g.title_at)
    for cl in switch_clamps:
        xc = x + COLUMN_GAP + BOX_PAD
        bot_cols.append(xc)
        width = _column(parts, wires, xc, y_sw, y_gnd, _chain_items(cl.elements), f"clamp {cl.name}")
        x = _group(groups, f"clamp {cl.name}", (cl.name, "across the switch"), xc, xc + LABEL_GAP + width,
                   y_sw, y_gnd)

    # rails: + from the supply over the columns above sw; sw from the coil to the last column on
    # either side; ground under the supply and the columns below sw. A dot where a column tees into a rail.
    sw_cols = sorted(set(top_cols + bot_cols))
    wires += [((0.0, y_plus), (top_cols[-1], y_plus)), ((sw_cols[0], y_sw), (sw_cols[-1], y_sw)),
              ((0.0, y_gnd), (bot_cols[-1], y_gnd))]
    dots = [(xc, y_plus) for xc in top_cols[:-1]] + [(xc, y_gnd) for xc in bot_cols[:-1]]
    dots += [(xc, y_sw) for xc in sw_cols[:-1]]  # the first is where the coil meets the switch and the rail
    return Layout(tuple(parts), tuple(groups), tuple(wires), tuple(dots), y_plus, y_sw, y_gnd, vs, sw_cols[0])


def _symbol(elm, part: Part):
    """The schemdraw element of one part, placed between its end points."""
    two_terminal = {"supply": elm.SourceV, "inductor": elm.Inductor2, "resistor": elm.Resistor,
                    "capacitor": elm.Capacitor, "diode": elm.Diode, "zener": elm.Zener, "tvs": elm.Zener,
                    "tvs-bi": elm.DiodeTVS, "varistor": elm.Thermistor, "ideal": elm.Switch}
    e = two_terminal[part.kind]()
    if part.reverse:
        e = e.endpoints(part.end, part.start)
    else:
        e = e.endpoints(part.start, part.end)
    return e


def schematic_svg(case: Case) -> str:
    """The schematic of ``case`` as SVG text (deterministic: the same case gives the same text).

    Parameters
    ----------
    case : Case

    Returns
    -------
    str — an ``<svg>`` element with text labels (searchable, selectable), no external references
    """
    import schemdraw
    import schemdraw.elements as elm

    lay = layout(case)
    d = schemdraw.Drawing(canvas="svg", show=False)
    d.config(fontsize=FONT_SIZE, font="DejaVu Sans, Liberation Sans, Arial, sans-serif", lw=1.4)

    def text(xy, lines, halign="left", color="black", size=FONT_SIZE):
        d.add(elm.Label().at(xy).label("\n".join(lines), halign=halign, valign="center", color=color,
                                       fontsize=size))

    for g in lay.groups:
        d.add(elm.Rect((g.x0, g.y0), (g.x1, g.y1), ls="--", lw=0.8).color("#6b6b6b"))
        text(g.title_at, g.title, color="#333333", size=FONT_SIZE - 1)
    for (a, b) in lay.wires:
        d.add(elm.Line().endpoints(a, b))
    for p in lay.parts:
        x, ya = p.start
        yb = p.end[1]
        ym = 0.5 * (ya + yb)
        if p.kind in ("mosfet", "bjt"):
            mosfet = p.kind == "mosfet"
            top = ym + (1.67 if mosfet else 1.4) / 2  # the symbol's drain-source / collector-emitter length
            t = (elm.NMos().theta(0).anchor("drain") if mosfet else elm.BjtNpn().theta(0).anchor("collector"))
            d.add(elm.Line().endpoints((x, ya), (x, top)))
            d.add(t.at((x, top)))
            d.add(elm.Line().endpoints(t.absanchors["source" if mosfet else "emitter"], (x, yb)))
            g = t.absanchors["gate" if mosfet else "base"]
            d.add(elm.Line().endpoints(g, (g[0] - 0.6, g[1])))
            text((g[0] - 0.65, g[1]), ("turned off", "at t = 0"), halign="right", size=FONT_SIZE - 1)
            text((x + SWITCH_LABEL_GAP, ym), p.label)
        elif p.kind == "supply":
            d.add(_symbol(elm, p))
            text((x - 0.75, ym), p.label, halign="right")
        else:
            d.add(_symbol(elm, p))
            text((x + (SWITCH_LABEL_GAP if p.kind == "ideal" else LABEL_GAP), ym), p.label)
    for xy in lay.dots:
        d.add(elm.Dot().at(xy))
    d.add(elm.Ground().at((0.0, lay.y_ground)))
    text((0.15, lay.y_plus + 0.45), (f"+ rail ({lay.supply_label})",))
    text((lay.x_sw_start - BOX_PAD - 0.15, lay.y_sw + 0.22), ("switch node sw",), halign="right", size=FONT_SIZE - 1)
    return d.get_imagedata("svg").decode("utf-8")
