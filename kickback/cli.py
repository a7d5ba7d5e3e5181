"""Command line: parse options, call the library, choose output paths. No physics here."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from kickback import __version__

TEMPLATES = ("relay", "valve", "motor")


def _die(message: str) -> None:
    click.echo(message, err=True)
    sys.exit(2)


def _load(path: str):
    from kickback.caseio import load_case
    from kickback.errors import CaseError

    try:
        return load_case(Path(path))
    except CaseError as err:
        _die(str(err))


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="kickback")
def main() -> None:
    """kickback: the turn-off transient of a transistor-switched coil and its clamp.

    Peak switch-node voltage, where the coil's energy goes, decay and release times, and
    rating checks. Exit status: 0 all checks pass, 1 a check fails, 2 bad input.
    """


@main.command()
@click.argument("case", metavar="CASE.toml")
@click.option("--json", "as_json", is_flag=True, help="Print the result as JSON (the result contract) only.")
@click.option("--out", "out_dir", metavar="DIR", help="Write result.json, waveforms.csv and plots into DIR.")
@click.option("--no-plot", is_flag=True, help="With --out: skip the waveform plots.")
@click.option("--rtol", type=click.FloatRange(1e-12, 1e-3), default=1e-5, show_default=True,
              help="Relative tolerance of the detailed engine.")
def run(case: str, as_json: bool, out_dir: str | None, no_plot: bool, rtol: float) -> None:
    """Simulate one turn-off of CASE and check it against the ratings."""
    from kickback.errors import KickbackError
    from kickback.outputs.jsonout import to_json
    from kickback.outputs.table import result_table
    from kickback.simulation import simulate

    c = _load(case)
    try:
        result = simulate(c, rtol=rtol)
    except KickbackError as err:
        _die(f"{c.source}: {err}")
    payload = to_json(result.to_dict())
    if out_dir is not None:
        _write_outputs(result, payload, Path(out_dir), plot=not no_plot)
    if as_json:
        click.echo(payload, nl=False)
    else:
        click.echo(result_table(result), nl=False)
    for finding in result.figures.findings:
        click.echo(f"warning: {finding}", err=True)
    sys.exit(0 if result.passed else 1)


def _write_outputs(result, payload: str, out: Path, plot: bool) -> None:
    """Build every file in memory first, then write each atomically."""
    from kickback.outputs.csvout import waveforms_csv

    files = {"result.json": payload, "waveforms.csv": waveforms_csv(result)}
    if plot:
        from kickback.outputs.plots import figure_bytes

        fig, _ = result.plot()
        for fmt in ("png", "svg"):
            files[f"waveforms.{fmt}"] = figure_bytes(fig, fmt)
    _write_files(out, files)


@main.command()
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

    c = _load(case)
    try:
        cmp = run_compare(c)
    except KickbackError as err:
        _die(str(err))
    payload = to_json(cmp.to_dict())
    if out_dir is not None:
        files = {"compare.json": payload}
        if not no_plot:
            from kickback.outputs.comparison import comparison_figure
            from kickback.outputs.plots import figure_bytes

            fig = comparison_figure(cmp)
            files |= {f"compare.{fmt}": figure_bytes(fig, fmt) for fmt in ("png", "svg")}
        _write_files(Path(out_dir), files)
    click.echo(payload if as_json else comparison_table(cmp), nl=False)
    own = cmp.own
    if own.result is None:
        _die(f"{c.source}: the case's own clamp cannot be simulated: {own.error}")
    sys.exit(0 if own.result.passed else 1)


@main.command()
@click.argument("case", metavar="CASE.toml")
@click.option("--vary", "varies", multiple=True, required=True, metavar="KEY=FROM:TO[:N]",
              help="A case value by its key path, e.g. clamp[0].element[1].voltage=12V:36V:13 (once or twice).")
@click.option("--log", is_flag=True, help="Space the points logarithmically.")
@click.option("--workers", type=click.IntRange(1, 64), default=None,
              help="Worker processes (default: the machine's cores).")
@click.option("--json", "as_json", is_flag=True, help="Print the sweep as JSON only.")
@click.option("--out", "out_dir", metavar="DIR", help="Write sweep.csv, sweep.json and the plot into DIR.")
@click.option("--no-plot", is_flag=True, help="With --out: skip the plot.")
def sweep(case: str, varies, log: bool, workers, as_json: bool, out_dir, no_plot: bool) -> None:
    """Run CASE over a range of one or two of its values and tabulate the figures.

    Exit status: 0 when every point passes its checks, 1 when one fails, 2 on bad input.
    """
    import os

    from kickback.errors import CaseError
    from kickback.outputs.jsonout import to_json
    from kickback.outputs.sweeps import sweep_csv, sweep_table
    from kickback.studies.sweep import parse_vary, run_sweep

    c = _load(case)
    try:
        axes = tuple(parse_vary(v, log) for v in varies)
        n = 1
        for ax in axes:
            n *= len(ax.values)
        bar = click.progressbar(length=n, label="sweep", file=sys.stderr) if n >= 10 else None
        workers = workers or min(os.cpu_count() or 1, 8)
        if bar is not None:
            with bar:
                done = [0]

                def progress(k):
                    bar.update(k - done[0])
                    done[0] = k

                sw = run_sweep(c, axes, workers=workers, progress=progress)
        else:
            sw = run_sweep(c, axes, workers=workers)
    except CaseError as err:
        _die(f"{c.source}: {err.key}: {err.message}" if err.key else f"{c.source}: {err.message}")
    payload = to_json(sw.to_dict())
    if out_dir is not None:
        files = {"sweep.csv": sweep_csv(sw), "sweep.json": payload}
        if not no_plot:
            from kickback.outputs.plots import figure_bytes
            from kickback.outputs.sweeps import sweep_figure

            fig = sweep_figure(sw)
            files |= {f"sweep.{fmt}": figure_bytes(fig, fmt) for fmt in ("png", "svg")}
        _write_files(Path(out_dir), files)
    click.echo(payload if as_json else sweep_table(sw), nl=False)
    sys.exit(0 if sw.passed.all() else 1)


@main.command()
@click.argument("case", metavar="CASE.toml")
@click.option("--workers", type=click.IntRange(1, 64), default=None,
              help="Worker processes (default: the machine's cores).")
@click.option("--json", "as_json", is_flag=True, help="Print the choice as JSON only.")
@click.option("--out", "out_dir", metavar="DIR", help="Write choose.json and the trade-off plot into DIR.")
@click.option("--no-plot", is_flag=True, help="With --out: skip the plot.")
def choose(case: str, workers, as_json: bool, out_dir, no_plot: bool) -> None:
    """Search clamp families over standard values (E24 voltages, E12 R and C) against the case's
    constraints and rank the feasible choices.

    Exit status: 0 when a feasible choice exists, 1 when none does, 2 on bad input.
    """
    import os

    from kickback.errors import CaseError
    from kickback.outputs.choice import choice_table
    from kickback.outputs.jsonout import to_json
    from kickback.studies.choose import choose as run_choose

    c = _load(case)
    workers = workers or min(os.cpu_count() or 1, 8)
    try:
        ch = run_choose(c, workers=workers)
    except CaseError as err:
        _die(str(err))
    payload = to_json(ch.to_dict())
    if out_dir is not None:
        files = {"choose.json": payload}
        if not no_plot:
            from kickback.outputs.choice import tradeoff_figure
            from kickback.outputs.plots import figure_bytes

            fig = tradeoff_figure(ch)
            files |= {f"tradeoff.{fmt}": figure_bytes(fig, fmt) for fmt in ("png", "svg")}
        _write_files(Path(out_dir), files)
    click.echo(payload if as_json else choice_table(ch), nl=False)
    sys.exit(0 if ch.ranked else 1)


def _write_files(out: Path, files: dict) -> None:
    from kickback.outputs.files import write_atomic

    if out.exists() and not out.is_dir():
        _die(f"{out}: --out must name a directory (expected a folder, found a file)")
    for name, data in files.items():
        write_atomic(out / name, data)
    click.echo(f"wrote {', '.join(str(out / n) for n in files)}", err=True)


@main.command()
@click.argument("kind", type=click.Choice(TEMPLATES))
def new(kind: str) -> None:
    """Print a commented starter case for a relay, a solenoid valve or a small DC motor."""
    from importlib.resources import files

    click.echo(files("kickback").joinpath("templates", f"{kind}.toml").read_text(encoding="utf-8"), nl=False)


if __name__ == "__main__":  # pragma: no cover
    main()
