"""``kickback fit``: a coil's inductance and resistance from a measured current trace."""

from __future__ import annotations

import click

from kickback.cli_common import die, out_folder, write_study
from kickback.cliguard import located, note, set_source


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
        die(f"{source}: {option}: no unit in {value!r} (give a unit: {option} {value.strip()}{typed})")
    try:
        return parse_quantity(value, unit)
    except UnitError as err:
        die(f"{source}: {option}: {err.message}")


def _unit_option(source: str, option: str, value, bases) -> str | None:
    from kickback.traceio import unit_scale
    from kickback.units import UnitError

    if value is not None:
        try:
            unit_scale(value, bases)
        except UnitError as err:
            die(f"{source}: {option}: {err.message}")
    return value


@click.command()
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
    out = out_folder(out_dir)
    if saturating and kind != "rise":
        die(f"{trace}: --saturating: fits a rise only (expected --kind rise)")
    v = _quantity_option(trace, "--supply", supply, "V")
    if v is None:
        die(f"{trace}: --supply: needed to tell L and R apart (expected the voltage across the coil "
             "while on, e.g. '24 V')")
    if not v > 0:
        die(f"{trace}: --supply: must be positive (expected e.g. '24 V')")
    r_shunt = _quantity_option(trace, "--shunt", shunt, "Ω")
    if r_shunt is not None and not r_shunt > 0:
        die(f"{trace}: --shunt: must be positive (expected e.g. '0.1 ohm')")
    t0 = _quantity_option(trace, "--trigger", trigger, "s") or 0.0
    r_clamp = _quantity_option(trace, "--clamp-resistance", clamp_resistance, "Ω")
    if r_clamp is not None and (kind != "decay" or not r_clamp >= 0):
        die(f"{trace}: --clamp-resistance: " + ("applies to --kind decay" if kind != "decay" else
                                                  "must be >= 0 (expected e.g. '1.5 ohm')"))
    _unit_option(trace, "--time-unit", time_unit, ("s",))
    _unit_option(trace, "--value-unit", value_unit, ("A", "V"))
    try:
        tr = read_trace(trace, time_col=time_col, value_col=value_col, time_unit=time_unit,
                        value_unit=value_unit, trigger=t0, shunt=r_shunt, want="current")
        result = fit_trace(tr, kind=kind, supply=v, saturating=saturating, shunt=r_shunt,
                           clamp_resistance=r_clamp)
    except KickbackError as err:
        die(located(err, trace))
    payload = to_json(result.to_dict())
    if out_dir is not None:
        from kickback.outputs.fitplots import fit_figure

        write_study(out, {"fit.json": payload}, "fit", None if no_plot else lambda: fit_figure(result))
    click.echo(f"trace: {tr.source}, time {tr.time_column!r}, current {tr.value_column!r}", err=True)
    for line in result.notes:
        note(f"note: {line}")
    click.echo(payload if as_json else fit_table(result), nl=False)
