"""``kickback check PATH…``: the design check of many cases at once (a CI step)."""

from __future__ import annotations

import sys

import click

from kickback.cli_parallel import open_executor, scheduler_option, workers_or_default
from kickback.cliguard import note
from kickback.progress import with_progress


@click.command()
@click.argument("paths", nargs=-1, required=True, metavar="PATH…")
@click.option("--tolerance", "n_tol", type=click.IntRange(1, 1_000_000), default=None, metavar="N",
              help="Also run each case's own [tolerance] study with N samples and report its yield with the "
                   "95 % interval (a case without [tolerance] says so).")
@click.option("--seed", type=click.IntRange(0, 2**63 - 1), default=1, show_default=True,
              help="Random state of the tolerance studies: same seed, same numbers.")
@click.option("--workers", type=click.IntRange(1, 64), default=None,
              help="Worker processes (default: the machine's cores, at most 8).")
@scheduler_option
@click.option("--json", "as_json", is_flag=True,
              help="Print one JSON object per case, one per line (JSON Lines), instead of the table.")
@click.option("--junit", "junit", metavar="FILE", default=None,
              help="Also write a JUnit XML report: one test case per design check.")
def check(paths, n_tol, seed, workers, scheduler, as_json, junit) -> None:
    """Check every case of PATH… (case files, folders searched for *.toml cases, globs).

    A file named on its own is always checked; in a folder or a glob, a TOML file without a
    [coil] table is skipped and listed (e.g. pyproject.toml). Prints one row per case, then the
    failing checks in full. Exit status: 0 every case passes, 1 a check fails, 2 a case is
    invalid, cannot be solved or fails its audit (each named).
    """
    from kickback.outputs.checkout import json_lines, junit_xml, summary_table
    from kickback.studies.check import check_cases, find_cases

    out = None
    if junit is not None:
        from kickback.errors import OutputError
        from kickback.outputs.files import check_writable

        try:
            out = check_writable(junit, "--junit", folder=False)
        except OutputError as err:
            note(str(err))
            sys.exit(2)
    found = find_cases(paths)
    for p in found.missing:
        note(f"{p}: no such file, folder or match (expected case files, folders or globs)")
    if found.missing:
        sys.exit(2)
    if not found.cases:
        note(f"{' '.join(paths)}: no case files found (expected *.toml files with a [coil] table)")
        sys.exit(2)
    if as_json:  # the table lists them itself
        for p, why in found.skipped:
            note(f"note: {p}: skipped, {why}")
    executor = open_executor(scheduler)
    results = with_progress("cases", len(found.cases), lambda progress: check_cases(
        list(found.cases), tolerance=n_tol or 0, seed=seed, workers=workers_or_default(workers),
        progress=progress, executor=executor))
    if out is not None:
        from kickback.outputs.files import write_atomic

        write_atomic(out, junit_xml(results))
    if as_json:
        click.echo(json_lines(results), nl=False)
    else:
        click.echo(summary_table(results, found.skipped), nl=False)
    for cc in results:
        if cc.status not in ("pass", "fail"):
            note(f"error: {cc.message}")
    statuses = {cc.status for cc in results}
    sys.exit(2 if statuses - {"pass", "fail"} else 1 if "fail" in statuses else 0)
