"""What every command of the command line shares: its constants, loading a case, checking an output
folder, exiting with one line, writing an output set. No physics here."""

from __future__ import annotations

import contextlib
import sys
from pathlib import Path

import click

from kickback.cliguard import located, note, set_source

TEMPLATES = ("relay", "valve", "motor")
ENGINES = ("auto", "batch", "detailed")
#: largest --seed: numpy's generators take any non-negative integer; 2**63 - 1 keeps it one machine word
SEED = click.IntRange(0, 2**63 - 1)
#: largest number of sweep points (all axes together) and of tolerance samples: memory stays below ~1 GiB
MAX_POINTS = 1_000_000
ENGINE_HELP = ("auto: the batch engine (exact piecewise-linear, all variants at once) unless the case has a "
               "feature it does not cover (thermal networks, saturating coil, [drive], motor), then the detailed "
               "engine; batch or detailed: that engine.")


def die(message: str) -> None:
    """Print one line on stderr and exit 2 (bad input, or work that cannot be done)."""
    note(message)
    sys.exit(2)


@contextlib.contextmanager
def study_errors(source: str):
    """A study's stated failures as the one-line exit 2: a case error located in its file, an
    engine's refusal named as the --engine choice's."""
    from kickback.errors import CaseError, SolverError

    try:
        yield
    except CaseError as err:
        die(located(err, source))
    except SolverError as err:
        die(f"{source}: --engine: {err}")


def fail(case, err) -> None:
    """Exit 2 with a located message (the case's file when the error names none)."""
    die(located(err, case.source))


def load_or_exit(path: str):
    """The case, or exit 2 with its one-line message; notes on plain numbers far from their key's
    usual range go to stderr."""
    from kickback.caseio import load_case
    from kickback.errors import CaseError

    set_source(path)
    try:
        case = load_case(Path(path))
    except CaseError as err:
        die(str(err))
    for line in getattr(case, "notes", ()):
        note(f"note: {line}")
    return case


def out_folder(out_dir: str | None, option: str = "--out") -> Path | None:
    """The output folder, checked before any work (exit 2 when it cannot be written)."""
    from kickback.errors import OutputError
    from kickback.outputs.files import check_writable

    if out_dir is None:
        return None
    try:
        return check_writable(out_dir, option, folder=True)
    except OutputError as err:
        die(str(err))



def audit_failed(case, result, payload: str | None) -> None:
    """Exit 2: the result failed its audit (kickback.audit), so it gets no PASS or FAIL. The
    findings go to stderr; with --json the result object (``"pass": null`` and its ``"audit"``)
    still goes to stdout."""
    if payload is not None:
        click.echo(payload, nl=False)
    click.echo(f"error: {case.source}: the result failed its audit, no verdict given "
               f"({result.waveforms.engine} engine): " + "; ".join(result.audit.findings), err=True)
    sys.exit(2)


def check_room_for_a_clamp(c) -> None:
    """Exit 2 when the derated switch voltage is not above the supply: no clamp can be chosen then."""
    from kickback.studies.designs import allowed_voltage
    from kickback.units import format_quantity

    v_allow, vs = allowed_voltage(c), c.supply.voltage
    if not v_allow > vs:
        key = "switch.rated_voltage" if c.switch.rated_voltage is not None else "switch.breakdown_voltage"
        die(f"{c.source}: {key}: × checks.derating = {format_quantity(v_allow, 'V')} is not above the supply "
             f"{format_quantity(vs, 'V')}, so no clamp can keep the switch within it (expected a derated rating "
             "above the supply voltage)")


def figure_files(stem: str, fig) -> dict:
    """``stem.png`` and ``stem.svg`` of a matplotlib figure, as bytes."""
    from kickback.outputs.plots import figure_bytes

    return {f"{stem}.{fmt}": figure_bytes(fig, fmt) for fmt in ("png", "svg")}


def pictures(*stems: str) -> tuple[str, ...]:
    return tuple(f"{stem}.{fmt}" for stem in stems for fmt in ("png", "svg"))


def write_files(out: Path, files: dict, family: tuple[str, ...] = ()) -> None:
    """Write the run's files into ``out`` as one set (all or none; see outputs.files.write_set)."""
    from kickback.outputs.files import write_set

    paths = write_set(out, files, family)
    click.echo(f"wrote {', '.join(str(p) for p in paths)}", err=True)


def write_study(out: Path, files: dict, stem: str, figure=None) -> None:
    """Write a study's data ``files`` (name → text) and, when ``figure`` is given (a callable that
    builds the matplotlib figure, called only then), ``stem.png``/``stem.svg``, as one set."""
    family = tuple(files) + pictures(stem)
    if figure is not None:
        files = files | figure_files(stem, figure())
    write_files(out, files, family)


def read_measured(path: str):
    """The --measured trace of `run` (units from its header), or exit 2 with a one-line message."""
    from kickback.errors import KickbackError
    from kickback.traceio import TraceError, read_trace

    try:
        return read_trace(path)
    except TraceError as err:
        die(f"{err.source}: --measured: {err.message}")
    except KickbackError as err:
        die(f"{path}: --measured: {err}")


def measured_outputs(result, trace, plot: bool) -> tuple[dict, str]:
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
