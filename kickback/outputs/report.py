"""One self-contained HTML review file of a case: what was simulated, the schematic, the
verdicts, the waveforms, the assumptions and how to reproduce it.

No external references: figures are inline SVG (matplotlib through
:func:`kickback.outputs.plots.figure_bytes`, the schematic through schemdraw's SVG backend),
the stylesheet is inline, with a print stylesheet that starts each major section on a new page.
The same case, options and date give the same file byte for byte.

Hooks for the studies beyond one turn-off: :func:`pwm_thermal_section` shows the periodic steady
state the result carries when the case has a [drive]; :func:`tolerance_section` and
:func:`tradeoff_section` show a tolerance study and a clamp choice when they are handed in.
"""

from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass
from html import escape

from kickback import __version__
from kickback.outputs import reportfigures as figs
from kickback.outputs import reportparts as parts
from kickback.outputs.reportcss import CSS
from kickback.outputs.reportstudies import tolerance_section, tradeoff_section
from kickback.outputs.table import CAUTIONS
from kickback.units import format_quantity as q

#: what the models leave out (kept in step with README "Models and limits")
IGNORED = (
    "armature motion: the inductance does not change with the armature's position",
    "temperature rise during the pulse: each device law uses its given temperature, else 25 °C",
    "the gate or base drive's own dynamics: the switch current falls linearly over the fall time",
    "wiring and lead inductance, and leakage other than a negligible 1e-12 relative conductance that keeps "
    "an algebraic node solvable",
)


def ignored(case) -> list[str]:
    """What the models leave out, for this case (a linear coil ignores core saturation)."""
    out = list(IGNORED)
    thermal = [getattr(case.switch, "thermal_resistance", None)]
    thermal += [getattr(el, "thermal_resistance", None) for cl in case.clamps for el in cl.elements]
    if any(r is not None for r in thermal):
        out[1] += "; junction temperatures from the case's thermal networks are checked, not fed back"
    if getattr(case.coil, "saturation_current", None) is None:
        out.insert(0, "core saturation: the case gives no saturation_current, so the inductance is constant")
    return out


@dataclass(frozen=True)
class Section:
    """One report section: anchor id, heading, body (HTML) and whether print starts a new page."""

    id: str
    title: str
    body: str
    new_page: bool = True


def verdict(result) -> tuple[str, str, str]:
    """(word, css class, one line) of the overall verdict."""
    checks = result.checks
    failing = [c for c in checks if not c.passed]
    if result.passed is None:
        return "NO VERDICT", "unchecked", "the result failed its audit: " + "; ".join(result.audit.findings)
    if not checks:
        return "NOT CHECKED", "unchecked", "the case gives no ratings and no limits: nothing was checked"
    if failing:
        names = "; ".join(f"{c.part} {c.quantity}" for c in failing)
        return "FAIL", "fail", f"{len(failing)} of {len(checks)} checks fail: {names}"
    low = min((c for c in checks if c.margin is not None), key=lambda c: c.margin, default=None)
    tight = "" if low is None else f"; smallest margin {100 * low.margin:+.1f} % on {low.part} {low.quantity}"
    return "PASS", "pass", f"all {len(checks)} checks pass{tight}"


def summary_line(result) -> str:
    """Peak against its limit, release, where the energy went — in one sentence."""
    f, case = result.figures, result.case
    vs = case.supply.voltage
    bits = [f"Peak switch-node voltage {q(f.peak_voltage_V, 'V')} ({f.peak_voltage_V / vs:.1f} × the "
            f"{q(vs, 'V')} supply)"]
    if case.switch.rated_voltage is not None:
        bits[0] += f" against a derated limit of {q(case.switch.rated_voltage * case.checks.derating, 'V')}"
    if case.coil.release_current is not None:
        bits.append("never released" if f.release_s is None else f"released after {q(f.release_s, 's')}")
    bits.append(f"current to zero after {q(f.to_zero_s, 's')}")
    from kickback.ledger import ledger_input, ledger_terms

    terms = ledger_terms(f, case)
    total = ledger_input(terms)
    # the sinks of the ledger, a clamp's elements taken together
    sinks = [(c.energy_J, f"clamp {c.name}") for c in f.clamps]
    words = {"motor": "the motor's back-EMF", "coil_resistance": "the coil resistance"}
    sinks += [(t.energy_J, words.get(t.key, t.label)) for t in terms
              if t.side == "out" and not t.key.startswith("clamp[")]
    e, where = max(sinks)
    bits.append(f"{q(f.stored_energy_J, 'J')} stored in the coil, the largest share ({100 * e / total:.0f} %) "
                f"taken by {where}")
    return "; ".join(bits) + "."


def inline_svg(svg: bytes | str, prefix: str) -> str:
    """An SVG document made fit to sit inside HTML: no XML prolog, DOCTYPE or metadata, ids
    prefixed so several figures on one page cannot clash, its style sheet scoped to itself."""
    text = svg.decode("utf-8") if isinstance(svg, bytes) else svg
    text = re.sub(r"<\?xml[^>]*\?>\s*", "", text)
    text = re.sub(r"<!DOCTYPE[^>]*>\s*", "", text)
    text = re.sub(r"<metadata>.*?</metadata>\s*", "", text, flags=re.DOTALL)
    text = re.sub(r'\bid="([^"]+)"', lambda m: f'id="{prefix}-{m.group(1)}"', text)
    text = re.sub(r'(href=")#([^"]+)"', lambda m: f'{m.group(1)}#{prefix}-{m.group(2)}"', text)
    text = re.sub(r"url\(#([^)]+)\)", lambda m: f"url(#{prefix}-{m.group(1)})", text)
    text = re.sub(r"<svg\b", f'<svg class="{prefix}"', text, count=1)
    text = re.sub(r"(<style[^>]*>)\s*\*\s*\{", lambda m: f"{m.group(1)}.{prefix} * {{", text)
    return text.strip()


def figure_html(fig, prefix: str, caption: str, extra_class: str = "") -> str:
    from kickback.outputs.plots import figure_bytes

    classes = f"{prefix} {extra_class}".strip()
    return (f'<figure class="{classes}">{inline_svg(figure_bytes(fig, "svg"), prefix)}'
            f"<figcaption>{escape(caption)}</figcaption></figure>")


def _schematic_section(result) -> Section:
    from kickback.outputs.schematic import schematic_svg

    case = result.case
    where = ", ".join(f"{c.name} across the {c.across}" for c in case.clamps) or "no clamp"
    body = (f'<figure class="schematic">{inline_svg(schematic_svg(case), "sch")}<figcaption>'
            f"Topology as simulated: supply, coil (inductance and winding resistance in series), "
            f"{escape(case.switch.type if case.switch.type != 'ideal' else 'ideal')} switch from the switch node "
            f"sw to ground, and {escape(where)}. Each clamp chain is drawn from the switch node outwards "
            "in case order, every element oriented to conduct when sw rises (a diode forward, a Zener or "
            "unidirectional TVS in breakdown). Dashed boxes group the parts of one case table."
            "</figcaption></figure>")
    return Section("schematic", "Schematic", body, new_page=False)


def _waveform_section(result) -> Section:
    from kickback.outputs.plots import edge_window

    zoom = edge_window(result)
    fig = figs.waveform_figure(result, zoom)
    cap = ("Top: switch-node voltage against the supply, the switch's derated rating and (when near) its "
           "avalanche onset; the marker is the peak. Middle: coil current, each clamp's current and (edge) "
           "the switch current, with the release current and the release point. Bottom: power dissipated "
           "in each clamp (capacitors excluded) and in the switch. "
           + ("The left column zooms on the turn-off edge." if zoom else
              "The edge is not much faster than the decay, so there is no separate zoom.")
           + f" The run ends at {q(result.figures.end_time_s, 's')}.")
    return Section("waveforms", "Waveforms", figure_html(fig, "wave", cap, "" if zoom else "single"))


def comparison_section(cmp) -> Section:
    """The clamp options of :func:`kickback.studies.compare.compare` side by side."""
    from kickback.outputs.comparison import comparison_figure

    rows, classes = [], []
    for r in cmp.rows:
        d = r.to_dict()
        name = r.name if r.name.startswith("case") or not r.own else f"{r.name} (this case)"
        if r.result is None:
            why = f"not offered: {r.flag}" if getattr(r, "flag", None) else f"cannot simulate: {r.error}"
            rows.append([name, "—", "—", "—", "—", "—", "—", why])
            classes.append("fail")
            continue
        mark = ("html", '<span class="mark pass">✔ pass</span>') if d["pass"] else \
               ("html", '<span class="mark fail">✘ FAIL</span> ' + escape(", ".join(d["failing_checks"])))
        rows.append([name, q(d["peak_voltage_V"], "V"), q(d["clamp_energy_J"], "J"),
                     q(d["clamp_peak_current_A"], "A"), q(d["to_10_percent_s"], "s"), q(d["to_zero_s"], "s"),
                     q(d["release_s"], "s"), mark])
        classes.append("pass" if d["pass"] else "fail")
    body = parts.table(["option", "peak switch V", "clamp energy", "clamp peak I", "to 10 %", "to zero", "release",
                        "verdict"], rows, "checks compare", classes)
    where = ("Alternatives: built-in families sized to keep checks.min_margin under the derated switch "
             "voltage (generic diode 0.9 V at 1 A, ideal Zener and TVS) — they show the trade-off, they are not parts."
             if cmp.builtin else "Alternatives: the case's own [[option]] sets.")
    body += f'<p class="note">{escape(where)} Each option is checked against the same ratings and limits.</p>'
    fig = comparison_figure(cmp)  # its legends sit beside the plots already, clear of every curve
    body += figure_html(fig, "cmp", "Switch-node voltage and coil current of every option "
                    "(logarithmic time axis); the thick line is this case.")
    return Section("comparison", "Clamp comparison", body)


def measured_section(measured=None) -> Section | None:
    """A bench trace against the simulation: ``(trace, MeasuredComparison)``; None without one."""
    if measured is None:
        return None
    trace, cmp, result = measured
    from kickback.outputs.fitplots import measured_figure

    rows = []
    for r in cmp.rows:
        rel = "" if r.relative is None else f" ({100 * r.relative:+.1f} %)"
        rows.append([r.quantity, q(r.simulated, r.unit), q(r.measured, r.unit),
                     ("—" if r.difference is None else q(r.difference, r.unit)) + rel])
    body = (f"<p>Measured {escape(cmp.signal)} from <code>{escape(cmp.source)}</code> against the "
            "simulated waveform (time zero at the turn-off).</p>")
    body += parts.table(["figure", "simulated", "measured", "difference"], rows)
    body += "".join(f'<p class="note">{escape(n)}</p>' for n in cmp.notes)
    body += figure_html(measured_figure(result, trace, cmp), "meas", "The measured trace over the simulation.")
    return Section("measured", "Measured against simulated", body)


_UNITS = {"_A": "A", "_V": "V", "_W": "W", "_J": "J", "_K": "K", "_s": "s", "_Hz": "Hz"}
_PWM_ROWS = (("ripple_A", "coil current ripple"), ("min_current_A", "coil current, lowest"),
             ("max_current_A", "coil current, highest"), ("mean_current_A", "coil current, mean"),
             ("rms_current_A", "coil current, RMS"), ("switch_rms_A", "switch current, RMS"),
             ("conduction_loss_W", "switch conduction loss (on-state, I²·R_on or V_sat·I)"),
             ("turn_on_discharge_loss_W", "switch turn-on loss: node capacitance discharged, ½·C·V²·f"),
             ("crossover_loss_W", "switch crossover loss"),
             ("avalanche_power_W", "switch avalanche loss"), ("supply_power_W", "supply power"),
             ("switch_junction_mean_K", "switch junction, mean"), ("switch_junction_peak_K", "switch junction, peak"))


def _by_suffix(key: str, value) -> str:
    """A figure named by the result contract's convention (``…_A``, ``…_W``, ``…_K``) in engineering notation."""
    if value is None:
        return "—"
    for suffix, unit in _UNITS.items():
        if key.endswith(suffix):
            if unit == "K":
                return f"{value - 273.15:.4g} °C"
            return q(value, unit)
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def pwm_thermal_section(pwm=()) -> Section | None:
    """Repetitive switching: the periodic steady state at each duty of the case's [drive]
    (``Result.pwm``, one :class:`~kickback.pwmfigures.PwmFigures` per duty); None without a drive."""
    if not pwm:
        return None
    head = ["figure"] + [f"duty {100 * p.duty:g} % at {q(p.frequency_Hz, 'Hz')}" for p in pwm]
    rows = [[label] + [_by_suffix(key, getattr(p, key, None)) for p in pwm] for key, label in _PWM_ROWS]
    names = [(e.get("clamp"), e.get("element")) for e in pwm[0].elements]
    for n, (clamp, element) in enumerate(names):
        for key in ("power_W", "rms_A", "junction_peak_K"):
            if key in pwm[0].elements[n]:
                what = {"power_W": "loss", "rms_A": "current, RMS", "junction_peak_K": "junction, peak"}[key]
                rows.append([f"{clamp}: {element} {what}"] + [_by_suffix(key, p.elements[n].get(key)) for p in pwm])
    note = ("Periodic steady state at each duty of the case's [drive] (per switching period); its checks "
            "are in the Checks table.")
    return Section("pwm", "Repetitive switching", f'<p class="note">{escape(note)}</p>'
                   + parts.table(head, rows, "figures"))


def _assumptions_section(result, not_assessed) -> Section:
    d = result.details()
    items = "".join(f"<li>{escape(m)}</li>" for m in d["models"])
    left_out = "".join(f"<li>{escape(x)}</li>" for x in ignored(result.case))
    engine = (f"Engine: {escape(d['engine'])}; the run ended at {q(d['end_time_s'], 's')}"
              + (" — at its time bound, before the transient was over." if d["bound_hit"] else
                 ", when the coil current and the energy in the capacitors were negligible."))
    derating = result.case.checks
    notes = [
        f"Voltage and current ratings are allowed to {derating.derating:g} of their value, energy and power "
        f"ratings to {derating.energy_fraction:g} (derating: common practice, no source).",
        "Release time: the time until the coil current stays below the release current, plus the release "
        "delay. A time that does not occur is shown as —, never as a made-up number.",
        "Stand-off: the largest reverse voltage an element holds while its chain does not conduct, the "
        "on-state included.",
    ]
    body = (f"<h3>Device models used</h3><ul>{items}</ul><p>{engine}</p>"
            f"<h3>What the models leave out</h3><ul>{left_out}</ul>"
            f"<h3>Not assessed in this report</h3><ul>{''.join(f'<li>{escape(x)}</li>' for x in not_assessed)}</ul>"
            f"<h3>Conventions</h3><ul>{''.join(f'<li>{escape(x)}</li>' for x in notes)}</ul>")
    return Section("assumptions", "Assumptions and model limits", body)


def _cautions_section(result) -> Section:
    f, vs = result.figures, result.case.supply.voltage
    here = (f"On this case the switch node reaches {q(f.peak_voltage_V, 'V')}, "
            f"{f.peak_voltage_V / vs:.1f} times the {q(vs, 'V')} supply.")
    general = _sentence(CAUTIONS.removeprefix("Cautions: "))
    return Section("cautions", "Cautions", f'<div class="caution"><p>{escape(general)}</p><p>{escape(here)}</p>'
                   "</div>", new_page=False)


def _sentence(text: str) -> str:
    return text[:1].upper() + text[1:]


def _reproducibility_section(result, command: str, date: str, versions: dict) -> Section:
    case = result.case
    digest = hashlib.sha256(case.text.encode("utf-8")).hexdigest()
    rows = [["tool", f"kickback {__version__}"], ["command", command], ["date", date],
            ["case file", case.source], ["SHA-256 of the case text", digest],
            ["engine", f"{result.waveforms.engine}, rtol {result.waveforms.rtol:g}"]]
    rows += [[name, v] for name, v in versions.items()]
    text = escape(case.text) if case.text else "(the case was built in Python: no case text)"
    body = (parts.table(["", ""], rows, "figures") +
            "<p class=\"note\">The same case text, options and library versions give the same figures; "
            "the plots carry no dates. The hash is of the case text as read (UTF-8), so "
            "<code>sha256sum</code> of the file matches it for a file with LF line ends.</p>"
            f"<h3>Case text</h3><pre class=\"case\">{text}</pre>")
    return Section("reproducibility", "Reproducibility", body)


def library_versions() -> dict:
    """Versions of the libraries that shape the figures and plots."""
    import platform
    from importlib.metadata import PackageNotFoundError, version

    out = {"Python": platform.python_version()}
    for name in ("numpy", "scipy", "matplotlib", "schemdraw"):
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    return out


def report_html(result, *, comparison=None, command: str = "", date: str = "", versions: dict | None = None,
                tolerance=None, choice=None, measured=None) -> str:
    """The whole report of ``result`` as one HTML document.

    Parameters
    ----------
    result : Result — the simulated case
    comparison : Comparison or None — a clamp comparison to include (kickback.studies.compare.compare)
    command : str — the command line that made the report
    date : str — when it was made (shown in the reproducibility section only)
    versions : dict or None — library versions to record; None: the installed ones
    tolerance : ToleranceResult or None — a tolerance study to include
    choice : Choice or None — a clamp choice (ranked candidates, trade-off) to include.
    measured : (trace, MeasuredComparison) or None — a bench trace to overlay on the simulation.
        Repetitive switching comes with the result itself (``Result.pwm``, from the case's [drive]).

    Returns
    -------
    str — HTML with inline CSS and inline SVG, no external references
    """
    case = result.case
    word, cls, line = verdict(result)
    pwm = getattr(result, "pwm", ())
    later = [s for s in (measured_section(None if measured is None else (*measured, result)),
                         pwm_thermal_section(pwm), tolerance_section(tolerance), tradeoff_section(choice))
             if s is not None]
    not_assessed = []
    if tolerance is None:
        not_assessed.append("part tolerances and their spread (no tolerance study in this report)")
    if not pwm:
        not_assessed.append("repetitive switching: PWM losses and part temperatures (no PWM/thermal study in this "
                            "report; this is one turn-off from the DC on-state)")
    if comparison is None:
        not_assessed.append("alternative clamps (run with --compare to add the comparison)")
    if choice is None:
        not_assessed.append("a search over standard clamp values (run with --choose to add the trade-off)")
    sections = [
        _schematic_section(result),
        Section("inputs", "Inputs", "<p class=\"note\">Every value the simulation used, by its key in the case "
                "file; “default” marks a value the file does not give.</p>" + parts.inputs_table(case)
                + "<h3>On-state before turn-off (computed)</h3>" + parts.onstate_table(result)),
        Section("checks", "Checks", parts.check_table(result) + "<h3>Turn-off figures</h3>"
                + parts.figures_table(result) + "<h3>Clamp duty</h3>" + parts.clamp_table(result)),
        Section("ledger", "Energy ledger", figure_html(figs.ledger_figure(result), "ledger",
                "Where the energy went: inputs (blue), dissipation (orange), left over (grey, hatched); "
                "shares of the total input.") + parts.ledger_table(result)),
        _waveform_section(result),
        *later,
    ]
    if comparison is not None:
        sections.append(comparison_section(comparison))
    sections += [_assumptions_section(result, not_assessed), _cautions_section(result),
                 _reproducibility_section(result, command, date, library_versions() if versions is None else versions)]
    findings = "".join(f"<li>{escape(x)}</li>" for x in result.figures.findings)
    toc = "".join(f'<li><a href="#{s.id}">{escape(s.title)}</a></li>' for s in sections)
    body = [f'<header><div class="kicker">kickback turn-off report</div><h1>{escape(case.title)}</h1>',
            f'<div class="banner {cls}" id="verdict"><span class="word">{word}</span>'
            f'<span class="line">{escape(line)}</span></div>',
            f'<p class="summary">{escape(summary_line(result))}</p>']
    if findings:
        body.append(f'<h3>Findings</h3><ul class="findings">{findings}</ul>')
    body.append(f'<nav class="toc"><ol>{toc}</ol></nav></header>')
    for s in sections:
        page = ' class="page"' if s.new_page else ""
        body.append(f'<section id="{s.id}"{page}><h2>{escape(s.title)}</h2>{s.body}</section>')
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>{escape(case.title)} — {word}</title><style>{CSS}</style></head><body>"
            + "\n".join(body) + "\n</body></html>\n")
