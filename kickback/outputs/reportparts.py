"""Section bodies of the HTML report: tables (HTML fragments) and figures (matplotlib, no pyplot).

Every function takes a :class:`~kickback.result.Result` (or its case) and returns an HTML
fragment or a matplotlib ``Figure``; :mod:`kickback.outputs.report` assembles them. Text is
escaped here, quantities are written in engineering notation with
:func:`kickback.units.format_quantity`.
"""

from __future__ import annotations

import re
import tomllib
from html import escape

from kickback.units import format_number as num
from kickback.units import format_quantity as q

#: the ledger's residual above which the run is a defect (DESIGN.md §3)
BALANCE_DEFECT = 1e-3

_NOT_CHECKED = "not given: not checked"
# defaults worth showing beside the given values (the rest of the dataclass defaults stay silent)
_SHOWN_DEFAULTS = {"capacitance", "release_delay", "fall_time", "avalanche_resistance", "model", "series_resistance",
                   "dynamic_resistance", "derating", "bidirectional"}


def _caseio_specs():
    """The case file's keys and units, from the loader itself (one source of truth)."""
    from kickback.caseio import key_specs

    return key_specs()


def table(header, rows, cls: str = "", row_classes=None) -> str:
    """An HTML table; cells are escaped unless given as ``("html", fragment)``."""
    def cell(tag, x):
        if isinstance(x, tuple) and x[0] == "html":
            return f"<{tag}>{x[1]}</{tag}>"
        return f"<{tag}>{escape(str(x))}</{tag}>"

    out = [f'<table class="{cls}">' if cls else "<table>", "<thead><tr>"]
    out += [cell("th", h) for h in header]
    out.append("</tr></thead><tbody>")
    for n, r in enumerate(rows):
        rc = row_classes[n] if row_classes else ""
        out.append(f'<tr class="{rc}">' if rc else "<tr>")
        out += [cell("td", x) for x in r]
        out.append("</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def _given(case) -> dict:
    """The raw TOML of the case, to tell keys given in the file from defaults ({} when there is no text)."""
    try:
        return tomllib.loads(case.text) if case.text else {}
    except tomllib.TOMLDecodeError:
        return {}


def _q_any(x: float, unit: str) -> str:
    try:
        return q(x, unit)
    except Exception:  # a compound unit format_quantity does not know
        return f"{num(x)} {unit}"


def _fmt(value, field) -> str:
    """A value as the report shows it: engineering notation with the key's unit."""
    kind, unit = getattr(field, "kind", ""), getattr(field, "unit", "")
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return value
    if isinstance(value, list | tuple):
        return ", ".join(_fmt(x, field) for x in value)
    if isinstance(value, dict):
        return "; ".join(f"{k} = {_fmt(v, None)}" for k, v in value.items())
    if unit == "K":
        return f"{q(value, 'K')} ({value - 273.15:.4g} °C)"
    if kind in ("q", "l") and unit:
        return _q_any(value, unit)
    return num(value) if isinstance(value, int | float) else str(value)


def _key_rows(obj, raw: dict | None, spec: dict, skip=()) -> list:
    """(key, value, note) rows of one case table: every key the file gives (the value the model used),
    the defaults worth knowing, and the absences that change what is computed or checked."""
    rows = []
    for key, field in spec.items():
        if key in skip or key in ("type", "name") or getattr(field, "kind", "") == "t":
            continue
        given = raw is None or key in raw  # no case text: every value counts as given
        value = getattr(obj, key) if obj is not None and hasattr(obj, key) else (raw or {}).get(key)
        if value is None:
            single_pulse = not any(w in key for w in ("repetitive", "average", "pulse_width"))
            # what the key's absence means (the key table's own line, kickback.casekeys.Field.absent)
            note = getattr(field, "absent", "") or (_NOT_CHECKED if key.startswith("rated_") and single_pulse
                                                    else None)
            if note and not given:
                rows.append([key, "—", note])
        elif given:
            rows.append([key, _fmt(value, field), ""])
        elif key in _SHOWN_DEFAULTS:
            rows.append([key, _fmt(value, field), "default"])
    return rows


def _card(title: str, blocks) -> str:
    """One input card: a title and (sub-heading, rows) blocks as one table."""
    body = []
    for sub, rows in blocks:
        if sub:
            body.append(f'<tr class="sub"><td colspan="3">{escape(sub)}</td></tr>')
        for key, value, note in rows:  # keys break after an underscore, a dot or a bracket; values after , or ;
            key_html = re.sub(r"([_.\]])", r"\1<wbr>", escape(key))
            value_html = escape(value).replace(" ", "&nbsp;").replace(";&nbsp;", "; ").replace(",&nbsp;", ", ")
            body.append(f"<tr><td>{key_html}</td><td>{value_html}</td><td>{escape(note)}</td></tr>")
    return (f'<div class="card"><h4>{escape(title)}</h4><table class="kv"><tbody>{"".join(body)}'
            "</tbody></table></div>")


def _raw_rows(raw) -> list:
    """Rows of a case table kickback's report does not know in detail: the keys as written."""
    if isinstance(raw, list):
        return [[f"[{n}]", _fmt(item, None), ""] for n, item in enumerate(raw)]
    return [[k, _fmt(v, None), ""] for k, v in raw.items()]


def inputs_table(case) -> str:
    """Every value the simulation used, by case-file key, in engineering notation, one card per
    case table; a default worth knowing is marked "default"."""
    raw = _given(case)
    known = bool(raw)
    specs, elements, switch_only = _caseio_specs()

    def g(*path):
        node = raw
        for p in path:
            try:
                node = node[p]
            except (KeyError, IndexError, TypeError):
                return {} if known else None
        return node if isinstance(node, dict) else ({} if known else None)

    coil_rows = _key_rows(case.coil, g("coil"), specs["coil"])
    origin = initial_current_origin(case)
    if case.coil.initial_current is not None and origin != "given":
        coil_rows = [r for r in coil_rows if r[0] != "initial_current"]
        coil_rows.append(["initial_current", q(case.coil.initial_current, "A"), f"not in the file: {origin}"])
    cards = [_card("[supply]", [("", _key_rows(case.supply, g("supply"), specs["supply"]))]),
             _card("[coil]", [("", coil_rows)])]
    s = case.switch
    skip = [k for k, owner in switch_only.items() if s.type != owner]
    if s.breakdown_voltage is None:
        skip.append("avalanche_resistance")
    cards.append(_card(f"[switch] {s.type}", [("", _key_rows(s, g("switch"), specs["switch"], skip))]))
    for k, cl in enumerate(case.clamps):
        blocks = [("", [["across", cl.across, ""]])]
        for j, el in enumerate(cl.elements):
            skip = ()
            if el.type == "diode" and el.model == "constant-drop":
                skip = ("at_current", "ideality", "saturation_current")
            elif el.type in ("resistor", "capacitor", "varistor") or (el.type == "tvs" and el.bidirectional):
                skip = ("forward_voltage",)
            blocks.append((f"element {j + 1}: {el.name or el.type} ({el.type})",
                           _key_rows(el, g("clamp", k, "element", j), elements.get(el.type, {}), skip)))
        cards.append(_card(f"[[clamp]] {cl.name}", blocks))
    if not case.clamps:
        cards.append(_card("[[clamp]]", [("", [["—", "none", "the switch alone takes the coil current"]])]))
    cards.append(_card("[checks]", [("", _key_rows(case.checks, g("checks"), specs["checks"]))]))
    for name, table_raw in raw.items():  # tables for other studies ([drive], [tolerance], ...): as written
        if name in ("title", "supply", "coil", "switch", "clamp", "checks", "option"):
            continue
        spec = specs.get(name)
        rows = _key_rows(None, table_raw, spec) if spec and isinstance(table_raw, dict) else _raw_rows(table_raw)
        cards.append(_card(f"[{name}]", [("", rows)]))
    for opt in case.options:
        names = ", ".join(f"{c.name} across the {c.across}" for c in opt.clamps) or "no clamp"
        cards.append(_card(f"[[option]] {opt.name}", [("", [["clamps", names, "see the comparison"]])]))
    return f'<div class="cards">{"".join(cards)}</div>'


def initial_current_origin(case) -> str:
    """Where the current at turn-off comes from: "given", the [drive] steady state, or the DC on-state."""
    raw = _given(case).get("coil", {})
    if case.coil.initial_current is None:
        return "the DC on-state: supply, coil resistance and switch on-state"
    if "initial_current" in raw or not case.text:
        return "given"
    drive = getattr(case, "drive", None)
    if drive is not None and getattr(drive, "final_turn_off", False):
        return ("the highest current of the [drive] steady state (final turn-off): the periodic state at "
                "the turn-off instant — current, capacitor voltages, motor speed, junction temperatures")
    return "set by the study that made this case"


def onstate_table(result) -> str:
    """The state before turn-off, as computed."""
    f, c = result.figures, result.waveforms.circuit
    origin = initial_current_origin(result.case)
    rows = [["coil current", q(f.initial_current_A, "A"), "given (initial_current)" if origin == "given" else
             "from " + origin],
            ["switch-node voltage", q(c.on.node_voltage, "V"), "switch on-state"],
            ["energy stored in the coil", q(f.stored_energy_J, "J"), "½·L·i0²"],
            ["energy stored in capacitors", q(f.initial_capacitor_energy_J, "J"), "at their on-state voltages"]]
    for cl in f.clamps:
        rows.append([f"clamp {cl.name} current", q(cl.on_state_current_A, "A"), "while the switch is on"])
    return table(["quantity", "value", "how"], rows, "figures")


def figures_table(result) -> str:
    """The turn-off figures: peak, decay, release, end of the run."""
    f = result.figures
    c = result.case
    vs = c.supply.voltage
    rows = [["peak switch-node voltage", q(f.peak_voltage_V, "V"), f"{f.peak_voltage_V / vs:.2f} × the supply",
             f"at {q(f.peak_time_s, 's')}"],
            ["coil current to 10 %", q(f.to_10_percent_s, "s"), "", ""],
            ["coil current to 1 %", q(f.to_1_percent_s, "s"), "", ""],
            ["coil current to zero", q(f.to_zero_s, "s"), "first time it reaches zero", ""]]
    if c.coil.release_current is not None:
        rows.append(["release", q(f.release_s, "s"),
                     f"stays below {q(c.coil.release_current, 'A')}, plus {q(c.coil.release_delay, 's')}",
                     "— : never released" if f.release_s is None else ""])
    rows.append(["switch turn-off crossover", q(f.crossover_energy_J, "J"), "current fall", ""])
    rows.append(["switch avalanche", q(f.avalanche_energy_J, "J"),
                 "above " + q(c.switch.breakdown_voltage, "V") if c.switch.breakdown_voltage else "no breakdown",
                 ""])
    rows.append(["end of the run", q(f.end_time_s, "s"), "time bound hit" if f.bound_hit else "transient over", ""])
    return table(["figure", "value", "", ""], rows, "figures")


def clamp_table(result) -> str:
    """Each clamp chain and element: energy, peak current and voltage, peak power, stand-off."""
    f = result.figures
    rows, classes = [], []
    for cl in f.clamps:
        rows.append([f"{cl.name} (across the {cl.across})", q(cl.energy_J, "J"), q(cl.peak_current_A, "A"),
                     "", "", "", "", q(cl.conduction_s, "s")])
        classes.append("group")
        for el in cl.elements:
            rows.append([f"  {el.name} ({el.type})", q(el.energy_J, "J"), q(el.peak_current_A, "A"),
                         q(el.peak_voltage_V, "V"), q(el.peak_power_W, "W"), q(el.pulse_width_s, "s"),
                         q(el.standoff_voltage_V, "V"), ""])
            classes.append("")
    if not rows:
        return "<p>No clamp: the switch alone takes the coil current.</p>"
    from kickback.outputs.table import ELEMENT_NOTES

    notes = " ".join(x.strip() for x in ELEMENT_NOTES)
    return table(["chain / element", "energy", "peak current", "peak voltage ¹", "peak power",
                  "pulse width (E / P)", "stand-off ²", "conduction time"], rows, "figures", classes) + \
        f'<p class="note">{escape(notes).replace(" ² ", "<br>² ")}</p>'


def _checked(value, unit) -> str:
    if unit == "K" and value is not None:
        return f"{value - 273.15:.4g} °C"
    return _q_any(value, unit) if value is not None else "—"


def limit_source(ck) -> str:
    """How the limit was formed, with the rating itself: "rating 60 V × 0.8" rather than "rating × 0.8"."""
    m = re.match(r"rating × ([0-9.eE+-]+)(.*)", ck.note)
    if m is None or ck.limit is None:
        return ck.note
    fraction = float(m.group(1))
    return f"rating {q(ck.limit / fraction, ck.unit)} × {m.group(1)}{m.group(2)}"


def check_table(result) -> str:
    """The checks: value, limit after derating, margin, how the limit was formed, verdict (word and mark)."""
    rows, classes = [], []
    for ck in result.checks:
        mark = ("html", '<span class="mark pass">✔ pass</span>') if ck.passed else \
               ("html", '<span class="mark fail">✘ FAIL</span>')
        margin = "—" if ck.margin is None else f"{100 * ck.margin:+.1f} %"
        rows.append([ck.part, ck.quantity, _checked(ck.value, ck.unit), _checked(ck.limit, ck.unit), margin,
                     limit_source(ck), mark])
        classes.append("pass" if ck.passed else "fail")
    if not rows:
        return "<p>The case gives no ratings and no limits: nothing was checked.</p>"
    return table(["part", "quantity", "value", "limit (after derating)", "margin", "limit from", "verdict"],
                 rows, "checks", classes)


def ledger_items(result) -> list[tuple[str, str, float]]:
    """(side, label, energy [J]) of the ledger (:func:`kickback.ledger.ledger_terms`): 'in' terms,
    then 'out' terms, then what is left."""
    from kickback.ledger import ledger_terms

    return [(t.side, t.label, t.energy_J) for t in ledger_terms(result.figures, result.case)]


def ledger_total(result) -> float:
    """The ledger's input [J] (:func:`kickback.ledger.ledger_input`), the base of every share."""
    from kickback.ledger import ledger_input, ledger_terms

    return ledger_input(ledger_terms(result.figures, result.case))


def share(x: float, total: float) -> str:
    """``x`` as a percentage of ``total``; "< 0.1 %" rather than a misleading "0.0 %"."""
    if x == 0:
        return "0 %"
    return "< 0.1 %" if 0 < x < 1e-3 * total else f"{100 * x / total:.1f} %"


def ledger_table(result) -> str:
    f = result.figures
    total = ledger_total(result)
    rows = [[side, label, q(x, "J"), "" if side == "in" else share(x, total)]
            for side, label, x in ledger_items(result)]
    status = "within" if abs(f.energy_balance_error) <= BALANCE_DEFECT else "OUTSIDE (a defect)"
    rows.append(["", "balance residual (in − out) / in", f"{f.energy_balance_error:.1e}",
                 f"{status} the 0.1 % bound"])
    return table(["", "energy term", "energy", "share of the input"], rows, "ledger")
