"""The studies' sections of the HTML report: a tolerance study and a clamp choice, each with
the engine that ran it (the batch engine's fits, or why the detailed engine ran) and, for a
tolerance study on the batch engine, its samples checked against the detailed engine."""

from __future__ import annotations

from html import escape

from kickback.outputs import reportparts as parts
from kickback.outputs.sweeps import engine_words
from kickback.units import format_quantity as q


def _section(*args):
    from kickback.outputs.report import Section

    return Section(*args)


def figure_html(*args):
    from kickback.outputs.report import figure_html as fig

    return fig(*args)


def tolerance_section(study=None):
    """The tolerance study (:func:`kickback.studies.tolerance.run_tolerance`): yield with its
    interval, percentiles, worst cases, the batch engine against the detailed one on samples drawn
    at random, and histograms; a :class:`~kickback.outputs.report.Section`, None without a study."""
    if study is None:
        return None
    from kickback.outputs.tolerances import figure_label, params_text, tolerance_figure
    from kickback.studies.tolerance import PERCENTILES

    lo, hi = study.yield_ci
    body = (f"<p><b>Yield {100 * study.yield_:.2f} %</b> of {study.n} samples pass every check "
            f"(95 % interval {100 * lo:.2f} … {100 * hi:.2f} %, exact binomial); seed {study.seed}, "
            f"{escape(engine_words(study))}.</p>")
    head = ["figure"] + [("min" if p == 0 else "max" if p == 100 else f"{p:g} %") for p in PERCENTILES]
    rows = []
    for f, unit, _ in study.figure_list:
        d = study.percentiles.get(f, {})
        if all(v is None for v in d.values()):
            continue
        rows.append([figure_label(study, f)] + [q(d[p], unit) for p in PERCENTILES])
    body += parts.table(head, rows)
    body += _engine_note(study, "Samples run by the")
    worst = []
    for f, unit, _ in study.figure_list:
        c, srch = study.corners.get(f), study.search.get(f)
        if c is None or srch is None:
            continue
        note = " (inside the bands: the corners miss it)" if srch["interior"] else ""
        worst.append([figure_label(study, f), q(c["max"], unit), q(srch["max"], unit) + note,
                      params_text(srch["params"])])
    if worst:
        body += "<h3>Worst cases</h3>" + parts.table(["figure", "worst corner", "search inside the bands", "at"],
                                                       worst, "worst")
    if study.recheck:
        from kickback.outputs.tolerances import recheck_rows, recheck_title

        rows = [[figure_label(study, f), text] for f, text in recheck_rows(study)]
        rows.append(["verdicts that differ", f"{study.recheck['verdicts_differ']} of {study.recheck['samples']}"])
        body += f"<h3>Checked against the detailed engine</h3><p>{escape(recheck_title(study))}</p>"
        body += parts.table(["figure", "largest difference"], rows)
    body += figure_html(tolerance_figure(study), "tol", "Histograms of the figures over the samples, limits dashed, "
                    "worst corner dotted.")
    return _section("tolerance", "Tolerances", body)


def _engine_note(study, lead: str) -> str:
    """The engine of a study (and the batch engine's fits) as a note paragraph."""
    fits = "".join(f"<br>fit: {escape(f)}" for f in study.fits)
    note = f"<br>{escape(study.engine_note)}" if study.engine_note else ""
    return f'<p class="note">{escape(lead)} {escape(engine_words(study))}.{fits}{note}</p>'


def tradeoff_section(choice=None):
    """The clamp choice (:func:`kickback.studies.choose.choose`): ranked choices and the
    release-versus-voltage trade-off; a :class:`~kickback.outputs.report.Section`, None without one."""
    if choice is None:
        return None
    from kickback.outputs.choice import tradeoff_figure

    rows = [[str(k + 1), c.option.name, q(c.figures["peak_voltage_V"], "V"), f"{100 * c.margin:.1f} %",
             q(c.release, "s"), q(c.figures["clamp_energy_J"], "J"), str(c.parts)]
            for k, c in enumerate(choice.ranked[:10])]
    body = (f"<p>{len(choice.ranked)} of {len(choice.ranked) + len(choice.rejected)} candidates over standard "
            "values (E24 voltages, E12 resistors and capacitors) meet the case's constraints; fastest release "
            "first, then switch-voltage margin, then fewest parts. Candidates use a generic diode and ideal "
            "Zener/TVS: they show the trade-off, they are not parts.</p>")
    body += _engine_note(choice, "candidates screened by the")
    if choice.confirmed:
        body += (f'<p class="note">Near a limit, judged on the detailed engine\'s figures: '
                 f"{escape(', '.join(choice.confirmed))}.</p>")
    body += parts.table(["rank", "clamp", "peak switch V", "margin", "release / decay", "clamp energy", "parts"],
                        rows)
    body += figure_html(tradeoff_figure(choice), "trade", "Release time against peak switch voltage per family; "
                    "filled markers pass, open ones fail or are not offered (`kickback choose` says why); "
                    "marker size is the clamp energy.")
    return _section("tradeoff", "Clamp trade-off", body)
