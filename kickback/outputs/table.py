"""The readable text table of one result (stdout of ``kickback run``)."""

from __future__ import annotations

import math

from kickback.units import format_quantity as q

CAUTIONS = (
    "Cautions: switch-node voltages can be many times the supply voltage. These figures are an "
    "engineering estimate from device models; confirm them on hardware with suitable probes "
    "(differential or high-voltage, rated for the node). Mains-connected and safety-related "
    "equipment follows local codes and licensed practice."
)


def _pct(x: float | None) -> str:
    return "—" if x is None else f"{100 * x:+.1f} %"


def _grid(rows: list[list[str]], indent: str = "  ") -> list[str]:
    widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]))]
    out = []
    for r in rows:
        cells = [r[0].ljust(widths[0])] + [c.rjust(w) for c, w in zip(r[1:], widths[1:], strict=True)]
        out.append(indent + "  ".join(cells).rstrip())
    return out


def check_value(x: float | None, unit: str) -> str:
    """A check value in engineering notation; temperatures in °C."""
    if unit == "K" and x is not None:
        return f"{x - 273.15:.1f} °C"
    return q(x, unit)


def check_rows(checks) -> list[list[str]]:
    rows = [["part", "quantity", "value", "limit", "margin", "verdict"]]
    for ck in checks:
        rows.append([ck.part, ck.quantity, check_value(ck.value, ck.unit), check_value(ck.limit, ck.unit),
                     _pct(ck.margin), "pass" if ck.passed else "FAIL"])
    return rows


def result_table(result) -> str:
    """Plain-text report of a result: on-state, peak, decay, energy ledger, clamps, checks."""
    f = result.figures
    c = result.waveforms.circuit
    lines = [f"{result.case.title}", ""]
    lines += _grid([
        ["on-state", "coil current", q(f.initial_current_A, "A"), "switch node", q(c.on.node_voltage, "V")],
        ["", "stored in coil", q(f.stored_energy_J, "J"), "supply", q(c.Vs, "V")],
        ["switch node", "peak", q(f.peak_voltage_V, "V"), "at", q(f.peak_time_s, "s")],
        ["decay", "to 10 %", q(f.to_10_percent_s, "s"), "to 1 %", q(f.to_1_percent_s, "s")],
        ["", "to zero", q(f.to_zero_s, "s"), "release", q(f.release_s, "s")],
    ])
    lines += ["", "energy ledger"]
    total = f.stored_energy_J + f.initial_capacitor_energy_J + max(f.supply_energy_J, 0.0)

    def row(label, x):
        return [label, q(x, "J"), f"{100 * x / total:.1f} %"]

    ledger = [["", "energy", "share"],
              ["in: stored in coil", q(f.stored_energy_J, "J"), ""],
              ["in: stored in capacitors", q(f.initial_capacitor_energy_J, "J"), ""],
              ["in: from supply", q(f.supply_energy_J, "J"), ""],
              row("out: coil resistance", f.resistance_energy_J),
              row("out: switch turn-off crossover", f.crossover_energy_J),
              row("out: switch avalanche", f.avalanche_energy_J)]
    if f.body_diode_energy_J:
        ledger.append(row("out: switch body diode", f.body_diode_energy_J))
    if result.case.motor is not None:
        ledger.append(row("out: to the motor (back-EMF)", f.motor_energy_J))
    for cl in f.clamps:
        ledger += [row(f"out: {cl.name} / {el.name}", el.energy_J) for el in cl.elements if el.type != "capacitor"]
    ledger.append(row("left in capacitors", f.left_in_capacitors_J))
    if f.left_in_coil_J > 1e-6 * total:
        ledger.append(row("left in coil", f.left_in_coil_J))
    ledger.append(["balance residual", f"{f.energy_balance_error:.1e}", ""])
    lines += _grid(ledger)
    if f.clamps:
        lines += ["", "clamps"]
        rows = [["name", "across", "energy", "peak current", "conduction", "on-state current"]]
        for cl in f.clamps:
            rows.append([cl.name, cl.across, q(cl.energy_J, "J"), q(cl.peak_current_A, "A"), q(cl.conduction_s, "s"),
                         q(cl.on_state_current_A, "A")])
            for el in cl.elements:
                rows.append([f"  {el.name}", el.type, q(el.energy_J, "J"), q(el.peak_current_A, "A"),
                             f"peak {q(el.peak_voltage_V, 'V')}", f"stand-off {q(el.standoff_voltage_V, 'V')}"])
        lines += _grid(rows)
    else:
        lines += ["", "clamps: none"]
    if result.pwm:
        lines += ["", pwm_section(result)]
    lines += ["", "checks"]
    if result.checks:
        lines += _grid(check_rows(result.checks))
    else:
        lines.append("  no ratings given: nothing to check")
    n_fail = sum(not ck.passed for ck in result.checks)
    if result.passed is None:
        verdict = "none — the result failed its audit:"
    else:
        verdict = "PASS" if result.passed else f"FAIL ({n_fail} of {len(result.checks)} checks fail)"
    lines += ["", f"verdict: {verdict}"]
    lines += [f"  - {x}" for x in result.audit.findings]
    if f.findings:
        lines += ["", "findings"] + [f"  - {x}" for x in f.findings]
    lines += ["", "models"] + [f"  - {x}" for x in f.models]
    lines += ["", _wrap(CAUTIONS)]
    return "\n".join(lines) + "\n"


def _wrap(text: str, width: int = 100) -> str:
    import textwrap

    return "\n".join(textwrap.wrap(text, width))


def _tj(x):
    return "—" if x is None else f"{x - 273.15:.1f} °C"


def pwm_section(result) -> str:
    """The repetitive-switching figures, one row per duty."""
    d = result.case.drive
    lines = [f"repetitive switching at {q(d.frequency, 'Hz')} (periodic steady state by shooting)"]
    rows = [["duty", "ripple", "mean I", "RMS I", "conduction", "crossover", "clamp", "avalanche/cycle",
             "switch Tj peak"]]
    for p in result.pwm:
        clamp_w = sum(e["power_W"] for e in p.elements)
        rows.append([f"{p.duty:g}", q(p.ripple_A, "A"), q(p.mean_current_A, "A"), q(p.rms_current_A, "A"),
                     q(p.conduction_loss_W, "W"), q(p.crossover_loss_W, "W"), q(clamp_w, "W"),
                     q(p.avalanche_energy_J, "J"), _tj(p.switch_junction_peak_K)])
    lines += _grid(rows)
    for p in result.pwm:
        brute = "—" if p.brute_force_cycles is None else f"{p.brute_force_cycles}"
        lines.append(f"  duty {p.duty:g}: {p.cycle_solves} cycle solves; plain repetition from zero would need "
                     f"{brute} cycles (contraction {p.contraction:.4f} per cycle); residual {p.residual:.1e}")
        if p.mean_speed_rad_s is not None:
            rpm = p.mean_speed_rad_s * 30 / math.pi
            lines.append(f"    motor: mean speed {p.mean_speed_rad_s:.4g} rad/s ({rpm:.4g} rpm), "
                         f"mean torque {p.mean_torque_Nm:.4g} N·m")
        for e in p.elements:
            tj = "" if e["junction_peak_K"] is None else f", Tj peak {_tj(e['junction_peak_K'])}"
            lines.append(f"    {e['clamp']} / {e['element']}: mean {q(e['mean_A'], 'A')}, RMS {q(e['rms_A'], 'A')}, "
                         f"{q(e['energy_J'], 'J')} per cycle = {q(e['power_W'], 'W')}{tj}")
    if result.case.drive.final_turn_off:
        lines.append("  the turn-off figures above start from the highest steady-state current (final turn-off)")
    return "\n".join(lines)
