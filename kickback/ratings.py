"""Checks of the figures against the parts' ratings, with derating, and the verdict."""

from __future__ import annotations

from dataclasses import dataclass

from kickback.case import Case
from kickback.figures import Figures, conducts_while_on
from kickback.models.factory import chain_leakage


@dataclass(frozen=True)
class Check:
    """One rating check.

    Attributes
    ----------
    part : str — which part ("switch", "clamp 'D1' diode 1", "case")
    quantity : str — what is checked, with its unit in words
    value : float or None — the figure [SI]; None when it does not occur
    limit : float or None — the allowed value after derating [SI]; None: no rating (fails)
    margin : float or None — (limit − value)/limit; negative when failing
    passed : bool
    unit : str — SI unit symbol of value and limit
    note : str — how the limit was formed
    """

    part: str
    quantity: str
    value: float | None
    limit: float | None
    margin: float | None
    passed: bool
    unit: str
    note: str = ""

    def to_dict(self) -> dict:
        return {"part": self.part, "quantity": self.quantity, "value": self.value, "limit": self.limit,
                "margin": self.margin, "pass": self.passed, "unit": self.unit}


def _check(part, quantity, value, rating, fraction, unit, note="") -> Check:
    limit = rating * fraction
    margin = (limit - value) / limit if limit > 0 else None
    return Check(part, quantity, float(value), float(limit), margin, bool(value <= limit), unit, note)


def _at_least(part, quantity, value, minimum, unit, note) -> Check:
    """A check that passes when ``value ≥ minimum``; margin (value − minimum)/minimum."""
    margin = (value - minimum) / minimum if minimum > 0 else None
    return Check(part, quantity, float(value), float(minimum), margin, bool(value >= minimum), unit, note)


def drive_checks(case: Case, fig: Figures) -> list[Check]:
    """On-state drive: BJT base current against overdrive × I_C/β; MOSFET gate voltage against the
    gate voltage its on-resistance is specified at."""
    s = case.switch
    out = []
    if s.type == "bjt" and s.gain is not None and s.drive_voltage is not None and s.base_resistance is not None:
        i_b = (s.drive_voltage - s.base_emitter_voltage) / s.base_resistance
        need = s.overdrive * fig.initial_current_A / s.gain
        out.append(_at_least("switch", "base current", i_b, need, "A",
                             f"needs {s.overdrive:g} × I_C/β (overdrive: common practice 1.5–2, no source)"))
    if s.type == "mosfet" and s.gate_voltage is not None and s.on_resistance_gate_voltage is not None:
        out.append(_at_least("switch", "gate voltage", s.gate_voltage, s.on_resistance_gate_voltage, "V",
                             "at least the gate voltage the on-resistance is specified at"))
    return out


def on_state_check(name: str, on_current: float, initial_current: float, leakage: float = 0.0) -> Check | None:
    """A clamp that conducts while the switch is on fails (None when it does not conduct).

    A clamp is meant to take the coil's current only after turn-off; one that conducts in the DC
    on-state (a lone Zener across the coil conducts forward) loads the supply and the switch and
    heats itself for as long as the switch is on. The row appears only when the clamp's on-state
    current exceeds ``ON_STATE_FRACTION`` × the initial coil current (the level at which the
    figures report it), and then it fails; its limit is 0 A and it has no margin.

    Parameters
    ----------
    name : str
        The clamp's name.
    on_current : float
        The clamp's current in the DC on-state [A] (either sign).
    initial_current : float
        The coil's on-state current [A].
    leakage : float
        The chain's reverse leakage bound [A] (:func:`kickback.models.factory.chain_leakage`): a
        reverse-biased diode's saturation current is leakage, not conduction.
    """
    value = abs(on_current)
    if not conducts_while_on(on_current, initial_current, leakage):
        return None
    return Check(name, "current while the switch is on", float(value), 0.0, None, False, "A",
                 "a clamp must not conduct while the switch is on")


#: how the working-voltage check of a lone TVS is formed
WORKING_NOTE = ("the supply against the stand-off voltage V_WM, not derated (V_WM is already the datasheet's "
                "largest voltage with no conduction): a lone TVS holds the supply whenever it must not conduct")


def _junction_check(part: str, value: float, limit: float, ambient: float) -> Check:
    """Junction temperature; the margin is the share of the allowed rise above ambient left."""
    span = limit - ambient
    margin = (limit - value) / span if span > 0 else None
    return Check(part, "junction temperature", float(value), float(limit), margin, bool(value <= limit), "K",
                 f"Foster network from {ambient - 273.15:.1f} °C ambient; margin of the allowed rise")


def _peak_power_check(part: str, el, ef, fraction: float) -> Check:
    """Peak pulse power against its rating; a rating at another pulse width is moved to this
    pulse's equivalent rectangular width by P ∝ t^(−1/2) (Wunsch and Bell 1968, an approximation)."""
    rating, note = el.rated_peak_power, f"rating × {fraction:g}"
    if el.rated_pulse_width is not None and ef.pulse_width_s:
        from kickback.models.thermal import wunsch_bell_rating

        rating = wunsch_bell_rating(el.rated_peak_power, el.rated_pulse_width, ef.pulse_width_s)
        note = (f"rated {el.rated_peak_power:.4g} W at {el.rated_pulse_width:.3g} s, moved to the "
                f"{ef.pulse_width_s:.3g} s equivalent pulse by P ∝ t^-1/2 (Wunsch–Bell, approximate) × {fraction:g}")
    return _check(part, "peak power", ef.peak_power_W, rating, fraction, "W", note)


#: avalanche energy below this fraction of the stored energy counts as none (rounding)
AVALANCHE_NEGLIGIBLE = 1e-9


def avalanche_check_applies(breakdown_voltage, rated_avalanche_energy) -> bool:
    """Whether a case has the switch's avalanche-energy check: by its ratings, not by the figure.

    The row exists when the switch can break down (``breakdown_voltage`` given) or has an
    avalanche rating, whatever energy a run books: a check the case calls for is never dropped
    because its value came out zero or negative. Scalars or arrays (NaN: not given).
    """
    import numpy as np

    bv = np.asarray(np.nan if breakdown_voltage is None else breakdown_voltage, float)
    ra = np.asarray(np.nan if rated_avalanche_energy is None else rated_avalanche_energy, float)
    out = np.isfinite(bv) | np.isfinite(ra)
    return bool(out) if out.ndim == 0 else out


def rating_checks(case: Case, fig: Figures) -> list[Check]:
    """Every applicable check, one row each.

    Voltage and current ratings are multiplied by ``checks.derating``, energy and power
    ratings by ``checks.energy_derating`` (default: the same fraction). Derating to 80 % is
    common practice, no source.
    """
    ck = case.checks
    dv, de = ck.derating, ck.energy_fraction
    vnote = f"rating × {dv:g}"
    enote = f"rating × {de:g}"
    out: list[Check] = []
    s = case.switch
    if s.rated_voltage is not None:
        out.append(_check("switch", "peak voltage", fig.peak_voltage_V, s.rated_voltage, dv, "V", vnote))
    if avalanche_check_applies(s.breakdown_voltage, s.rated_avalanche_energy):
        if s.rated_avalanche_energy is None:
            avalanches = bool(fig.avalanche_energy_J > AVALANCHE_NEGLIGIBLE * fig.stored_energy_J)
            out.append(Check("switch", "avalanche energy", fig.avalanche_energy_J, None, None, not avalanches, "J",
                             "the switch avalanches but has no avalanche rating" if avalanches else
                             "not avalanche-rated: it must not avalanche"))
        else:
            out.append(_check("switch", "avalanche energy", fig.avalanche_energy_J,
                              s.rated_avalanche_energy, de, "J", enote))
    for cl, cf in zip(case.clamps, fig.clamps, strict=True):
        for el, ef in zip(cl.elements, cf.elements, strict=True):
            part = f"{cl.name}: {ef.name}"
            if el.type == "diode":
                if el.rated_reverse_voltage is not None:
                    out.append(_check(part, "reverse voltage", ef.standoff_voltage_V,
                                      el.rated_reverse_voltage, dv, "V", vnote))
                if el.rated_surge_current is not None:
                    out.append(_check(part, "peak current", ef.peak_current_A, el.rated_surge_current, dv,
                                      "A", vnote))
            elif el.type in ("zener", "tvs"):
                if el.rated_pulse_energy is not None:
                    out.append(_check(part, "pulse energy", ef.energy_J, el.rated_pulse_energy, de, "J", enote))
                if el.rated_peak_power is not None:
                    out.append(_peak_power_check(part, el, ef, de))
                if el.type == "tvs" and el.standoff_voltage is not None and len(cl.elements) == 1:
                    out.append(_check(part, "working voltage", case.supply.voltage, el.standoff_voltage, 1.0, "V",
                                      WORKING_NOTE))
            elif el.type in ("resistor", "varistor"):
                if el.rated_energy is not None:
                    out.append(_check(part, "pulse energy", ef.energy_J, el.rated_energy, de, "J", enote))
            elif el.type == "capacitor" and el.rated_voltage is not None:
                out.append(_check(part, "peak voltage", ef.peak_voltage_V, el.rated_voltage, dv, "V", vnote))
            if ef.junction_peak_K is not None and el.max_junction_temperature is not None:
                out.append(_junction_check(part, ef.junction_peak_K, el.max_junction_temperature,
                                           case.checks.ambient_temperature))
        if ck.max_clamp_energy is not None:
            out.append(_check(cl.name, "clamp energy", cf.energy_J, ck.max_clamp_energy, 1.0, "J", "case limit"))
        on_row = on_state_check(cl.name, cf.on_state_current_A, fig.initial_current_A,
                                chain_leakage(cl.elements))
        if on_row is not None:
            out.append(on_row)
    if fig.switch_junction_peak_K is not None and s.max_junction_temperature is not None:
        out.append(_junction_check("switch", fig.switch_junction_peak_K, s.max_junction_temperature,
                                   ck.ambient_temperature))
    out += drive_checks(case, fig)
    if ck.max_peak_voltage is not None:
        out.append(_check("case", "peak switch voltage", fig.peak_voltage_V, ck.max_peak_voltage, 1.0, "V",
                          "case limit"))
    if ck.max_release_time is not None:
        if fig.release_s is None:
            out.append(Check("case", "release time", None, ck.max_release_time, None, False, "s",
                             "no release time (no release_current, or the current never fell below it)"))
        else:
            out.append(_check("case", "release time", fig.release_s, ck.max_release_time, 1.0, "s", "case limit"))
    if ck.max_decay_time is not None:
        if fig.to_zero_s is None:
            out.append(Check("case", "decay to zero", None, ck.max_decay_time, None, False, "s",
                             "the current did not reach zero in the run"))
        else:
            out.append(_check("case", "decay to zero", fig.to_zero_s, ck.max_decay_time, 1.0, "s", "case limit"))
    return out


def pwm_checks(case: Case, pf) -> list[Check]:
    """Checks of one duty's steady state: junction temperatures (periodic peak), diode average
    current, repetitive avalanche energy per cycle."""
    ck, s = case.checks, case.switch
    tag = f" (duty {pf.duty:g})"
    out: list[Check] = []
    if pf.switch_junction_peak_K is not None and s.max_junction_temperature is not None:
        out.append(_junction_check("switch" + tag, pf.switch_junction_peak_K, s.max_junction_temperature,
                                   ck.ambient_temperature))
    if pf.avalanche_energy_J > 1e-12:
        if s.rated_repetitive_avalanche_energy is None:
            out.append(Check("switch" + tag, "repetitive avalanche energy", pf.avalanche_energy_J, None, None,
                             False, "J", "the switch avalanches every cycle but has no repetitive rating"))
        else:
            out.append(_check("switch" + tag, "repetitive avalanche energy", pf.avalanche_energy_J,
                              s.rated_repetitive_avalanche_energy, ck.energy_fraction, "J", "per cycle"))
    flat = [(cl, el) for cl in case.clamps for el in cl.elements]
    for (cl, el), ef in zip(flat, pf.elements, strict=True):
        part = f"{cl.name}: {ef['element']}{tag}"
        if el.type == "diode" and el.rated_average_current is not None:
            out.append(_check(part, "average current", abs(ef["mean_A"]), el.rated_average_current,
                              ck.derating, "A", f"rating × {ck.derating:g}"))
        if ef["junction_peak_K"] is not None and el.max_junction_temperature is not None:
            out.append(_junction_check(part, ef["junction_peak_K"], el.max_junction_temperature,
                                       ck.ambient_temperature))
    return out


#: a switch given no breakdown_voltage whose node rises above this multiple of its voltage rating
#: gets a finding: a real MOSFET or transistor avalanches a little above its rated voltage (about
#: 1.1–1.3 × the rating — common practice, from memory), so the node could not go that high
NO_BREAKDOWN_RATED_RATIO = 1.5
#: the same without a voltage rating: this multiple of the supply voltage (common practice, no source)
NO_BREAKDOWN_SUPPLY_RATIO = 5.0


def no_breakdown_finding(case, peak_voltage: float) -> str | None:
    """A finding when a switch with no ``breakdown_voltage`` rings far above what a real part holds.

    Above :data:`NO_BREAKDOWN_RATED_RATIO` × ``rated_voltage`` (or, with no rating,
    :data:`NO_BREAKDOWN_SUPPLY_RATIO` × the supply) the peak is an artefact of a switch that never
    breaks down; the case should give the part's breakdown voltage. None below the threshold.
    """
    from kickback.units import format_quantity as q

    s = case.switch
    if s.breakdown_voltage is not None:
        return None
    if s.rated_voltage is not None:
        limit, basis = NO_BREAKDOWN_RATED_RATIO * s.rated_voltage, \
            f"{NO_BREAKDOWN_RATED_RATIO:g} × its {q(s.rated_voltage, 'V')} rating"
    else:
        limit, basis = NO_BREAKDOWN_SUPPLY_RATIO * case.supply.voltage, \
            f"{NO_BREAKDOWN_SUPPLY_RATIO:g} × the {q(case.supply.voltage, 'V')} supply"
    if not peak_voltage > limit:
        return None
    return (f"the switch node rings to {q(peak_voltage, 'V')}, above {basis}, because the case gives the switch no "
            "breakdown_voltage: a real part avalanches near its voltage rating and the node stops there; give "
            "switch.breakdown_voltage (and rated_avalanche_energy) to see the avalanche")


def with_switch_findings(case, figures):
    """``figures`` with :func:`no_breakdown_finding` added to its findings when it applies."""
    from dataclasses import replace

    note = no_breakdown_finding(case, figures.peak_voltage_V)
    return figures if note is None else replace(figures, findings=figures.findings + (note,))
