"""``kickback report``: one self-contained HTML review file of a case."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from kickback.cli_common import SEED, audit_failed, check_room_for_a_clamp, die, fail, load_or_exit, read_measured
from kickback.cliguard import FiniteFloatRange


@click.command()
@click.argument("case", metavar="CASE.toml")
@click.option("-o", "--output", metavar="FILE.html",
              help="Where to write the report (default: <case stem>-report.html in the current folder).")
@click.option("--compare", "with_compare", is_flag=True,
              help="Add the clamp comparison (always added when the case has [[option]] sets).")
@click.option("--tolerance", "tol_samples", type=click.IntRange(1, 1_000_000), default=None, metavar="N",
              help="Add a tolerance study of N samples (the case needs a [tolerance] section).")
@click.option("--seed", type=SEED, default=1, show_default=True, help="Random state of the tolerance study.")
@click.option("--choose", "with_choose", is_flag=True, help="Add the clamp choice and its trade-off picture.")
@click.option("--measured", metavar="TRACE.csv", help="Add a measured trace over the simulated waveform.")
@click.option("--rtol", type=FiniteFloatRange(1e-12, 1e-3), default=1e-5, show_default=True,
              help="Relative tolerance of the detailed engine.")
def report(case: str, output: str | None, with_compare: bool, tol_samples, seed: int, with_choose: bool,
           measured, rtol: float) -> None:
    """Write one self-contained HTML review file of CASE: schematic, inputs, checks, energy
    ledger, waveforms, assumptions, cautions and how to reproduce it (printable, no external files).

    Exit status: 0 all checks pass, 1 a check fails, 2 bad input.
    """
    import shlex

    from kickback.errors import KickbackError, OutputError
    from kickback.outputs.files import check_writable, write_atomic
    from kickback.outputs.report import report_html, verdict
    from kickback.simulation import simulate
    from kickback.studies.compare import compare as run_compare

    c = load_or_exit(case)
    trace = read_measured(measured) if measured else None
    target = Path(output) if output is not None else Path.cwd() / f"{Path(case).stem}-report.html"
    try:
        check_writable(target, "-o", folder=False)
    except OutputError as err:
        die(str(err))
    _report_date()  # a bad SOURCE_DATE_EPOCH fails here, before the work
    cmp = None
    try:
        if with_compare or c.options:
            cmp = run_compare(c, rtol=rtol)
            if cmp.own.result is None:
                die(f"{c.source}: the case's own clamp cannot be simulated: {cmp.own.error}")
            result = cmp.own.result
        else:
            result = simulate(c, rtol=rtol)
        if not result.audit.passed:
            audit_failed(c, result, None)  # no review file with a verdict the result has not earned
        study = choice = None
        if tol_samples:
            import os

            from kickback.studies.tolerance import run_tolerance

            study = run_tolerance(c, tol_samples, seed, workers=min(os.cpu_count() or 1, 8))
        if with_choose:
            import os

            check_room_for_a_clamp(c)

            from kickback.studies.choose import choose as run_choose

            choice = run_choose(c, workers=min(os.cpu_count() or 1, 8))
    except KickbackError as err:
        fail(c, err)
    words = ["kickback", "report", case] + (["-o", output] if output else []) + (["--compare"] if with_compare else [])
    words += ([f"--tolerance={tol_samples}", f"--seed={seed}"] if tol_samples else [])
    words += ["--choose"] if with_choose else []
    words += ["--measured", measured] if measured else []
    words += [] if rtol == 1e-5 else ["--rtol", f"{rtol:g}"]
    meas = None
    if trace is not None:
        from kickback.studies.measured import compare_measured

        meas = (trace, compare_measured(result, trace))
    html = report_html(result, comparison=cmp, command=shlex.join(words), date=_report_date(), tolerance=study,
                       choice=choice, measured=meas)
    write_atomic(target, html)
    word, _, line = verdict(result)
    click.echo(f"{c.title}: {word} ({line})")
    for finding in result.figures.findings:
        click.echo(f"warning: {finding}", err=True)
    click.echo(f"wrote {target}", err=True)
    sys.exit(0 if result.passed else 1)


def _report_date() -> str:
    """Now, in UTC to the second; SOURCE_DATE_EPOCH (seconds) when set, for reproducible builds."""
    import os
    from datetime import UTC, datetime

    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    try:
        when = datetime.fromtimestamp(int(epoch), UTC) if epoch and epoch.isdigit() else datetime.now(UTC)
    except (OverflowError, ValueError, OSError):
        die(f"SOURCE_DATE_EPOCH: {epoch[:40]!r} is not a date kickback can write (expected seconds since "
             "1970-01-01, e.g. 1700000000)")
    return when.strftime("%Y-%m-%d %H:%M:%S UTC")
