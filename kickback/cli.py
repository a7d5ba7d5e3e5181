"""Command line: parse options, call the library, choose output paths. No physics here."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from kickback import __version__
from kickback.cli_parallel import open_executor, scheduler_option
from kickback.cliguard import FiniteFloatRange, Guarded, located, note, set_source
from kickback.progress import with_progress as _with_progress

TEMPLATES = ("relay", "valve", "motor")
ENGINES = ("auto", "batch", "detailed")
#: largest --seed: numpy's generators take any non-negative integer; 2**63 - 1 keeps it one machine word
SEED = click.IntRange(0, 2**63 - 1)
#: largest number of sweep points (all axes together) and of tolerance samples: memory stays below ~1 GiB
MAX_POINTS = 1_000_000
ENGINE_HELP = ("auto: the batch engine (exact piecewise-linear, all variants at once) unless the case has a "
               "feature it does not cover (thermal networks, saturating coil, [drive], motor), then the detailed "
               "engine; batch or detailed: that engine.")


def _die(message: str) -> None:
    note(message)
    sys.exit(2)


def _fail(case, err) -> None:
    """Exit 2 with a located message (the case's file when the error names none)."""
    _die(located(err, case.source))


def _load(path: str):
    """The case, or exit 2 with its one-line message; notes on plain numbers far from their key's
    usual range go to stderr."""
    from kickback.caseio import load_case
    from kickback.errors import CaseError

    set_source(path)
    try:
        case = load_case(Path(path))
    except CaseError as err:
        _die(str(err))
    for line in getattr(case, "notes", ()):
        note(f"note: {line}")
    return case


def _out(out_dir: str | None, option: str = "--out") -> Path | None:
    """The output folder, checked before any work (exit 2 when it cannot be written)."""
    from kickback.errors import OutputError
    from kickback.outputs.files import check_writable

    if out_dir is None:
        return None
    try:
        return check_writable(out_dir, option, folder=True)
    except OutputError as err:
        _die(str(err))


@click.group(cls=Guarded, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="kickback")
def main() -> None:
    """kickback: the turn-off transient of a transistor-switched coil and its clamp.

    Peak switch-node voltage, where the coil's energy goes, decay and release times, and
    rating checks. Exit status: 0 all checks pass, 1 a check fails, 2 bad input, a case that
    cannot be solved, or a result that fails its own audit (no verdict is given), 130 interrupted.
    """


@main.command()
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
    from kickback.errors import KickbackError
    from kickback.outputs.jsonout import to_json
    from kickback.outputs.table import result_table
    from kickback.simulation import simulate

    c = _load(case)
    out = _out(out_dir)
    trace = _read_measured(measured) if measured is not None else None
    try:
        result = simulate(c, rtol=rtol)
    except KickbackError as err:
        _fail(c, err)
    if not result.audit.passed:
        from kickback.outputs.jsonout import audit_failed_json

        _audit_failed(c, result, audit_failed_json(result.to_dict()) if as_json else None)
    payload = to_json(result.to_dict())
    extra, report = ({}, None) if trace is None else _measured_outputs(result, trace, plot=not no_plot)
    if out is not None:
        _write_outputs(result, payload, out, plot=not no_plot, extra=extra)
    if as_json:
        click.echo(payload, nl=False)
    else:
        click.echo(result_table(result), nl=False)
    if report is not None:
        click.echo(report, nl=False, err=as_json)
    for finding in result.figures.findings:
        click.echo(f"warning: {finding}", err=True)
    sys.exit(0 if result.passed else 1)


def _audit_failed(case, result, payload: str | None) -> None:
    """Exit 2: the result failed its audit (kickback.audit), so it gets no PASS or FAIL. The
    findings go to stderr; with --json the result object (``"pass": null`` and its ``"audit"``)
    still goes to stdout."""
    if payload is not None:
        click.echo(payload, nl=False)
    click.echo(f"error: {case.source}: the result failed its audit, no verdict given "
               f"({result.waveforms.engine} engine): " + "; ".join(result.audit.findings), err=True)
    sys.exit(2)


def _write_outputs(result, payload: str, out: Path, plot: bool, extra: dict | None = None) -> None:
    """Build every file in memory first, then write each atomically."""
    from kickback.outputs.csvout import waveforms_csv

    files = {"result.json": payload, "waveforms.csv": waveforms_csv(result)}
    if plot:
        from kickback.outputs.plots import figure_bytes

        fig, _ = result.plot()
        for fmt in ("png", "svg"):
            files[f"waveforms.{fmt}"] = figure_bytes(fig, fmt)
        if result.pwm:
            from kickback.outputs.pwmplots import pwm_figure

            pfig = pwm_figure(result)
            for fmt in ("png", "svg"):
                files[f"pwm.{fmt}"] = figure_bytes(pfig, fmt)
    files |= extra or {}
    _write_files(out, files, ("result.json", "waveforms.csv") + _pictures("waveforms", "pwm", "measured"))


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
    out = _out(out_dir)
    try:
        cmp = run_compare(c)
    except KickbackError as err:
        _die(located(err, c.source))
    own = cmp.own
    if own.result is None:
        _die(f"{c.source}: the case's own clamp cannot be simulated: {own.error}")
    if not own.result.audit.passed:
        _audit_failed(c, own.result, None)
    payload = to_json(cmp.to_dict())
    if out_dir is not None:
        files = {"compare.json": payload}
        if not no_plot:
            from kickback.outputs.comparison import comparison_figure

            files |= _figure_files("compare", comparison_figure(cmp))
        _write_files(out, files, ("compare.json",) + _pictures("compare"))
    click.echo(payload if as_json else comparison_table(cmp), nl=False)
    sys.exit(0 if own.result.passed else 1)


@main.command()
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

    from kickback.errors import CaseError, SolverError
    from kickback.outputs.jsonout import to_json
    from kickback.outputs.sweeps import sweep_csv, sweep_table
    from kickback.studies.sweep import parse_vary, run_sweep

    c = _load(case)
    out = _out(out_dir)
    try:
        for v in varies:
            if any(ch.isdigit() and not ch.isascii() for ch in v):
                _die(f"{c.source}: --vary: {v!r} holds a digit other than 0-9 (expected ASCII digits)")
        axes = tuple(parse_vary(v, log, case=c) for v in varies)
        for ax in axes:
            if not np.all(np.isfinite(ax.values)):
                _die(f"{c.source}: --vary: {ax.path}: FROM and TO must be finite numbers (got {ax.values[0]:g} "
                     f"and {ax.values[-1]:g})")
        n = 1
        for ax in axes:
            n *= len(ax.values)
        if n > MAX_POINTS:
            _die(f"{c.source}: --vary: {n} points in all (expected at most {MAX_POINTS:,} points over every axis)")
        workers = workers or min(os.cpu_count() or 1, 8)
        executor = open_executor(scheduler)
        sw = _with_progress("sweep", n, lambda progress: run_sweep(c, axes, workers=workers, progress=progress,
                                                                  engine=engine, executor=executor))
    except CaseError as err:
        _die(f"{c.source}: {err.key}: {err.message}" if err.key else f"{c.source}: {err.message}")
    except SolverError as err:
        _die(f"{c.source}: --engine: {err}")
    payload = to_json(sw.to_dict())
    if out_dir is not None:
        files = {"sweep.csv": sweep_csv(sw), "sweep.json": payload}
        if not no_plot:
            from kickback.outputs.sweeps import sweep_figure

            files |= _figure_files("sweep", sweep_figure(sw))
        _write_files(out, files, ("sweep.csv", "sweep.json") + _pictures("sweep"))
    click.echo(payload if as_json else sweep_table(sw), nl=False)
    sys.exit(0 if sw.passed.all() else 1)


@main.command()
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

    from kickback.errors import CaseError, SolverError
    from kickback.outputs.choice import choice_table
    from kickback.outputs.jsonout import to_json
    from kickback.studies.choose import choose as run_choose

    c = _load(case)
    out = _out(out_dir)
    _check_room_for_a_clamp(c)
    workers = workers or min(os.cpu_count() or 1, 8)
    try:
        ch = run_choose(c, workers=workers, engine=engine, executor=open_executor(scheduler))
    except CaseError as err:
        _die(located(err, c.source))
    except SolverError as err:
        _die(f"{c.source}: --engine: {err}")
    payload = to_json(ch.to_dict())
    if out_dir is not None:
        files = {"choose.json": payload}
        if not no_plot:
            from kickback.outputs.choice import tradeoff_figure

            files |= _figure_files("tradeoff", tradeoff_figure(ch))
        _write_files(out, files, ("choose.json",) + _pictures("tradeoff"))
    click.echo(payload if as_json else choice_table(ch), nl=False)
    sys.exit(0 if ch.ranked else 1)


def _check_room_for_a_clamp(c) -> None:
    """Exit 2 when the derated switch voltage is not above the supply: no clamp can be chosen then."""
    from kickback.studies.designs import allowed_voltage
    from kickback.units import format_quantity

    v_allow, vs = allowed_voltage(c), c.supply.voltage
    if not v_allow > vs:
        key = "switch.rated_voltage" if c.switch.rated_voltage is not None else "switch.breakdown_voltage"
        _die(f"{c.source}: {key}: × checks.derating = {format_quantity(v_allow, 'V')} is not above the supply "
             f"{format_quantity(vs, 'V')}, so no clamp can keep the switch within it (expected a derated rating "
             "above the supply voltage)")


@main.command()
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

    c = _load(case)
    trace = _read_measured(measured) if measured else None
    target = Path(output) if output is not None else Path.cwd() / f"{Path(case).stem}-report.html"
    try:
        check_writable(target, "-o", folder=False)
    except OutputError as err:
        _die(str(err))
    _report_date()  # a bad SOURCE_DATE_EPOCH fails here, before the work
    cmp = None
    try:
        if with_compare or c.options:
            cmp = run_compare(c, rtol=rtol)
            if cmp.own.result is None:
                _die(f"{c.source}: the case's own clamp cannot be simulated: {cmp.own.error}")
            result = cmp.own.result
        else:
            result = simulate(c, rtol=rtol)
        if not result.audit.passed:
            _audit_failed(c, result, None)  # no review file with a verdict the result has not earned
        study = choice = None
        if tol_samples:
            import os

            from kickback.studies.tolerance import run_tolerance

            study = run_tolerance(c, tol_samples, seed, workers=min(os.cpu_count() or 1, 8))
        if with_choose:
            import os

            _check_room_for_a_clamp(c)

            from kickback.studies.choose import choose as run_choose

            choice = run_choose(c, workers=min(os.cpu_count() or 1, 8))
    except KickbackError as err:
        _fail(c, err)
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
        _die(f"SOURCE_DATE_EPOCH: {epoch[:40]!r} is not a date kickback can write (expected seconds since "
             "1970-01-01, e.g. 1700000000)")
    return when.strftime("%Y-%m-%d %H:%M:%S UTC")


@main.command()
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

    from kickback.errors import CaseError, SolverError
    from kickback.outputs.jsonout import to_json
    from kickback.outputs.tolerances import samples_csv, tolerance_table
    from kickback.studies.tolerance import run_tolerance

    c = _load(case)
    out = _out(out_dir)
    if not c.tolerances:
        _die(f"{c.source}: tolerance: the case has no [tolerance] section (expected at least one toleranced "
             'value, e.g. [tolerance."coil.inductance"] band = "10 %")')
    workers = workers or min(os.cpu_count() or 1, 8)
    executor = open_executor(scheduler)
    try:
        tr = _with_progress("samples", samples,
                            lambda progress: run_tolerance(c, samples, seed, workers=workers, progress=progress,
                                                           engine=engine, recheck=recheck, executor=executor))
    except CaseError as err:
        _die(located(err, c.source))
    except SolverError as err:
        _die(f"{c.source}: --engine: {err}")
    payload = to_json(tr.to_dict())
    if out_dir is not None:
        files = {"tolerance.json": payload, "samples.csv": samples_csv(tr)}
        if not no_plot:
            from kickback.outputs.tolerances import tolerance_figure

            files |= _figure_files("tolerance", tolerance_figure(tr))
        _write_files(out, files, ("tolerance.json", "samples.csv") + _pictures("tolerance"))
    click.echo(payload if as_json else tolerance_table(tr), nl=False)
    sys.exit(0 if tr.passed.all() else 1)


def _figure_files(stem: str, fig) -> dict:
    """``stem.png`` and ``stem.svg`` of a matplotlib figure, as bytes."""
    from kickback.outputs.plots import figure_bytes

    return {f"{stem}.{fmt}": figure_bytes(fig, fmt) for fmt in ("png", "svg")}


def _pictures(*stems: str) -> tuple[str, ...]:
    return tuple(f"{stem}.{fmt}" for stem in stems for fmt in ("png", "svg"))


def _write_files(out: Path, files: dict, family: tuple[str, ...] = ()) -> None:
    """Write the run's files into ``out`` as one set (all or none; see outputs.files.write_set)."""
    from kickback.outputs.files import write_set

    paths = write_set(out, files, family)
    click.echo(f"wrote {', '.join(str(p) for p in paths)}", err=True)


# ---- measured traces: `run --measured` and `fit` -------------------------------------------------


def _read_measured(path: str):
    """The --measured trace of `run` (units from its header), or exit 2 with a one-line message."""
    from kickback.errors import KickbackError
    from kickback.traceio import TraceError, read_trace

    try:
        return read_trace(path)
    except TraceError as err:
        _die(f"{err.source}: --measured: {err.message}")
    except KickbackError as err:
        _die(f"{path}: --measured: {err}")


def _measured_outputs(result, trace, plot: bool) -> tuple[dict, str]:
    """The comparison text and, when plotting, measured.png/svg (in memory, written with the rest)."""
    from kickback.outputs.fitreport import comparison_text
    from kickback.studies.measured import compare_measured

    cmp = compare_measured(result, trace)
    files = {}
    if plot:
        from kickback.outputs.fitplots import measured_figure
        from kickback.outputs.plots import figure_bytes

        fig = measured_figure(result, trace, cmp)
        files = {f"measured.{fmt}": figure_bytes(fig, fmt) for fmt in ("png", "svg")}
    return files, "\n" + comparison_text(cmp)


def _quantity_option(source: str, option: str, value, unit: str) -> float | None:
    from kickback.units import UnitError, parse_quantity

    if value is None:
        return None
    try:
        float(value)
    except ValueError:
        pass
    else:  # a bare number on a command line: the hint is the command line's, not the case file's
        typed = {"Ω": "ohm"}.get(unit, unit)
        _die(f"{source}: {option}: no unit in {value!r} (give a unit: {option} {value.strip()}{typed})")
    try:
        return parse_quantity(value, unit)
    except UnitError as err:
        _die(f"{source}: {option}: {err.message}")


def _unit_option(source: str, option: str, value, bases) -> str | None:
    from kickback.traceio import unit_scale
    from kickback.units import UnitError

    if value is not None:
        try:
            unit_scale(value, bases)
        except UnitError as err:
            _die(f"{source}: {option}: {err.message}")
    return value


@main.command()
@click.argument("trace", metavar="TRACE.csv")
@click.option("--kind", type=click.Choice(("rise", "decay")), required=True,
              help="rise: current at switch-on (fits L, R); decay: at switch-off (fits L, R and the clamp voltage).")
@click.option("--supply", metavar="V", help="Voltage across the coil and its resistance while on, e.g. '24 V' "
                                             "(needed to tell L and R apart).")
@click.option("--shunt", metavar="R", help="The value column is the voltage across this shunt, e.g. '0.1 ohm'.")
@click.option("--time-col", metavar="NAME|N", help="Time column by header name or number (default: the one "
                                                    "with a time unit, or named t/time).")
@click.option("--value-col", metavar="NAME|N", help="Current (or shunt-voltage) column by name or number.")
@click.option("--time-unit", metavar="UNIT", help="Unit of the time column, e.g. 'ms' (overrides the header).")
@click.option("--value-unit", metavar="UNIT",
              help="Unit of the value column, e.g. 'mA' or 'mV' (overrides the header).")
@click.option("--trigger", metavar="T", help="Time in the trace of the switching instant, e.g. '1.2 ms'; "
                                             "it becomes t = 0.")
@click.option("--clamp-resistance", metavar="R", help="With --kind decay: the clamp's series resistance "
              "(Zener/TVS dynamic plus diode series resistance), e.g. '1.5 ohm'; a current trace cannot tell it "
              "from L (default 0, which reads L low).")
@click.option("--saturating", is_flag=True, help="With --kind rise: fit a saturating coil, "
                                                 "λ(i) = L0·i/(1 + |i|/I_sat).")
@click.option("--json", "as_json", is_flag=True, help="Print the fit as JSON only.")
@click.option("--out", "out_dir", metavar="DIR", help="Write fit.json and the residual plot fit.png/svg into DIR.")
@click.option("--no-plot", is_flag=True, help="With --out: skip the plot.")
def fit(trace: str, kind: str, supply, shunt, time_col, value_col, time_unit, value_unit, trigger,
        clamp_resistance, saturating: bool, as_json: bool, out_dir, no_plot: bool) -> None:
    """Fit a coil's inductance and resistance to a measured current trace (generic CSV).

    Prints each value with its 95 % interval, the residual, and a [coil] block to paste into
    a case. Exit status: 0 fitted, 2 bad input or a trace that cannot be fitted.
    """
    from kickback.errors import KickbackError
    from kickback.outputs.fitreport import fit_table
    from kickback.outputs.jsonout import to_json
    from kickback.studies.fit import fit_trace
    from kickback.traceio import read_trace

    set_source(trace)
    out = _out(out_dir)
    if saturating and kind != "rise":
        _die(f"{trace}: --saturating: fits a rise only (expected --kind rise)")
    v = _quantity_option(trace, "--supply", supply, "V")
    if v is None:
        _die(f"{trace}: --supply: needed to tell L and R apart (expected the voltage across the coil "
             "while on, e.g. '24 V')")
    if not v > 0:
        _die(f"{trace}: --supply: must be positive (expected e.g. '24 V')")
    r_shunt = _quantity_option(trace, "--shunt", shunt, "Ω")
    if r_shunt is not None and not r_shunt > 0:
        _die(f"{trace}: --shunt: must be positive (expected e.g. '0.1 ohm')")
    t0 = _quantity_option(trace, "--trigger", trigger, "s") or 0.0
    r_clamp = _quantity_option(trace, "--clamp-resistance", clamp_resistance, "Ω")
    if r_clamp is not None and (kind != "decay" or not r_clamp >= 0):
        _die(f"{trace}: --clamp-resistance: " + ("applies to --kind decay" if kind != "decay" else
                                                  "must be >= 0 (expected e.g. '1.5 ohm')"))
    _unit_option(trace, "--time-unit", time_unit, ("s",))
    _unit_option(trace, "--value-unit", value_unit, ("A", "V"))
    try:
        tr = read_trace(trace, time_col=time_col, value_col=value_col, time_unit=time_unit,
                        value_unit=value_unit, trigger=t0, shunt=r_shunt, want="current")
        result = fit_trace(tr, kind=kind, supply=v, saturating=saturating, shunt=r_shunt,
                           clamp_resistance=r_clamp)
    except KickbackError as err:
        _die(located(err, trace))
    payload = to_json(result.to_dict())
    if out_dir is not None:
        files = {"fit.json": payload}
        if not no_plot:
            from kickback.outputs.fitplots import fit_figure
            from kickback.outputs.plots import figure_bytes

            fig = fit_figure(result)
            files |= {f"fit.{fmt}": figure_bytes(fig, fmt) for fmt in ("png", "svg")}
        _write_files(out, files, ("fit.json",) + _pictures("fit"))
    click.echo(f"trace: {tr.source}, time {tr.time_column!r}, current {tr.value_column!r}", err=True)
    for line in result.notes:
        note(f"note: {line}")
    click.echo(payload if as_json else fit_table(result), nl=False)


# ---- end of measured traces -----------------------------------------------------------------------


@main.command()
@click.argument("kind", type=click.Choice(TEMPLATES))
def new(kind: str) -> None:
    """Print a commented starter case for a relay, a solenoid valve or a small DC motor."""
    from importlib.resources import files

    click.echo(files("kickback").joinpath("templates", f"{kind}.toml").read_text(encoding="utf-8"), nl=False)


def _register() -> None:
    from kickback.cli_check import check

    main.add_command(check)


_register()


if __name__ == "__main__":  # pragma: no cover
    main()
