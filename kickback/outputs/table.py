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


#: what the element columns of the clamps table mean (the stand-off of a freewheel diode is the
#: supply it blocks while the switch is on, more than the voltage across it in the transient)
ELEMENT_NOTES = (
    "¹ peak voltage: the largest voltage across the element after turn-off, either polarity (while",
    "  conducting: its forward or breakdown voltage with the current's drop)",
    "² stand-off: the largest reverse voltage it blocks while its chain does not conduct, the on-state",
    "  before turn-off included; a freewheel diode blocks the supply while the switch is on, so its",
    "  stand-off can exceed its peak voltage in the transient. Its rating check is the reverse voltage.",
)
#: how a check's margin is formed
MARGIN_NOTE = ("margin: (limit − value)/limit, the limit derated; a junction temperature's margin is the share of "
               "the allowed rise above ambient left, (T_max − T_j)/(T_max − T_ambient) ‡")


def percent_text(x: float | None) -> str:
    return "—" if x is None else f"{100 * x:+.1f} %"


def grid_lines(rows: list[list[str]], indent: str = "  ") -> list[str]:
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
        mark = " ‡" if ck.unit == "K" else ""
        rows.append([ck.part, ck.quantity, check_value(ck.value, ck.unit), check_value(ck.limit, ck.unit),
                     percent_text(ck.margin) + mark, "pass" if ck.passed else "FAIL"])
    return rows


def result_table(result) -> str:
    """Plain-text report of a result: on-state, peak, decay, energy ledger, clamps, checks."""
    f = result.figures
    c = result.waveforms.circuit
    lines = [f"{result.case.title}", ""]
    lines += grid_lines([
        ["on-state", "coil current", q(f.initial_current_A, "A"), "switch node", q(c.on.node_voltage, "V")],
        ["", "stored in coil", q(f.stored_energy_J, "J"), "supply", q(c.Vs, "V")],
        ["switch node", "peak", q(f.peak_voltage_V, "V"), "at", q(f.peak_time_s, "s")],
        ["decay", "to 10 %", q(f.to_10_percent_s, "s"), "to 1 %", q(f.to_1_percent_s, "s")],
        ["", "to zero", q(f.to_zero_s, "s"), "release", q(f.release_s, "s")],
    ])
    lines += ["", "energy ledger"]
    from kickback.ledger import ledger_input, ledger_terms

    terms = ledger_terms(f, result.case)
    total = ledger_input(terms)
    ledger = [["", "energy", "share"]]
    for term in terms:
        label = term.label if term.side == "left" else f"{term.side}: {term.label}"
        pct = "" if term.side == "in" else f"{100 * term.energy_J / total:.1f} %"
        ledger.append([label, q(term.energy_J, "J"), pct])
    ledger.append(["balance residual", f"{f.energy_balance_error:.1e}", ""])
    lines += grid_lines(ledger)
    if f.clamps:
        lines += ["", "clamps"]
        rows = [["name", "across", "energy", "peak current", "conduction time", "current while on"]]
        for cl in f.clamps:
            rows.append([cl.name, cl.across, q(cl.energy_J, "J"), q(cl.peak_current_A, "A"), q(cl.conduction_s, "s"),
                         q(cl.on_state_current_A, "A")])
        lines += grid_lines(rows)
        lines += ["", "clamp elements"]
        rows = [["clamp", "element", "type", "energy", "peak current", "peak voltage ¹", "stand-off ²"]]
        for cl in f.clamps:
            for el in cl.elements:
                rows.append([cl.name, el.name, el.type, q(el.energy_J, "J"), q(el.peak_current_A, "A"),
                             q(el.peak_voltage_V, "V"), q(el.standoff_voltage_V, "V")])
        lines += grid_lines(rows)
        lines += [f"  {x}" for x in ELEMENT_NOTES]
    else:
        lines += ["", "clamps: none"]
    if result.pwm:
        lines += ["", pwm_section(result)]
    lines += ["", "checks"]
    if result.checks:
        lines += grid_lines(check_rows(result.checks))
        if any(ck.unit == "K" for ck in result.checks):
            lines += ["  " + wrap_text(MARGIN_NOTE, 98).replace("\n", "\n  ")]
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
    lines += ["", wrap_text(CAUTIONS)]
    return "\n".join(lines) + "\n"


def wrap_text(text: str, width: int = 100) -> str:
    import textwrap

    return "\n".join(textwrap.wrap(text, width))


def _tj(x):
    return "—" if x is None else f"{x - 273.15:.1f} °C"


def pwm_section(result) -> str:
    """The repetitive-switching figures, one row per duty."""
    d = result.case.drive
    lines = [f"repetitive switching at {q(d.frequency, 'Hz')} (periodic steady state by shooting)"]
    rows = [["duty", "ripple", "mean I", "RMS I", "conduction ³", "C discharge ⁴", "crossover", "clamp",
             "avalanche/cycle", "switch Tj peak"]]
    for p in result.pwm:
        clamp_w = sum(e["power_W"] for e in p.elements)
        rows.append([f"{p.duty:g}", q(p.ripple_A, "A"), q(p.mean_current_A, "A"), q(p.rms_current_A, "A"),
                     q(p.conduction_loss_W, "W"), q(p.turn_on_discharge_loss_W, "W"), q(p.crossover_loss_W, "W"),
                     q(clamp_w, "W"),
                     q(p.avalanche_energy_J, "J"), _tj(p.switch_junction_peak_K)])
    lines += grid_lines(rows)
    lines += ["  ³ the switch's on-state loss (I²·R_on, V_sat·I) while it conducts",
              "  ⁴ the node capacitance (output and winding capacitance, lone capacitors across the switch or coil)",
              "    discharged through the switch at each turn-on: ½·C·ΔV²·f, ΔV the node's fall from the periodic",
              "    state at turn-on to the on-state; part of the switch's loss, shown apart from conduction"]
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
        lines.append("  the turn-off figures above start from the periodic steady state at the turn-off instant "
                     "with the highest current (final turn-off): current, capacitor voltages, motor speed, "
                     "junction temperatures")
    return "\n".join(lines)
