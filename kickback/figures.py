"""From :class:`~kickback.engine.Waveforms` to the reported figures (DESIGN.md §6)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kickback.conventions import (
    AVALANCHE_NEGLIGIBLE,
    CONDUCTION_FRACTION,
    LEAKAGE_MARGIN,
    ON_STATE_FRACTION,
    ZERO_FRACTION,
)
from kickback.engine.detailed import Waveforms
from kickback.ledger import balance_residual
from kickback.models.factory import chain_leakage
from kickback.standoff import blocked_voltage, chain_blocks, has_diode, interior_maxima, rest_node_voltage


def conducts_while_on(on_current: float, initial_current: float, leakage: float = 0.0) -> bool:
    """Whether a clamp conducts in the DC on-state (a failed check, a finding).

    Its on-state current must exceed ``ON_STATE_FRACTION`` × the coil's on-state current and,
    where a reverse-biased diode bounds the chain (:func:`kickback.models.factory.chain_leakage`),
    that diode's leakage: a diode's saturation current is not conduction.

    Parameters
    ----------
    on_current : float
        The clamp's current in the DC on-state [A] (either sign).
    initial_current : float
        The coil's on-state current [A].
    leakage : float
        The chain's reverse leakage bound [A] (0: none).
    """
    return abs(on_current) > max(ON_STATE_FRACTION * abs(initial_current), LEAKAGE_MARGIN * leakage)


@dataclass(frozen=True)
class ElementFigures:
    type: str
    name: str
    description: str
    energy_J: float
    peak_voltage_V: float
    peak_current_A: float
    standoff_voltage_V: float
    peak_power_W: float
    pulse_width_s: float | None  # equivalent rectangular pulse: energy / peak power
    junction_peak_K: float | None = None  # with a Foster network: ambient + peak rise


@dataclass(frozen=True)
class ClampFigures:
    name: str
    across: str
    energy_J: float
    peak_current_A: float
    conduction_s: float
    on_state_current_A: float
    elements: tuple[ElementFigures, ...]


@dataclass(frozen=True)
class Figures:
    """Every reported figure of one turn-off, SI units; a time that does not occur is None."""

    initial_current_A: float
    stored_energy_J: float
    initial_capacitor_energy_J: float
    resistance_energy_J: float
    to_10_percent_s: float | None
    to_1_percent_s: float | None
    to_zero_s: float | None
    release_s: float | None
    peak_voltage_V: float
    peak_time_s: float
    crossover_energy_J: float
    avalanche_energy_J: float
    body_diode_energy_J: float
    supply_energy_J: float
    clamps: tuple[ClampFigures, ...]
    left_in_capacitors_J: float
    left_in_coil_J: float
    energy_balance_error: float
    end_time_s: float
    bound_hit: bool
    findings: tuple[str, ...]
    models: tuple[str, ...]
    switch_junction_peak_K: float | None = None  # with a Foster network on the switch
    motor_energy_J: float = 0.0  # electrical energy converted by the back-EMF (∫ k·ω·i dt)


def first_crossing_below(t: np.ndarray, x: np.ndarray, level: float) -> float | None:
    """Last time [s] at which ``|x|`` falls below ``level`` and stays there.

    ``x`` is taken as linear between samples (it may change sign inside a step); None when it
    never falls below for good within the record.
    """
    x = np.asarray(x, dtype=float)
    above = np.nonzero(np.abs(x) >= level)[0]
    if above.size == 0:
        return None
    k = int(above[-1])
    if k == x.size - 1:
        return None
    x0, x1 = x[k], x[k + 1]
    edge = level if x0 >= level else -level  # the side it leaves from
    frac = (x0 - edge) / (x0 - x1) if x0 != x1 else 0.0
    return float(t[k] + (t[k + 1] - t[k]) * frac)


def _duration_above(t: np.ndarray, x: np.ndarray, level: float) -> float:
    """Total time [s] with ``|x| > level``, ``x`` linear between samples (sign changes included)."""
    x = np.asarray(x, dtype=float)
    x0, x1 = x[:-1], x[1:]
    d = x1 - x0
    dt = np.diff(t)

    def share_above(lim):  # fraction of each step with x > lim
        # s = (lim − x0)/d, formed only where |lim − x0| ≤ |d| (s within [−1, 1]): elsewhere the
        # crossing lies outside the step, and a subnormal d (a current decayed to ~1e-310 A)
        # would overflow the quotient; ±2 stands for "beyond the step" on the quotient's side
        num = lim - x0
        inside = (np.abs(num) <= np.abs(d)) & (d != 0)
        s = np.where(inside, num / np.where(inside, d, 1.0), 2.0 * np.sign(num) * np.sign(d))
        return np.where(d > 0, np.clip(1.0 - s, 0.0, 1.0),
                        np.where(d < 0, np.clip(s, 0.0, 1.0), (x0 > lim).astype(float)))

    share_below = 1.0 - share_above(-level)  # fraction with x < -level (ties have no length)
    return float(np.sum(dt * (share_above(level) + share_below)))


def refine_crossing(w: Waveforms, t_guess: float, signal, level: float) -> float:
    """A crossing time [s] of ``|signal(state)| = level`` located on the dense solution near
    ``t_guess`` (from the samples), to the solver's accuracy rather than the sample spacing."""
    from scipy.optimize import brentq

    k = int(np.searchsorted(w.t, t_guess))
    lo, hi = float(w.t[max(k - 1, 0)]), float(w.t[min(k, w.t.size - 1)])
    if not lo < hi:
        return t_guess

    def g(tt):
        return abs(float(signal(w.state(tt)))) - level

    try:
        if g(lo) * g(hi) < 0:
            return float(brentq(g, lo, hi, xtol=1e-15 * max(hi, 1e-300), rtol=1e-14))
    except ValueError:
        pass
    return t_guess


def junction_peak(t, p, r, tau, ambient: float) -> float | None:
    """Peak junction temperature [K] for the power waveform p(t) [W] through a Foster network
    (None without one): ambient plus the largest rise, exact for p linear between samples."""
    if r is None:
        return None
    from kickback.models.thermal import foster_peak

    return float(ambient + foster_peak(t, np.clip(p, 0.0, None), r, tau))


def _rest_element_voltages(w: Waveforms, k: int) -> list:
    """Element voltages [V] of chain ``k`` in the states before and after the transient where it
    does not conduct (:mod:`kickback.standoff`): the on-state (capacitors at their on-state
    voltages) and the rest state (capacitors keep their end charge, the node at Vs − R·i_end;
    a chain with a capacitor carries no DC current there). A list of 0–2 lists of voltages."""
    c = w.circuit
    ch = c.chains[k]
    th = CONDUCTION_FRACTION * c.i0
    diode = has_diode(ch.clamp.elements)
    n_el = len(ch.clamp.elements)
    y0 = c.initial_state()
    v_rest = float(rest_node_voltage(c.Vs, c.R, float(w.i_coil[-1]), th))
    out = []
    for v_node, y, at_rest in ((c.on.node_voltage, y0, False), (v_rest, w.y_end, True)):
        u = float(v_node - c.Vs * ch.reference)
        if not ch.active:  # a lone capacitor chain: each element at the chain voltage
            out.append([u] * n_el)
            continue
        vcap = float(y[c.icap[k]]) if k in c.icap else 0.0
        if at_rest:
            i = float(ch.current(u, vcap))
            blocks = ch.capacitance is not None or bool(chain_blocks(i, th, diode))
        else:
            i = float(c.on.chain_currents[k]) if k < len(c.on.chain_currents) else 0.0
            blocks = bool(chain_blocks(i, th, diode))
        if blocks:
            out.append([float(x) for x in ch.element_voltages(np.asarray(i), np.asarray(u), vcap)])
    return out


def chain_signals(w: Waveforms, k: int):
    """Current [A], chain voltage [V] and element voltages [V] of clamp chain ``k`` over time.

    A lone capacitor (merged into the node capacitance by the circuit) carries C·dv/dt.
    """
    c = w.circuit
    ch = c.chains[k]
    vchain = w.v - c.Vs * ch.reference
    if k in c.active_chains:
        ic = w.i_chains[c.active_chains.index(k)]
        vcap = w.y[c.icap[k]] if k in c.icap else 0.0
    else:
        dvdt = np.gradient(w.v, w.t) if w.t.size > 2 else np.zeros_like(w.v)
        ic = sum(el.capacitance for el in ch.clamp.elements) * dvdt
        vcap = vchain
    return np.asarray(ic, dtype=float), vchain, ch.element_voltages(ic, vchain, vcap)


def compute_figures(w: Waveforms) -> Figures:
    """Figures of one turn-off from its waveforms.

    Parameters
    ----------
    w : Waveforms

    Returns
    -------
    Figures
    """
    c = w.circuit
    case = c.case
    i0 = c.i0
    y0 = c.initial_state()
    e = w.y_end[c.ie:]
    stored = c.coil_energy(i0)
    cap0 = float(c.capacitor_energy(c.on.node_voltage, y0))
    v_end = float(w.v[-1])
    cap_end = float(c.capacitor_energy(v_end, w.y_end))
    coil_end = c.coil_energy(float(w.i_coil[-1]))
    e_r, e_sup, e_ch, e_av, e_bd = (float(x) for x in e[:5])
    e_el = [float(x) for x in e[5:5 + len(c.energy_slots)]]
    e_motor = float(e[-1]) if c.motor else 0.0  # electrical energy converted to mechanical
    out = e_r + e_ch + e_av + e_bd + sum(e_el) + cap_end + coil_end + e_motor
    balance = balance_residual(stored, cap0, e_sup, out)

    k_pk = int(np.argmax(w.v))
    peak_v = float(w.v[k_pk])
    peak_t = float(w.t[k_pk])

    clamps = []
    slot = {kj: m for m, kj in enumerate(c.energy_slots)}
    for k, ch in enumerate(c.chains):
        ic, vchain, ev = chain_signals(w, k)
        rest_states = _rest_element_voltages(w, k)
        blocking = chain_blocks(ic, CONDUCTION_FRACTION * i0, has_diode(ch.clamp.elements))
        if ch.pieces is not None:
            # a piecewise-linear chain blocks only strictly inside its zero-current band: at its
            # knee it is on a conducting piece, however little current it carries there
            vx = vchain - (w.y[c.icap[k]] if k in c.icap else 0.0)
            lo, hi = ch.band
            if lo == hi:  # no zero-current band (a resistor's law): the current alone decides
                lo, hi = -math.inf, math.inf
            if math.isfinite(lo):
                blocking = blocking & (vx > lo + 1e-9 * (abs(lo) + 1.0))
            if math.isfinite(hi):
                blocking = blocking & (vx < hi - 1e-9 * (abs(hi) + 1.0))
        transient = bool(ch.active)  # a lone capacitor never blocks over an interval
        els = []
        for j, el in enumerate(ch.clamp.elements):
            law = ch.laws[j]
            vj = ev[j]
            p = vj * ic
            energy = e_el[slot[(k, j)]] if (k, j) in slot else 0.0
            # stand-off as kickback.standoff defines it: on-state, rest state, interior maxima
            standoff = max([0.0] + [float(blocked_voltage(el.type, el.bidirectional, ve[j]))
                                    for ve in rest_states])
            if transient:
                held = np.where(blocking, blocked_voltage(el.type, el.bidirectional, vj), 0.0)
                standoff = max(standoff, float(np.max(held[interior_maxima(held, blocking)], initial=0.0)))
            pk_p = float(np.max(p, initial=0.0))
            width = energy / pk_p if pk_p > 0 and energy > 0 else None
            tj = junction_peak(w.t, p, el.thermal_resistance, el.thermal_tau, case.checks.ambient_temperature)
            els.append(ElementFigures(el.type, el.name or f"{el.type} {j + 1}",
                                      law.description if law is not None else
                                      f"capacitor ({el.capacitance:.4g} F)",
                                      energy, float(np.max(np.abs(vj), initial=0.0)),
                                      float(np.max(np.abs(ic), initial=0.0)), standoff, pk_p, width, tj))
        on_i = float(c.on.chain_currents[k]) if k < len(c.on.chain_currents) else 0.0
        clamps.append(ClampFigures(ch.name, ch.clamp.across, sum(x.energy_J for x in els),
                                   float(np.max(np.abs(ic), initial=0.0)),
                                   _duration_above(w.t, ic, CONDUCTION_FRACTION * i0), on_i, tuple(els)))

    i = w.i_coil
    rel = case.coil.release_current
    release = None
    if rel is not None and not i0 < rel:
        t_rel = first_crossing_below(w.t, i, rel)
        if t_rel is not None:
            t_rel = refine_crossing(w, t_rel, lambda y: c.coil_current(y[0]), rel)
        release = None if t_rel is None else t_rel + case.coil.release_delay
    findings = turnoff_findings(case, i0, [cf.on_state_current_A for cf in clamps], lambda k: c.on.chain_voltages[k],
                                bound_hit=w.bound_hit, end_time=float(w.t[-1]), avalanche_energy=e_av,
                                stored=stored, peak_voltage=peak_v)
    s = case.switch
    sw_tj = junction_peak(w.t, w.v * (w.i_channel + w.i_offstate), s.thermal_resistance, s.thermal_tau,
                          case.checks.ambient_temperature)
    models = [c.switch.description] + [law.description for ch in c.chains for law in ch.laws if law is not None]
    if c.r_min > 0 and c.pin_points:
        names = sorted({"the switch's avalanche" if b == 1 else f"clamp '{c.chains[c.active_chains[b - 2]].name}'"
                        for _, b, _ in c.pin_points})
        models.append(f"zero-resistance laws ({', '.join(names)}) hold the node exactly at their voltage "
                      "while they conduct")
    models.append(f"detailed engine: Radau IIA, rtol {w.rtol:g}; current 'at zero' below "
                  f"{ZERO_FRACTION:g} × initial")
    if not math.isfinite(balance):
        raise ArithmeticError("energy balance is not finite")
    return Figures(
        initial_current_A=i0, stored_energy_J=stored, initial_capacitor_energy_J=cap0,
        resistance_energy_J=e_r, to_10_percent_s=w.events["10%"], to_1_percent_s=w.events["1%"],
        to_zero_s=w.events["zero"], release_s=release, peak_voltage_V=peak_v, peak_time_s=peak_t,
        crossover_energy_J=e_ch, avalanche_energy_J=e_av, body_diode_energy_J=e_bd,
        supply_energy_J=e_sup, clamps=tuple(clamps), left_in_capacitors_J=cap_end,
        left_in_coil_J=coil_end, energy_balance_error=float(balance), end_time_s=float(w.t[-1]),
        bound_hit=w.bound_hit, findings=tuple(findings), models=tuple(models), switch_junction_peak_K=sw_tj,
        motor_energy_J=e_motor)


def turnoff_findings(case, i0: float, on_currents, on_voltage, *, bound_hit: bool, end_time: float,
                     avalanche_energy: float, stored: float, peak_voltage: float) -> list[str]:
    """The findings of one turn-off, in the same words whichever engine solved it.

    Parameters
    ----------
    case : Case
    i0 : float — the coil's on-state current [A]
    on_currents : sequence of float — each clamp's on-state current [A], in the case's order
    on_voltage : callable — ``on_voltage(k)``: clamp k's on-state voltage [V] (asked only of a
        clamp that conducts while on, :func:`conducts_while_on`)
    bound_hit : bool — the run stopped at its time bound, at ``end_time`` [s]
    avalanche_energy, stored : float — the switch's avalanche energy and the coil's stored energy [J]
    peak_voltage : float — the switch node's peak [V]
    """
    out = []
    for k, (cl, on_i) in enumerate(zip(case.clamps, on_currents, strict=True)):
        if conducts_while_on(on_i, i0, chain_leakage(cl.elements)):
            out.append(f"clamp '{cl.name}' conducts {abs(on_i):.3g} A while the switch is on "
                       f"({abs(on_i * on_voltage(k)):.3g} W in the clamp, extra switch current)")
    rel = case.coil.release_current
    if rel is not None and i0 < rel:
        out.append(f"the on-state current {i0:.3g} A is below the release current {rel:.3g} A: "
                   "the armature may never pull in")
    if bound_hit:
        out.append(f"the run stopped at its time bound {end_time:.3g} s before the transient ended")
    if avalanche_energy > AVALANCHE_NEGLIGIBLE * stored:
        out.append(f"the switch avalanches: {avalanche_energy:.3g} J at up to {peak_voltage:.4g} V")
    return out


def figure_columns(fig: Figures, nan_if_absent: float = np.nan) -> dict:
    """One case's figures as the result contract's columns: name → (1,) float array.

    The names are those the batch engine fills for many variants (``switch.peak_voltage_V``,
    ``coil.decay_s.to_zero``, ``clamps[0].elements[1].energy_J`` …); a figure that does not occur
    (None: a time, a pulse width, a junction temperature without a Foster network) is NaN, as
    there. ``nan_if_absent``: what a NaN *given* for such a figure becomes (the audit asks for
    +inf, so that its finite-figure rule still sees it; NaN: left as it is).
    """
    def c(x, absent_ok=False):
        if x is None:
            return np.array([np.nan])
        x = float(x)
        return np.array([nan_if_absent if (absent_ok and np.isnan(x)) else x])

    out = {"coil.initial_current_A": c(fig.initial_current_A), "coil.stored_energy_J": c(fig.stored_energy_J),
           "coil.resistance_energy_J": c(fig.resistance_energy_J),
           "coil.decay_s.to_10_percent": c(fig.to_10_percent_s, True),
           "coil.decay_s.to_1_percent": c(fig.to_1_percent_s, True),
           "coil.decay_s.to_zero": c(fig.to_zero_s, True), "coil.release_s": c(fig.release_s, True),
           "switch.peak_voltage_V": c(fig.peak_voltage_V), "switch.peak_time_s": c(fig.peak_time_s),
           "switch.crossover_energy_J": c(fig.crossover_energy_J),
           "switch.avalanche_energy_J": c(fig.avalanche_energy_J),
           "switch.body_diode_energy_J": c(fig.body_diode_energy_J), "supply.energy_J": c(fig.supply_energy_J)}
    for k, cf in enumerate(fig.clamps):
        for j, ef in enumerate(cf.elements):
            pre = f"clamps[{k}].elements[{j}]."
            out |= {pre + "energy_J": c(ef.energy_J), pre + "peak_voltage_V": c(ef.peak_voltage_V),
                    pre + "peak_current_A": c(ef.peak_current_A), pre + "standoff_voltage_V": c(ef.standoff_voltage_V),
                    pre + "peak_power_W": c(ef.peak_power_W), pre + "pulse_width_s": c(ef.pulse_width_s, True),
                    pre + "junction_peak_K": c(ef.junction_peak_K, True)}
        out |= {f"clamps[{k}].energy_J": c(cf.energy_J), f"clamps[{k}].peak_current_A": c(cf.peak_current_A),
                f"clamps[{k}].conduction_s": c(cf.conduction_s),
                f"clamps[{k}].on_state_current_A": c(cf.on_state_current_A)}
    out |= {"left_in_capacitors_J": c(fig.left_in_capacitors_J), "left_in_coil_J": c(fig.left_in_coil_J),
            "initial_capacitor_energy_J": c(fig.initial_capacitor_energy_J),
            "energy_balance_error": c(fig.energy_balance_error), "end_time_s": c(fig.end_time_s),
            "bound_hit": c(float(fig.bound_hit)), "motor_energy_J": c(fig.motor_energy_J),
            "switch.junction_peak_K": c(fig.switch_junction_peak_K, True)}
    return out
