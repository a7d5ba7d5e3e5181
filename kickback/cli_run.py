"""``kickback run``, ``compare`` and ``new``: one case, its clamp options, a starter case."""

from __future__ import annotations

import gc
import sys
from pathlib import Path

import click

from kickback.cli_common import (
    TEMPLATES,
    audit_failed,
    die,
    fail,
    load_or_exit,
    measured_outputs,
    out_folder,
    pictures,
    read_measured,
    write_files,
    write_study,
)
from kickback.cliguard import FiniteFloatRange, located


@click.command()
@click.argument("case", metavar="CASE.toml")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON (the result contract) only.")
@click.option("--out", "out_dir", metavar="DIR", help="Write result.json, waveforms.csv and plots into DIR.")
@click.option("--no-plot", is_flag=True, help="With --out: skip the waveform plots.")
@click.option("--rtol", type=FiniteFloatRange(1e-12, 1e-3), default=1e-5, show_default=True,
              help="Relative tolerance of the detailed engine.")
@click.option("--measured", metavar="TRACE.csv", default=None,
              help="A measured coil current (unit A) or switch-node voltage (unit V) with t = 0 at "
                   "turn-off: overlay it (measured.png/svg with --out) and print the differences.")
def run(case: str, as_json: bool, out_dir: str | None, no_plot: bool, rtol: float,
        measured: str | None) -> None:
    """Simulate one turn-off of CASE and check it against the ratings.

    The result is audited first (energy ledger, no negative dissipation, every check the ratings
    call for, finite figures); a result that fails its audit gets no verdict: exit status 2.
    """
    # One run allocates a bounded amount (a few MB of cyclic garbage on the demo cases), while the
    # cyclic collector's passes over what numpy, scipy and matplotlib create on import cost ~8 %
    # of a cold run's CPU time (benchmarks/bench_cold.py): it is off until the command ends.
    collecting = gc.isenabled()
    gc.disable()
    painter = None
    try:
        c = load_or_exit(case)
        out = out_folder(out_dir)
        trace = read_measured(measured) if measured is not None else None
        if out is not None and not no_plot:
            from kickback.outputs.painter import start

            painter = start(pictures_of)  # matplotlib's import and the drawing beside the engine's work
        _run(c, out, trace, painter, as_json, no_plot, rtol)
    finally:
        if painter is not None:
            painter.close()
        if collecting:
            gc.enable()


def _run(c, out: Path | None, trace, painter, as_json: bool, no_plot: bool, rtol: float) -> None:
    from kickback.errors import KickbackError
    from kickback.outputs.jsonout import to_json
    from kickback.outputs.table import result_table
    from kickback.simulation import simulate

    try:
        result = simulate(c, rtol=rtol)
    except KickbackError as err:
        fail(c, err)
    if not result.audit.passed:
        from kickback.outputs.jsonout import audit_failed_json

        audit_failed(c, result, audit_failed_json(result.to_dict()) if as_json else None)
    sent = painter is not None and painter.send(result)
    payload = to_json(result.to_dict())
    extra, report = ({}, None) if trace is None else measured_outputs(result, trace, plot=not no_plot)
    if out is not None:
        painted = painter.receive() if sent else None
        _write_outputs(result, payload, out, plot=not no_plot, extra=extra, painted=painted)
    if as_json:
        click.echo(payload, nl=False)
    else:
        click.echo(result_table(result), nl=False)
    if report is not None:
        click.echo(report, nl=False, err=as_json)
    for finding in result.figures.findings:
        click.echo(f"warning: {finding}", err=True)
    sys.exit(0 if result.passed else 1)


def pictures_of(result) -> dict[str, bytes]:
    """The run's pictures as bytes: waveforms.png/svg, and pwm.png/svg for a PWM case."""
    from kickback.outputs.plots import figure_bytes

    fig, _ = result.plot()
    files = {f"waveforms.{fmt}": figure_bytes(fig, fmt) for fmt in ("png", "svg")}
    if result.pwm:
        from kickback.outputs.pwmplots import pwm_figure

        pfig = pwm_figure(result)
        files |= {f"pwm.{fmt}": figure_bytes(pfig, fmt) for fmt in ("png", "svg")}
    return files


def _write_outputs(result, payload: str, out: Path, plot: bool, extra: dict | None = None,
                   painted: dict | None = None) -> None:
    """Build every file in memory first (the pictures: ``painted`` when a child drew them), then
    write each atomically."""
    from kickback.outputs.csvout import waveforms_csv

    files = {"result.json": payload, "waveforms.csv": waveforms_csv(result)}
    if plot:
        files |= painted if painted is not None else pictures_of(result)
    files |= extra or {}
    write_files(out, files, ("result.json", "waveforms.csv") + pictures("waveforms", "pwm", "measured"))


@click.command()
@click.argument("case", metavar="CASE.toml")
@click.option("--json", "as_json", is_flag=True, help="Print the comparison as JSON only.")
@click.option("--out", "out_dir", metavar="DIR", help="Write compare.json and the overlay plot into DIR.")
@click.option("--no-plot", is_flag=True, help="With --out: skip the overlay plot.")
def compare(case: str, as_json: bool, out_dir: str | None, no_plot: bool) -> None:
    """Compare the case's clamp with alternative clamp options on the same coil and switch.

    Alternatives come from the case's [[option]] sets or, when it lists none, from built-in
    families sized to the derated switch voltage. Exit status follows the case's own clamp.
    """
    from kickback.errors import KickbackError
    from kickback.outputs.comparison import comparison_table
    from kickback.outputs.jsonout import to_json
    from kickback.studies.compare import compare as run_compare

    c = load_or_exit(case)
    out = out_folder(out_dir)
    try:
        cmp = run_compare(c)
    except KickbackError as err:
        die(located(err, c.source))
    own = cmp.own
    if own.result is None:
        die(f"{c.source}: the case's own clamp cannot be simulated: {own.error}")
    if not own.result.audit.passed:
        audit_failed(c, own.result, None)
    payload = to_json(cmp.to_dict())
    if out_dir is not None:
        from kickback.outputs.comparison import comparison_figure

        write_study(out, {"compare.json": payload}, "compare", None if no_plot else lambda: comparison_figure(cmp))
    click.echo(payload if as_json else comparison_table(cmp), nl=False)
    sys.exit(0 if own.result.passed else 1)


@click.command()
@click.argument("kind", type=click.Choice(TEMPLATES))
def new(kind: str) -> None:
    """Print a commented starter case for a relay, a solenoid valve or a small DC motor."""
    from importlib.resources import files

    click.echo(files("kickback").joinpath("templates", f"{kind}.toml").read_text(encoding="utf-8"), nl=False)
