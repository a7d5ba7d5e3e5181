"""Tables and the overlay figure of a clamp comparison."""

from __future__ import annotations

from kickback.outputs.table import CAUTIONS, grid_lines, wrap_text
from kickback.units import format_quantity as q


def comparison_table(cmp) -> str:
    """One row per clamp option: peak, clamp energy and current, decay, release, verdict."""
    rows = [["option", "peak switch V", "clamp energy", "clamp peak I", "to 10 %", "to zero", "release",
             "verdict"]]
    for r in cmp.rows:
        d = r.to_dict()
        name = ("* " if r.own else "  ") + r.name
        if r.flag is not None:
            rows.append([name, "—", "—", "—", "—", "—", "—", f"not offered: {r.flag}"])
            continue
        if r.result is None:
            rows.append([name, "—", "—", "—", "—", "—", "—", f"cannot simulate: {r.error}"])
            continue
        verdict = "pass" if d["pass"] else "FAIL: " + ", ".join(d["failing_checks"])
        if r.thin:
            verdict += (f" (switch-voltage margin {100 * r.margin:.1f} % under checks.min_margin "
                        f"{100 * r.min_margin:g} %: choose would not pick it)")
        rows.append([name, q(d["peak_voltage_V"], "V"), q(d["clamp_energy_J"], "J"),
                     q(d["clamp_peak_current_A"], "A"), q(d["to_10_percent_s"], "s"), q(d["to_zero_s"], "s"),
                     q(d["release_s"], "s"), verdict])
    lines = [cmp.case.title, ""]
    table = grid_lines([r[:-1] for r in rows])
    lines += [f"{t}  {r[-1]}" for t, r in zip(table, rows, strict=True)]
    lines += ["", "* the case's own clamp set (sets the exit status)"]
    lines += _part_lines(cmp)
    if cmp.builtin:
        note = ("other options: built-in families sized to keep checks.min_margin under the derated switch "
                "voltage at the coil's current "
                "(generic diode 0.9 V at 1 A; ideal Zener/TVS: a built-in TVS clamps at its breakdown voltage, "
                "V_C = V_BR, and needs a part with stand-off V_WM at least the supply); give your own parts as "
                "[[option]] in the case")
        lines.append("  " + wrap_text(note).replace("\n", "\n  "))
    lines += ["", wrap_text(CAUTIONS)]
    return "\n".join(lines) + "\n"


def _part_lines(cmp) -> list[str]:
    """The Zener and TVS parts of the case's own clamps and its [[option]] sets in datasheet words
    (stand-off V_WM, breakdown V_BR at I_T, clamping V_C at I_PP)."""
    from kickback.models.factory import part_words

    sets = [("case", cmp.case.clamps)] + [(o.name, o.clamps) for o in cmp.case.options]
    out = []
    for name, clamps in sets:
        words = [f"{cl.name if el.name in (None, cl.name) else cl.name + '/' + el.name}: {part_words(el)}"
                 for cl in clamps for el in cl.elements if part_words(el)]
        if words:
            out.append(f"  {name}: " + "; ".join(words))
    return ["  Zener/TVS parts in datasheet words:"] + out if out else []


def comparison_figure(cmp):
    """Switch-node voltage and coil current of every option on a logarithmic time axis; the
    legend (one entry per option, shared by both panels) to the right, clear of the traces."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    from kickback.outputs import style

    fig = Figure(figsize=(11.5, 7), layout="constrained")
    av, ai = fig.subplots(2, 1, sharex=True)
    case = cmp.case
    t_min = None
    for n, r in enumerate(cmp.rows):
        if r.result is None:
            continue
        w = r.result.waveforms
        m = w.t > 0
        line = style.series_style(n) | {"lw": 2.4 if r.own else 1.3}
        label = ("case: " if r.own and not r.name.startswith("case") else "") + r.name
        label += "" if r.result.passed else " (fails)"
        av.plot(w.t[m], w.v[m], label=label, **line)
        ai.plot(w.t[m], w.i_coil[m], label=label, **line)
        t_min = w.t[m][0] if t_min is None else min(t_min, w.t[m][0])
    if case.switch.rated_voltage is not None:
        lim = case.switch.rated_voltage * case.checks.derating
        av.axhline(lim, label=f"switch rating × {case.checks.derating:g} = {q(lim, 'V')}", **style.LIMIT)
    if case.coil.release_current is not None:
        ai.axhline(case.coil.release_current, label=f"release current {q(case.coil.release_current, 'A')}",
                   **style.RELEASE_CURRENT)
    for ax, unit, label in ((av, "V", "switch-node voltage"), (ai, "A", "coil current")):
        ax.set_xscale("log")
        ax.yaxis.set_major_formatter(EngFormatter(unit=unit))
        ax.xaxis.set_major_formatter(EngFormatter(unit="s"))
        ax.grid(True, which="both", lw=0.3, alpha=0.6)
        ax.set_ylabel(label)
    if t_min is not None:
        edge = case.switch.fall_time or min(r.result.figures.peak_time_s for r in cmp.rows if r.result) or t_min
        av.set_xlim(left=max(t_min, 0.02 * edge))
    ai.set_xlabel("time after turn-off (logarithmic)")
    style.outside_legend(av, title="clamp option (thick: the case's own)", title_fontsize=8)
    if case.coil.release_current is not None:
        handles, labels = ai.get_legend_handles_labels()
        style.outside_legend(ai, handles[-1:], labels[-1:])
    style.title(fig, f"{case.title} — clamp options")
    return fig
