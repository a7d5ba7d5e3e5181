"""Table, CSV and figures of a sweep."""

from __future__ import annotations

import csv
import io

import numpy as np

from kickback.outputs import style
from kickback.outputs.table import grid_lines
from kickback.studies.sweep import COLUMNS
from kickback.units import format_quantity as q

LABELS = {"peak_voltage_V": "peak switch V", "clamp_energy_J": "clamp energy", "avalanche_energy_J": "avalanche",
          "to_10_percent_s": "to 10 %", "to_zero_s": "to zero", "release_s": "release"}


def sweep_table(sw) -> str:
    head = [a.path for a in sw.axes] + [LABELS[c] for c, _ in COLUMNS] + ["verdict"]
    rows = [head]
    for k, p in enumerate(sw.points):
        cells = [q(x, a.unit) if a.unit else f"{x:.4g}" for x, a in zip(p, sw.axes, strict=True)]
        if sw.errors[k]:
            rows.append(cells + ["—"] * len(COLUMNS) + [f"cannot simulate: {sw.errors[k]}"])
            continue
        cells += [q(sw.figures[c][k], u) for c, u in COLUMNS]
        cells.append("pass" if sw.passed[k] else "FAIL: " + ", ".join(sw.failing[k]))
        rows.append(cells)
    table = grid_lines([r[:-1] for r in rows])
    lines = [f"{sw.case.title} — sweep ({engine_words(sw)}, {len(sw.points)} points)"]
    lines += [f"  {x}" for x in engine_lines(sw)]
    lines.append("")
    lines += [f"{t}  {r[-1]}" for t, r in zip(table, rows, strict=True)]
    return "\n".join(lines) + "\n"


def _noun(study) -> str:
    """What a study's variants are called: candidates (a choice), samples (a tolerance study) or
    points (a sweep)."""
    if hasattr(study, "ranked"):
        return "candidates"
    if hasattr(study, "yield_ci"):
        return "samples"
    return "points"


def _counts(study) -> dict:
    counts = getattr(study, "engines", None)
    return counts if counts else {study.engine: 0}


def engine_words(study) -> str:
    """What ran, in the words of ``--engine`` (auto, batch, detailed): "batch engine", "detailed
    engine", or where both ran "batch engine, N of M candidates on the detailed engine" (the
    engine that ran most of them first; at a tie the one picked for the case)."""
    counts = _counts(study)
    first = max(counts, key=lambda e: (counts[e], e == study.engine))
    words = f"{first} engine"
    other = [e for e in counts if e != first]
    if other:
        total = sum(counts.values())
        words += f", {counts[other[0]]} of {total} {_noun(study)} on the {other[0]} engine"
    return words


def asked_words(study) -> str:
    """:func:`engine_words` after the ``--engine`` given: "--engine auto: batch engine, …"."""
    asked = getattr(study, "asked", None)
    return f"--engine {asked}: {engine_words(study)}" if asked else engine_words(study)


def engine_lines(study) -> list[str]:
    """What the engine of a study (sweep, choice, tolerance) was: the batch engine's exactness and
    its fits, or why the detailed engine ran."""
    counts = _counts(study)
    out = [asked_words(study)]
    if "batch" in counts:
        out.append("batch engine: exact piecewise-linear solution, vectorised over the variants"
                   + ("; nonlinear laws as stated fits:" if study.fits else " (every law exact, no fit)"))
        out += [f"  fit: {f}" for f in study.fits]
    if "detailed" in counts:
        out.append("detailed engine: stiff integration of the exact laws (Radau)")
    if study.engine_note:
        out.append(f"note: {study.engine_note}")
    return out


def engine_text(study) -> str:
    """:func:`engine_lines` as one short line for CSV cells and plot notes."""
    text = asked_words(study)
    if study.fits:
        text += "; fits: " + "; ".join(study.fits)
    if study.engine_note:
        text += "; " + study.engine_note
    return text


def sweep_csv(sw) -> str:
    """The sweep as CSV: one comment line (``#``) with the engine and its fits, said once, then a
    header naming every numeric column with its unit, then one row per point."""
    from kickback.outputs.csvout import csv_cell, csv_unit

    buf = io.StringIO()
    buf.write("# " + engine_text(sw).replace("\n", " ") + "; units in the column headers; sweep.json holds "
              "the same\n")
    wr = csv.writer(buf, lineterminator="\n")
    axes = [csv_unit(a.unit) for a in sw.axes]
    wr.writerow([f"{a.path} [{u}]" for a, (u, _) in zip(sw.axes, axes, strict=True)]
                + [f"{c.rsplit('_', 1)[0]} [{u}]" for c, u in COLUMNS] + ["engine", "pass", "note"])
    for k, p in enumerate(sw.points):
        vals = [csv_cell(sw.figures[c][k]) for c, _ in COLUMNS]
        note = sw.errors[k] or "; ".join(sw.failing[k])
        wr.writerow([csv_cell(x, off) for x, (_, off) in zip(p, axes, strict=True)] + vals
                    + [sw.engine_of(k), str(bool(sw.passed[k])).lower(), note])
    return buf.getvalue()


#: failing check names (``"part quantity"``) → the curve that shows the failing figure
_CHECK_CURVE = {"switch peak voltage": "peak_voltage_V", "case peak switch voltage": "peak_voltage_V",
                "case release time": "release_s", "case decay to zero": "to_zero_s",
                "switch avalanche energy": "avalanche_energy_J"}
FAIL_LABELS = {"peak_voltage_V": "switch voltage", "release_s": "release time", "to_zero_s": "decay time",
               "clamp_energy_J": "clamp energy", "avalanche_energy_J": "avalanche energy"}


def failure_marks(sw) -> tuple[dict, list]:
    """Where the sweep plot marks failures: curve name → points whose check on that figure fails,
    and the points that fail only checks of figures the plot does not draw (element ratings,
    drive checks, a clamp conducting while the switch is on, a time that does not occur)."""
    names = {cl.name for cl in sw.case.clamps}
    marks: dict[str, list[int]] = {}
    other = []
    for k, failing in enumerate(sw.failing):
        if sw.errors[k] or sw.passed[k]:
            continue
        drawn = False
        for name in failing:
            col = _CHECK_CURVE.get(name)
            if col is None and name.endswith(" clamp energy") and name[:-len(" clamp energy")] in names:
                col = "clamp_energy_J"
            if col is not None and sw.figures[col][k] is not None:
                marks.setdefault(col, [])
                if k not in marks[col]:
                    marks[col].append(k)
                drawn = True
        if not drawn:
            other.append(k)
    return marks, other


def _arr(sw, col):
    return np.array([np.nan if x is None else x for x in sw.figures[col]], dtype=float)


def _eng_axis(axis, a, nbins: int = 8) -> None:
    """Engineering-unit ticks; on a log axis majors at 1, 2, 5 × 10^k and no minor labels; at most
    ``nbins`` intervals on a linear axis (a narrow panel's labels then do not run into each other)."""
    from matplotlib.ticker import EngFormatter, LogLocator, MaxNLocator, NullFormatter

    decades = np.log10(max(a.values) / min(a.values)) if a.log and min(a.values) > 0 else 0.0
    if a.log and decades < 1.0:  # within a decade: round linear steps (a log locator gives one tick)
        axis.set_major_locator(MaxNLocator(nbins=nbins, steps=[1, 2, 2.5, 5, 10]))
        axis.set_minor_formatter(NullFormatter())
    elif a.log:
        axis.set_major_locator(LogLocator(subs=(1.0, 2.0, 5.0) if decades * 3 <= 2 * nbins else (1.0,)))
        axis.set_minor_formatter(NullFormatter())
    else:
        axis.set_major_locator(MaxNLocator(nbins=nbins, steps=[1, 2, 2.5, 5, 10]))
    axis.set_major_formatter(EngFormatter(unit=a.unit))


def sweep_figure(sw):
    """1 value: figures against it (failing points marked); 2 values: filled contours."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    case = sw.case
    limit_v = case.switch.rated_voltage * case.checks.derating if case.switch.rated_voltage else None
    if len(sw.axes) == 1:
        ax0 = sw.axes[0]
        x = sw.points[:, 0]
        fig = Figure(figsize=(11, 7), layout="constrained")
        a1, a2, a3 = fig.subplots(3, 1, sharex=True)
        a1.plot(x, _arr(sw, "peak_voltage_V"), marker="o", ms=3, label="peak switch-node voltage", **style.VOLTAGE)
        if limit_v:
            a1.axhline(limit_v, label=f"switch rating × {case.checks.derating:g} = {q(limit_v, 'V')}", **style.LIMIT)
        a2.plot(x, _arr(sw, "to_zero_s"), marker="o", ms=3, label="decay to zero", **style.COIL)
        has_release = any(v is not None for v in sw.figures["release_s"])
        if has_release:
            a2.plot(x, _arr(sw, "release_s"), marker="s", ms=3, label="release", **style.RELEASE)
        if case.checks.max_release_time:
            a2.axhline(case.checks.max_release_time, label=f"max release time {q(case.checks.max_release_time, 's')}",
                       **style.LIMIT)
        a3.plot(x, _arr(sw, "clamp_energy_J"), marker="o", ms=3, label="clamp energy", **style.clamp_style(0))
        a3.plot(x, _arr(sw, "avalanche_energy_J"), marker="^", ms=3, label="avalanche energy",
                **style.SWITCH_CURRENT)
        panel = {"peak_voltage_V": a1, "to_zero_s": a2, "release_s": a2, "clamp_energy_J": a3,
                 "avalanche_energy_J": a3}
        marks, other = failure_marks(sw)
        for col, rows in marks.items():
            if col == "release_s" and not has_release:
                continue
            rows = np.asarray(rows, int)
            panel[col].plot(x[rows], _arr(sw, col)[rows], label=f"fails: {FAIL_LABELS[col]}", gid=f"fail:{col}",
                            **style.FAIL_MARKER)
        for k in other:
            for ax in (a1, a2, a3):
                ax.axvline(x[k], color=style.VERMILLION, ls=":", lw=1, gid="fail:other",
                           label="fails a check not drawn here" if k == other[0] else "_")
        for ax in (a1, a2, a3):
            style.outside_legend(ax)
            ax.grid(True, lw=0.3)
        for ax, u in ((a1, "V"), (a2, "s"), (a3, "J")):
            ax.yaxis.set_major_formatter(EngFormatter(unit=u))
        if ax0.log:
            a3.set_xscale("log")
        _eng_axis(a3.xaxis, ax0)
        a3.set_xlabel(ax0.path)
    else:
        ax0, ax1 = sw.axes
        n0, n1 = len(ax0.values), len(ax1.values)
        fig = Figure(figsize=(11, 5.2), layout="constrained")
        panels = fig.subplots(1, 2)
        for ax, col, unit, title in ((panels[0], "peak_voltage_V", "V", "peak switch-node voltage"),
                                     (panels[1], "release_s" if any(v is not None for v in sw.figures["release_s"])
                                      else "to_zero_s", "s", "release time")):
            z = _arr(sw, col).reshape(n0, n1)
            cs = ax.contourf(ax1.values, ax0.values, z, levels=14, cmap="viridis")
            cb = fig.colorbar(cs, ax=ax, format=EngFormatter(unit=unit))
            cb.set_label(title if col != "to_zero_s" else "decay to zero")
            ok = sw.passed.reshape(n0, n1).astype(float)
            if 0 < ok.sum() < ok.size:
                ax.contour(ax1.values, ax0.values, ok, levels=[0.5], colors="w", linewidths=2)
            ax.plot(*np.meshgrid(ax1.values, ax0.values), "k.", ms=1.5, label="_points")
            ax.set_xlabel(ax1.path)
            ax.set_ylabel(ax0.path)
            if ax1.log:
                ax.set_xscale("log")
            if ax0.log:
                ax.set_yscale("log")
            for axis, a, nbins in ((ax.xaxis, ax1, 4), (ax.yaxis, ax0, 8)):
                _eng_axis(axis, a, nbins)
        panels[0].set_title("white line: boundary of passing designs; dots: the points run", fontsize=9)
    style.title(fig, f"{case.title} — sweep ({engine_words(sw)})")
    engine_footnote(fig, sw)
    return fig


def engine_footnote(fig, study) -> None:
    """The engine and its fits in small type under a figure; the layout keeps the axes, their
    tick and axis labels included, above it."""
    style.footnote(fig, engine_text(study))
