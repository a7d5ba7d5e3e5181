"""Table, sample CSV and histograms of a tolerance study."""

from __future__ import annotations

import csv
import io

import numpy as np

from kickback.outputs.sweeps import engine_footnote, engine_lines, engine_words
from kickback.outputs.table import CAUTIONS, check_value, grid_lines, wrap_text
from kickback.studies.tolerance import PERCENTILES
from kickback.units import format_quantity as q

LABELS = {"peak_voltage_V": "peak switch V", "clamp_energy_J": "clamp energy",
          "avalanche_energy_J": "avalanche energy", "to_zero_s": "decay to zero", "release_s": "release"}


def figure_label(tr, f: str) -> str:
    if f.startswith("clamp["):
        k = int(f[6:f.index("]")])
        return f"clamp '{tr.case.clamps[k].name}' energy"
    return LABELS[f]


def _unit(path: str) -> str:
    if path == "coil_temperature":
        return "K"
    from kickback.keypath import unit_of

    return unit_of(path)


def params_text(d: dict) -> str:
    parts = []
    for k, v in d.items():
        if k == "coil_temperature":
            parts.append(f"{k} {v - 273.15:.1f} °C")
        else:
            u = _unit(k)
            parts.append(f"{k} {q(v, u) if u else f'{v:.4g}'}")
    return ", ".join(parts)


def tolerance_table(tr) -> str:
    lines = [f"{tr.case.title} — tolerance study: {tr.n} samples, seed {tr.seed}, "
             f"{engine_words(tr)}"]
    lines += [f"  {x}" for x in engine_lines(tr)]
    lines.append("")
    lo, hi = tr.yield_ci
    n_fail = tr.n - tr.n_passed
    lines.append(f"yield: {100 * tr.yield_:.2f} % of samples pass every check "
                 f"(95 % interval {100 * lo:.2f} … {100 * hi:.2f} %, exact binomial); {n_fail} fail")
    errs = tr.n_errors
    if errs:
        lines.append(f"{errs} samples could not be simulated (counted as failing)")
    lines += ["", "percentiles" if tr.exact else
              "percentiles (merged from per-chunk histograms: each within 0.025 % of numpy's on the samples; "
              "min and max exact)"]
    rows = [["figure"] + [f"{p:g} %" if p not in (0.0, 100.0) else ("min" if p == 0 else "max")
                          for p in PERCENTILES]]
    for f, unit, _ in tr.figure_list:
        d = tr.percentiles.get(f, {})
        if all(v is None for v in d.values()):
            continue
        rows.append([figure_label(tr, f)] + [q(d[p], unit) for p in PERCENTILES])
    lines += grid_lines(rows)
    if tr.worst_per_check:
        lines += ["", "worst sample per check"]
        for name, w in tr.worst_per_check.items():
            m = "—" if w["margin"] is None else f"{100 * w['margin']:+.1f} %"
            unit = w.get("unit", "")
            lim = "no limit" if w["limit"] is None else f"limit {check_value(w['limit'], unit)}"
            lines.append(f"  {name}: {check_value(w['value'], unit)} ({lim}, margin {m})")
            lines.append(f"      at {params_text(w['params'])}")
    if tr.corners:
        lines += ["", "worst case: band corners and a search inside the bands"]
        for f, unit, _ in tr.figure_list:
            c, s = tr.corners.get(f), tr.search.get(f)
            if c is None or s is None:
                continue
            note = "  (inside the bands: the corners miss it)" if s["interior"] else ""
            lines.append(f"  {figure_label(tr, f)}: corners up to {q(c['max'], unit)}, "
                         f"search {q(s['max'], unit)}{note}")
            lines.append(f"      at {params_text(s['params'])}")
    if tr.recheck:
        lines += ["", recheck_title(tr)]
        lines += [f"  {figure_label(tr, f)}: {text}" for f, text in recheck_rows(tr)]
        lines.append(f"  verdicts that differ: {tr.recheck['verdicts_differ']} of {tr.recheck['samples']}")
    lines += ["", "sensitivity (change of each figure as one value runs over its band, the others nominal)"]
    for f, unit, _ in tr.figure_list:
        sw = tr.sensitivity.get(f)
        if not sw or all(abs(x) == 0 for _, x in sw):
            continue
        top = ", ".join(f"{n} {q(x, unit)}" for n, x in sw[:4])
        lines.append(f"  {figure_label(tr, f)}: {top}")
    lines += ["", wrap_text(CAUTIONS)]
    return "\n".join(lines) + "\n"


def recheck_title(tr) -> str:
    return (f"batch engine against the detailed engine on {tr.recheck['samples']} samples drawn at random "
            "(largest difference, batch − detailed):")


def recheck_rows(tr) -> list[tuple[str, str]]:
    """(figure, "largest difference (relative) at sample k") for every followed figure."""
    out = []
    for f, unit, _ in tr.figure_list:
        e = tr.recheck["figures"].get(f)
        if e is None:
            continue
        if e["max_abs"] is None and not e["present_in_one_only"]:
            continue  # the time does not occur in these samples
        if e["max_abs"] is None:
            text = "—"
        else:
            text = f"{q(e['max_abs'], unit)} ({100 * e['max_rel']:.2g} %) at sample {e['sample']}"
        if e["present_in_one_only"]:
            text += f"; occurs in one engine only in {e['present_in_one_only']} samples"
        out.append((f, text))
    return out


def samples_csv(tr) -> str:
    """The samples as CSV: a header naming every numeric column with its unit (temperatures in °C,
    like every other output), one row per sample (a study whose samples were gathered; a larger
    one streams them with :class:`SamplesCsv`)."""
    buf = io.StringIO()
    out = SamplesCsv(buf, tr.names, tr.figure_list)
    out(0, tr.samples, tr.figures, tr.passed, tr.errors)
    return buf.getvalue()


class SamplesCsv:
    """A sink of :func:`kickback.studies.tolerance.run_tolerance` that writes samples.csv to the text
    file ``fh`` chunk by chunk, as the chunks arrive (in sample order, whatever the workers): the
    samples are never all in memory. The header goes first, with the first chunk or at once."""

    def __init__(self, fh, names, figure_list):
        from kickback.outputs.csvout import csv_unit

        self.fh, self.names, self.figure_list = fh, tuple(names), tuple(figure_list)
        self.units = [csv_unit(_unit(n)) for n in self.names]
        self.writer = csv.writer(fh, lineterminator="\n")
        self.writer.writerow([f"{n} [{u}]" for n, (u, _) in zip(self.names, self.units, strict=True)]
                             + [f"{f} [{u}]".replace(f"_{u} [", " [") for f, u, _ in self.figure_list]
                             + ["pass", "note"])

    def __call__(self, start, rows, figures, passed, errors) -> None:
        from kickback.outputs.csvout import csv_cell

        cols = [figures[f] for f, _, _ in self.figure_list]
        for k, row in enumerate(rows):
            self.writer.writerow([csv_cell(x, off) for x, (_, off) in zip(row, self.units, strict=True)]
                                 + [csv_cell(c[k]) for c in cols] + [str(bool(passed[k])).lower(), errors[k] or ""])


def histogram(tr, f: str, target: int = 60) -> tuple[np.ndarray, np.ndarray]:
    """Edges and counts of figure ``f``'s histogram: at most about ``target`` equal bins whose width
    is a power of two, each a union of the fine bins counted chunk by chunk
    (:func:`kickback.studies.tolstats.plot_bins`): the counts are exact, equal to
    ``numpy.histogram`` of the samples with the same edges, and sum to the samples where ``f`` occurs."""
    from kickback.studies.tolstats import plot_bins

    return plot_bins(tr.summaries[f], target)


def tolerance_figure(tr):
    """Histograms of the figures with their limits and the worst band corner drawn; each panel's
    legend sits above it, under the panel's title, clear of the bars."""
    from matplotlib.figure import Figure
    from matplotlib.ticker import EngFormatter

    from kickback.outputs import style

    case = tr.case
    shown = [(f, u) for f, u, _ in tr.figure_list if tr.summaries[f].n and tr.summaries[f].high > 0]
    n_rows = max(1, (len(shown) + 1) // 2)
    fig = Figure(figsize=(11, 0.6 + 3.0 * n_rows), layout="constrained")
    axes = np.atleast_1d(fig.subplots(n_rows, 2)).ravel()
    limits = {"peak_voltage_V": case.switch.rated_voltage * case.checks.derating if case.switch.rated_voltage
              else None, "release_s": case.checks.max_release_time, "to_zero_s": case.checks.max_decay_time,
              "clamp_energy_J": case.checks.max_clamp_energy}
    for ax, (f, u) in zip(axes, shown, strict=False):
        m = tr.summaries[f].n
        edges, counts = histogram(tr, f, min(60, max(10, int(np.sqrt(m)))))
        ax.stairs(counts, edges, fill=True, color=style.FILL, alpha=0.75, label=f"{int(counts.sum())} samples")
        lim = limits.get(f)
        if lim:
            ax.axvline(lim, label=f"limit {q(lim, u)}", **style.LIMIT)
        c = tr.corners.get(f)
        if c:
            ax.axvline(c["max"], label=f"worst band corner {q(c['max'], u)}", **style.WORST)
        ax.legend(fontsize=7.5, loc="lower left", bbox_to_anchor=(0.0, 1.0), borderaxespad=0.2, ncols=3,
                  frameon=False, handlelength=1.8, columnspacing=1.0)
        ax.set_title(figure_label(tr, f), fontsize=9.5, loc="left", pad=20)
        ax.xaxis.set_major_formatter(EngFormatter(unit=u))
        ax.xaxis.get_major_locator().set_params(nbins=6)
        ax.set_ylabel("samples")
    for ax in axes[len(shown):]:
        ax.set_visible(False)
    style.title(fig, f"{case.title} — {tr.n} samples, yield {100 * tr.yield_:.2f} % "
                     f"({engine_words(tr)})")
    engine_footnote(fig, tr)
    return fig
