"""Table of ranked clamp choices and the release-versus-voltage trade-off figure."""

from __future__ import annotations

import numpy as np

from kickback.outputs.sweeps import engine_footnote, engine_lines, engine_words
from kickback.outputs.table import CAUTIONS, grid_lines, wrap_text
from kickback.studies.choose import RELEASE_TIE
from kickback.units import format_quantity as q


def choice_table(ch, n_show: int = 12) -> str:
    lines = [ch.case.title, "", f"feasible choices ({len(ch.ranked)} of {len(ch.ranked) + len(ch.rejected)}), "
             f"at least {100 * ch.case.checks.min_margin:g} % switch-voltage margin (checks.min_margin); fastest "
             f"release first (within {100 * RELEASE_TIE:g} %: larger margin first), then fewest parts:"]
    rows = [["rank", "clamp", "peak switch V", "margin", "release / decay", "clamp energy", "parts"]]
    for k, c in enumerate(ch.ranked[:n_show]):
        f = c.figures
        rows.append([str(k + 1), c.option.name, q(f["peak_voltage_V"], "V"), f"{100 * c.margin:.1f} %",
                     q(c.release, "s"), q(f["clamp_energy_J"], "J"), str(c.parts)])
    lines += grid_lines(rows)
    if len(ch.ranked) > n_show:
        lines.append(f"  … {len(ch.ranked) - n_show} more feasible (see --json)")
    lines += ["", "how the candidates were screened:"]
    lines += [f"  {x}" for x in engine_lines(ch)]
    if ch.confirmed:
        lines.append(f"  near a limit, judged on the detailed engine's figures: {', '.join(ch.confirmed)}")
    if ch.demoted:
        lines.append(f"  feasible on screening, failing with the detailed engine: {', '.join(ch.demoted)}")
    if ch.top:
        lines += ["", "top choices simulated again with the detailed engine:"]
        for k, r in enumerate(ch.top):
            f = r.figures
            lines.append(f"  {k + 1}. {ch.ranked[k].option.name}: peak {q(f.peak_voltage_V, 'V')}, "
                         f"release {q(f.release_s, 's')}, to zero {q(f.to_zero_s, 's')}, "
                         f"clamp energy {q(sum(c.energy_J for c in f.clamps), 'J')}, "
                         f"{'pass' if r.passed else 'FAIL'}")
    lines += ["", "why the others fail:"]
    by_family: dict[str, list] = {}
    for c in ch.rejected:
        by_family.setdefault(c.family, []).append(c)
    for fam, cs in by_family.items():
        reasons = {}
        for c in cs:
            reasons.setdefault(c.why_not, []).append(c.option.name)
        for why, names in reasons.items():
            shown = ", ".join(names[:4]) + (f" … ({len(names)})" if len(names) > 4 else "")
            lines.append(f"  {fam}: {shown} — {why}")
    lines += ["", "Candidates use a generic diode (0.9 V at 1 A) and ideal Zener/TVS; ratings of the case's own",
              "elements of each type are carried over. An ideal TVS clamps at its breakdown voltage (V_C = V_BR at",
              "any current): pick a part whose clamping voltage V_C at the coil current stays below the switch limit",
              "and whose stand-off voltage V_WM is at least the supply. Give a part as its datasheet does",
              "(standoff_voltage, breakdown_voltage at test_current, clamping_voltage at peak_pulse_current) and",
              "check it with `kickback run`.",
              "", wrap_text(CAUTIONS)]
    return "\n".join(lines) + "\n"


def tradeoff_figure(ch):
    """Release time (or decay to zero) against peak switch voltage, one line per family."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    from kickback.studies.designs import allowed_voltage

    case = ch.case
    from kickback.outputs import style

    fig = Figure(figsize=(11.5, 6.5), layout="constrained")
    ax = fig.subplots()
    cands = list(ch.ranked) + list(ch.rejected)
    fams = list(dict.fromkeys(c.family for c in cands))
    e_max = max((c.figures.get("clamp_energy_J") or 0.0) for c in cands) or 1.0
    for n, fam in enumerate(fams):
        cs = sorted((c for c in cands if c.family == fam and c.figures.get("error") is None),
                    key=lambda c: c.value)
        if not cs:
            continue
        x = np.array([c.figures["peak_voltage_V"] for c in cs])
        y = np.array([c.release for c in cs], dtype=float)
        size = 15 + 160 * np.array([(c.figures.get("clamp_energy_J") or 0.0) for c in cs]) / e_max
        ok = np.array([c.ok for c in cs])
        line = style.series_style(n)
        marker = style.series_marker(n)
        ax.plot(x, y, lw=1, alpha=0.8, marker=marker, ms=0, label=fam, **line)
        ax.scatter(x[ok], y[ok], s=size[ok], color=line["color"], marker=marker, zorder=3, label="_passes")
        ax.scatter(x[~ok], y[~ok], s=size[~ok], facecolors="none", edgecolors=line["color"], marker=marker,
                   zorder=3, label="_fails")
    v_allow = allowed_voltage(case)
    ax.axvline(v_allow, label=f"switch rating × {case.checks.derating:g} = {q(v_allow, 'V')}", **style.LIMIT)
    t_max = case.checks.max_release_time
    if t_max:
        ax.axhline(t_max, label=f"max release time {q(t_max, 's')}", **(style.LIMIT | {"ls": ":"}))
    ax.set_yscale("log")
    ys = [c.release for c in cands if c.release is not None and c.release > 0]
    y0, y1 = (min(ys) / 1.3, max(ys) * 1.3) if ys else (1e-6, 1.0)
    if t_max:
        y0, y1 = min(y0, t_max / 1.3), max(y1, t_max * 1.3)
    x0, x1 = ax.get_xlim()
    ax.fill_between([x0, v_allow], y0, t_max if t_max else y1, color=style.GREEN, alpha=0.1, lw=0,
                    label="feasible region")
    ax.set_xlim(x0, x1)
    ax.set_ylim(y0, y1)
    if ch.ranked:
        best = ch.ranked[0]
        ax.annotate(f"best: {best.option.name}", (best.figures["peak_voltage_V"], best.release),
                    textcoords="offset points", xytext=(12, -34), fontsize=9, va="top",
                    arrowprops={"arrowstyle": "->", "lw": 0.8})
    from matplotlib.ticker import LogLocator, NullFormatter

    ax.yaxis.set_major_locator(LogLocator(subs=(1.0, 2.0, 3.0, 5.0, 7.0)))
    ax.xaxis.set_major_formatter(EngFormatter(unit="V"))
    ax.yaxis.set_major_formatter(EngFormatter(unit="s"))
    ax.yaxis.set_minor_formatter(NullFormatter())
    has_release = case.coil.release_current is not None
    ax.set_xlabel("peak switch-node voltage")
    ax.set_ylabel(("release time" if has_release else "decay to zero") + " (logarithmic)")
    ax.grid(True, lw=0.3)
    # an open marker inside the shading fails a check not drawn here, or is not offered (the table says why)
    leg = style.outside_legend(ax, title="filled: passes\nopen: fails, or not offered\n(see the table)\n"
                               "size: clamp energy", title_fontsize=8,
                               alignment="left")
    for h in leg.legend_handles:  # one marker size in the key: the size in the plot is the energy
        if hasattr(h, "set_markersize"):
            h.set_markersize(6)
    what = "release" if has_release else "decay to zero"
    style.title(fig, f"{case.title} — {what} against switch voltage ({engine_words(ch)})")
    engine_footnote(fig, ch)
    return fig
