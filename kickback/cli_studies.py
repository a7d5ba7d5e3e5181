"""``kickback sweep``, ``choose`` and ``tolerance``: studies over many variants of one case."""

from __future__ import annotations

import contextlib
import sys

import click

from kickback.cli_common import (
    ENGINE_HELP,
    ENGINES,
    MAX_POINTS,
    SEED,
    check_room_for_a_clamp,
    die,
    load_or_exit,
    out_folder,
    study_errors,
    write_study,
)
from kickback.cli_parallel import open_executor, scheduler_option
from kickback.progress import with_progress


@click.command()
@click.argument("case", metavar="CASE.toml")
@click.option("--vary", "varies", multiple=True, required=True, metavar="KEY=FROM:TO[:N]",
              help="A case value by its key path, e.g. clamp[0].element[1].voltage=12V:36V:13 (once or twice).")
@click.option("--log", is_flag=True, help="Space the points logarithmically.")
@click.option("--workers", type=click.IntRange(1, 64), default=None,
              help="Worker processes (default: the machine's cores).")
@click.option("--engine", type=click.Choice(ENGINES), default="auto", show_default=True,
              help=ENGINE_HELP)
@click.option("--json", "as_json", is_flag=True, help="Print the sweep as JSON only.")
@click.option("--out", "out_dir", metavar="DIR", help="Write sweep.csv, sweep.json and the plot into DIR.")
@click.option("--no-plot", is_flag=True, help="With --out: skip the plot.")
@scheduler_option
def sweep(case: str, varies, log: bool, workers, engine: str, as_json: bool, out_dir, no_plot: bool,
          scheduler) -> None:
    """Run CASE over a range of one or two of its values and tabulate the figures.

    The batch engine runs every point at once unless the case has a feature it does not cover
    (then the detailed engine, in worker processes); the output names the engine and its fits.
    Exit status: 0 when every point passes its checks, 1 when one fails, 2 on bad input.
    """
    import os

    import numpy as np

    from kickback.outputs.jsonout import to_json
    from kickback.outputs.sweeps import sweep_csv, sweep_table
    from kickback.studies.sweep import parse_vary, run_sweep

    c = load_or_exit(case)
    out = out_folder(out_dir)
    with study_errors(c.source):
        for v in varies:
            if any(ch.isdigit() and not ch.isascii() for ch in v):
                die(f"{c.source}: --vary: {v!r} holds a digit other than 0-9 (expected ASCII digits)")
        axes = tuple(parse_vary(v, log, case=c) for v in varies)
        for ax in axes:
            if not np.all(np.isfinite(ax.values)):
                die(f"{c.source}: --vary: {ax.path}: FROM and TO must be finite numbers (got {ax.values[0]:g} "
                     f"and {ax.values[-1]:g})")
        n = 1
        for ax in axes:
            n *= len(ax.values)
        if n > MAX_POINTS:
            die(f"{c.source}: --vary: {n} points in all (expected at most {MAX_POINTS:,} points over every axis)")
        workers = workers or min(os.cpu_count() or 1, 8)
        executor = open_executor(scheduler)
        sw = with_progress("sweep", n, lambda progress: run_sweep(c, axes, workers=workers, progress=progress,
                                                                  engine=engine, executor=executor))
    payload = to_json(sw.to_dict())
    if out_dir is not None:
        from kickback.outputs.sweeps import sweep_figure

        write_study(out, {"sweep.csv": sweep_csv(sw), "sweep.json": payload}, "sweep",
                    None if no_plot else lambda: sweep_figure(sw))
    click.echo(payload if as_json else sweep_table(sw), nl=False)
    sys.exit(0 if sw.passed.all() else 1)


@click.command()
@click.argument("case", metavar="CASE.toml")
@click.option("--workers", type=click.IntRange(1, 64), default=None,
              help="Worker processes (default: the machine's cores).")
@click.option("--engine", type=click.Choice(ENGINES), default="auto", show_default=True,
              help=ENGINE_HELP + " The top choices are always simulated again with the detailed engine.")
@click.option("--json", "as_json", is_flag=True, help="Print the choice as JSON only.")
@click.option("--out", "out_dir", metavar="DIR", help="Write choose.json and the trade-off plot into DIR.")
@click.option("--no-plot", is_flag=True, help="With --out: skip the plot.")
@scheduler_option
def choose(case: str, workers, engine: str, as_json: bool, out_dir, no_plot: bool, scheduler) -> None:
    """Search clamp families over standard values (E24 voltages, E12 R and C) against the case's
    constraints and rank the feasible choices.

    Each family's candidates run as one batch of the batch engine (unless the case has a feature
    it does not cover); candidates near a limit and the top choices are judged by the detailed engine.
    Exit status: 0 when a feasible choice exists, 1 when none does, 2 on bad input.
    """
    import os

    from kickback.outputs.choice import choice_table
    from kickback.outputs.jsonout import to_json
    from kickback.studies.choose import choose as run_choose

    c = load_or_exit(case)
    out = out_folder(out_dir)
    check_room_for_a_clamp(c)
    workers = workers or min(os.cpu_count() or 1, 8)
    with study_errors(c.source):
        ch = run_choose(c, workers=workers, engine=engine, executor=open_executor(scheduler))
    payload = to_json(ch.to_dict())
    if out_dir is not None:
        from kickback.outputs.choice import tradeoff_figure

        write_study(out, {"choose.json": payload}, "tradeoff", None if no_plot else lambda: tradeoff_figure(ch))
    click.echo(payload if as_json else choice_table(ch), nl=False)
    sys.exit(0 if ch.ranked else 1)


@click.command()
@click.argument("case", metavar="CASE.toml")
@click.option("--samples", type=click.IntRange(1, MAX_POINTS), default=1000, show_default=True,
              help="Monte Carlo samples.")
@click.option("--seed", type=SEED, default=1, show_default=True, help="Random state: same seed, same numbers.")
@click.option("--workers", type=click.IntRange(1, 64), default=None,
              help="Worker processes (default: the machine's cores).")
@click.option("--engine", type=click.Choice(ENGINES), default="auto", show_default=True, help=ENGINE_HELP)
@click.option("--recheck", type=click.IntRange(0, 10_000), default=16, show_default=True, metavar="K",
              help="With the batch engine: run K samples drawn at random again with the detailed engine and "
                   "report the largest difference per figure (0: none).")
@click.option("--json", "as_json", is_flag=True, help="Print the study as JSON only.")
@click.option("--out", "out_dir", metavar="DIR", help="Write tolerance.json, samples.csv and histograms into DIR.")
@click.option("--no-plot", is_flag=True, help="With --out: skip the histograms.")
@scheduler_option
def tolerance(case: str, samples: int, seed: int, workers, engine: str, recheck: int, as_json: bool, out_dir,
              no_plot: bool, scheduler) -> None:
    """Monte Carlo over the case's [tolerance] bands: percentiles, yield, worst cases, sensitivity.

    The samples run on the batch engine in chunks (unless the case has a feature it does not
    cover: then the detailed engine, in worker processes); the output names the engine.
    Exit status: 0 when every sample passes, 1 when any fails, 2 on bad input.
    """
    import os

    from kickback.outputs.jsonout import to_json
    from kickback.outputs.tolerances import SamplesCsv, tolerance_table
    from kickback.studies.tolerance import run_tolerance

    c = load_or_exit(case)
    out = out_folder(out_dir)
    if not c.tolerances:
        die(f"{c.source}: tolerance: the case has no [tolerance] section (expected at least one toleranced "
             'value, e.g. [tolerance."coil.inductance"] band = "10 %")')
    workers = workers or min(os.cpu_count() or 1, 8)
    executor = open_executor(scheduler)
    with contextlib.ExitStack() as stack:
        sink = csv_path = None
        if out is not None:  # samples.csv streamed chunk by chunk, in sample order (never all in memory)
            from kickback.outputs.files import streamed
            from kickback.studies.tolerance import figure_list

            fh, csv_path = stack.enter_context(streamed(out, "samples.csv"))
            sink = SamplesCsv(fh, tuple(t.path for t in c.tolerances), figure_list(c))
        with study_errors(c.source):
            tr = with_progress("samples", samples,
                               lambda progress: run_tolerance(c, samples, seed, workers=workers, progress=progress,
                                                              engine=engine, recheck=recheck, executor=executor,
                                                              sink=sink))
        payload = to_json(tr.to_dict())
        if out is not None:
            from kickback.outputs.tolerances import tolerance_figure

            fh.close()
            write_study(out, {"tolerance.json": payload, "samples.csv": csv_path}, "tolerance",
                        None if no_plot else lambda: tolerance_figure(tr))
    click.echo(payload if as_json else tolerance_table(tr), nl=False)
    sys.exit(0 if tr.n_passed == tr.n else 1)
