"""Figures of a periodic steady state: ripple, mean and RMS currents, losses, energy per cycle
and junction temperatures."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from kickback.engine.periodic import SteadyState


@dataclass(frozen=True)
class PwmFigures:
    """One duty's steady state (SI units; per cycle = one switching period)."""

    duty: float
    frequency_Hz: float
    ripple_A: float
    min_current_A: float
    max_current_A: float
    mean_current_A: float
    rms_current_A: float
    switch_mean_A: float
    switch_rms_A: float
    #: the channel's on-phase loss less the node-capacitance discharge at turn-on: the I²·R_on
    #: (or V_sat·I) loss while on
    conduction_loss_W: float
    crossover_energy_J: float
    crossover_loss_W: float
    avalanche_energy_J: float
    avalanche_power_W: float
    supply_power_W: float
    elements: tuple  # dicts: clamp, element, type, mean_A, rms_A, energy_J, power_W, junction_*_K
    switch_junction_mean_K: float | None
    switch_junction_peak_K: float | None
    cycle_solves: int
    brute_force_cycles: int | None
    contraction: float
    residual: float
    mean_speed_rad_s: float | None = None  # DC motor
    mean_torque_Nm: float | None = None
    cycle: object = field(default=None, repr=False, compare=False)  # Waveforms of the steady cycle
    #: the node capacitance (C_oss, winding and lone clamp capacitors) discharged through the
    #: channel at each turn-on, ½·C·ΔV² per cycle [J] and × f [W] (see :func:`turn_on_discharge`)
    turn_on_discharge_energy_J: float = 0.0
    turn_on_discharge_loss_W: float = 0.0

    def to_dict(self) -> dict:
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.__dict__.items() if k != "cycle"}


def _integral(t, x) -> float:
    """∫ x dt over ``t[0] … t[-1]``, each phase on its own interval.

    ``t`` may repeat a time at a phase boundary (:func:`phase_resolved`): the integral is split
    there, so a signal that jumps at the boundary is integrated exactly on either side. Within a
    phase, consecutive intervals whose lengths differ by at most 2× are taken in pairs by
    Simpson's rule for unequal spacing (all weights positive there); any other interval by the
    trapezoid.

    References
    ----------
    E. Süli and D. Mayers, An Introduction to Numerical Analysis, CUP 2003, ch. 7 (Newton–Cotes
    rules; Simpson's rule through three unequally spaced points).
    """
    t = np.asarray(t, dtype=float)
    x = np.asarray(x, dtype=float)
    h = np.diff(t)
    total = 0.0
    n = 0
    while n < h.size:
        if h[n] == 0:
            n += 1
            continue
        if n + 1 < h.size and h[n + 1] > 0 and 0.5 <= h[n + 1] / h[n] <= 2.0:
            h0, h1 = h[n], h[n + 1]
            total += (h0 + h1) / 6.0 * ((2.0 - h1 / h0) * x[n] + (h0 + h1) ** 2 / (h0 * h1) * x[n + 1]
                                        + (2.0 - h0 / h1) * x[n + 2])
            n += 2
        else:
            total += 0.5 * h[n] * (x[n] + x[n + 1])
            n += 1
    return float(total)


def _mean_rms(t, x) -> tuple[float, float]:
    """Mean and RMS of ``x`` over ``t[0] … t[-1]``, each phase integrated on its own interval."""
    span = t[-1] - t[0]
    return _integral(t, x) / span, float(np.sqrt(max(_integral(t, x * x), 0.0) / span))


@dataclass(frozen=True)
class Resolved:
    """One cycle's samples phase by phase, each phase's signals evaluated in its own switch and pin
    mode; a boundary time appears twice (the end of one phase and the start of the next), so a
    signal that jumps there (the switch current at an instant turn-off) jumps exactly.

    Attributes
    ----------
    t : ndarray — [s] sample times (non-decreasing)
    i_coil, v, i_switch : ndarray — [A], [V], [A] coil current, node voltage, switch current
        (channel plus avalanche/body diode)
    chains : list of (ndarray, list of ndarray) — per clamp chain: its current [A] and each
        element's voltage [V]
    """

    t: np.ndarray
    i_coil: np.ndarray
    v: np.ndarray
    i_switch: np.ndarray
    chains: list


def phase_resolved(w, i_on: float | None = None) -> Resolved:
    """The cycle ``w`` sampled phase by phase (see :class:`Resolved`).

    The sampled waveforms give a time shared by two phases once, evaluated in the later phase's
    mode: at an instant turn-off the switch current there reads 0 and the trapezoid between it
    and the last on-state sample hands half a step of switch current to the freewheel path.
    Here each phase keeps both of its ends.

    ``i_on`` [A]: the channel current this cycle's turn-off starts from (the circuit keeps only the
    last one it solved: several duties share one circuit).
    """
    c = w.circuit
    saved = c.i_on
    if i_on is not None:
        c.i_on = i_on
    try:
        return _phase_resolved(w)
    finally:
        c.i_on = saved


def _phase_resolved(w) -> Resolved:
    from kickback.engine.sampling import derived_with_pin

    c = w.circuit
    parts = []
    for ph in w.phases:
        if not ph.t1 > ph.t0:
            continue
        m = (w.t >= ph.t0) & (w.t <= ph.t1)
        t = w.t[m]
        y = np.asarray(ph.sol(t), dtype=float).reshape(c.n_states, -1)
        if t[0] > ph.t0 or t[-1] < ph.t1:  # keep both ends of the phase
            t = np.unique(np.concatenate([[ph.t0], t, [ph.t1]]))
            y = np.asarray(ph.sol(t), dtype=float).reshape(c.n_states, -1)
        v, ich, ioff, ichains = derived_with_pin(c, ph.pin, t, y, ph)
        i = np.asarray(c.coil_current(y[0]), dtype=float)
        chains = []
        for k, ch in enumerate(c.chains):
            vchain = v - c.Vs * ch.reference
            if k in c.active_chains:
                ic = np.asarray(ichains[c.active_chains.index(k)], dtype=float)
                vcap = y[c.icap[k]] if k in c.icap else 0.0
            else:  # a lone capacitor merged into the node: C·dv/dt, within the phase
                dvdt = np.gradient(v, t) if t.size > 2 else np.zeros_like(v)
                ic = sum(el.capacitance for el in ch.clamp.elements) * dvdt
                vcap = vchain
            chains.append((ic, ch.element_voltages(ic, vchain, vcap)))
        parts.append((t, i, v, np.asarray(ich + ioff, dtype=float), chains))
    cat = np.concatenate
    chains = [(cat([p[4][k][0] for p in parts]),
               [cat([p[4][k][1][j] for p in parts]) for j in range(len(ch.clamp.elements))])
              for k, ch in enumerate(c.chains)]
    return Resolved(cat([p[0] for p in parts]), cat([p[1] for p in parts]), cat([p[2] for p in parts]),
                    cat([p[3] for p in parts]), chains)


def _junction(t, p, r, tau, ambient):
    if r is None:
        return None, None
    from kickback.models.thermal import foster_peak, foster_periodic_stages

    p = np.clip(p, 0.0, None)
    # the periodic stage states at the cycle's start, then the peak sought between samples too
    start = foster_periodic_stages(t, p, r, tau)[:, 0]
    mean = _integral(t, p) / (t[-1] - t[0]) * float(sum(r))
    return float(ambient + mean), float(ambient + foster_peak(t, p, r, tau, start))


def channel_step(on, v_start: float, i: float) -> tuple[float, float]:
    """The node step a closing channel carries at turn-on: from ``v_from`` to ``v_end`` [V].

    ``on`` is the channel's on-state law (:class:`~kickback.models.base.LinearPieces`),
    ``v_start`` [V] the node at the turn-on instant, ``i`` [A] the coil current then (held through
    the short step). The node settles where the channel carries the coil current, on its forward
    piece (``i > 0``) or its reverse piece (``i < 0``). A channel with no reverse piece (a BJT)
    carries no negative current: it stops conducting at the edge of its zero-current band
    ``[v_rev, v_fwd]`` (V_sat), and below that edge the coil moves the node, not the channel.
    Likewise a start inside the band is carried by the coil up to the band's edge: only the part
    of the step outside the band passes through the channel.
    """
    lo, hi = on.v_rev, on.v_fwd
    if i > 0:
        v_end = hi + on.r_fwd * i
    elif i < 0 and math.isfinite(lo):
        v_end = lo + on.r_rev * i
    else:  # no channel current at this coil current: the node stays anywhere in the band
        v_end = min(max(v_start, lo), hi)
    v_from = v_start
    if lo < v_start < hi:  # within the band the channel carries nothing
        v_from = min(max(v_end, lo), hi)
    return v_from, v_end


def turn_on_discharge(ss: SteadyState) -> float:
    """Energy the channel takes at each turn-on from the node capacitance, per cycle [J].

    At turn-on the node falls from its voltage at the end of the off phase ``V`` (the periodic
    state at the cycle start) to the switch's on-state voltage ``V_on`` at the coil current of that
    instant (R_on·i, V_sat, 0 for an ideal switch): the capacitance to ground
    (C_oss and capacitors across the switch) discharges through the channel, and the capacitance
    to the supply (winding, capacitors across the coil) charges by the same step through it. A
    capacitor stepped by ΔV through a resistance dissipates ½·C·ΔV² in it whatever the resistance.
    Where the channel cannot carry the coil current of that instant (a BJT with the coil current
    negative or zero) it discharges the node only down to its saturation voltage, and only the
    part of the step outside the channel's zero-current band counts (:func:`channel_step`).

    .. math:: E = \\tfrac12 (C_{gnd} + C_{+}) (V - V_{on})^2

    An RC snubber's capacitor is not node capacitance: its discharge at turn-on is booked to the
    snubber's resistor (the clamp element energies) and the channel's on-phase energy.

    References
    ----------
    N. Mohan, T. M. Undeland and W. P. Robbins, Power Electronics, 3rd ed., Wiley 2003, ch. 24
    (switching losses: the ½·C_oss·V² capacitive turn-on loss).
    """
    c = ss.waveforms.circuit
    if c.iv is None:
        return 0.0
    w = ss.waveforms
    v_from, v_end = channel_step(c.switch.on_state, float(ss.x[c.iv]), float(w.i_coil[0]))
    dv = v_from - v_end
    return 0.5 * c.C_node * dv * dv


def pwm_figures(ss: SteadyState) -> PwmFigures:
    """Figures of the steady-state cycle ``ss``."""
    w = ss.waveforms
    c = w.circuit
    case = c.case
    rs = phase_resolved(w, ss.switch_current_turnoff)
    t = rs.t
    f = ss.frequency
    i = rs.i_coil
    i_sw = rs.i_switch
    mean, rms = _mean_rms(t, i)
    sw_mean, sw_rms = _mean_rms(t, i_sw)
    e_on, e_off = ss.energies_on, ss.energies_off
    amb = case.checks.ambient_temperature
    elements = []
    slot = {kj: m for m, kj in enumerate(c.energy_slots)}
    for k, ch in enumerate(c.chains):
        ic, ev = rs.chains[k]
        m_i, r_i = _mean_rms(t, ic)
        for j, el in enumerate(ch.clamp.elements):
            energy = float(e_on[5 + slot[(k, j)]] + e_off[5 + slot[(k, j)]]) if (k, j) in slot else 0.0
            tj_mean, tj_peak = _junction(t, ev[j] * ic, el.thermal_resistance, el.thermal_tau, amb)
            elements.append({"clamp": ch.name, "element": el.name or f"{el.type} {j + 1}", "type": el.type,
                             "mean_A": m_i, "rms_A": r_i, "energy_J": energy, "power_W": energy * f,
                             "junction_mean_K": tj_mean, "junction_peak_K": tj_peak})
    s = case.switch
    sw_tj_mean, sw_tj_peak = _junction(t, rs.v * i_sw, s.thermal_resistance, s.thermal_tau, amb)
    e_av = float(e_on[3] + e_off[3])
    e_cap = turn_on_discharge(ss)
    return PwmFigures(
        duty=ss.duty, frequency_Hz=f, ripple_A=float(i.max() - i.min()), min_current_A=float(i.min()),
        max_current_A=float(i.max()), mean_current_A=mean, rms_current_A=rms, switch_mean_A=sw_mean,
        switch_rms_A=sw_rms, conduction_loss_W=(float(e_on[2]) - e_cap) * f, crossover_energy_J=float(e_off[2]),
        crossover_loss_W=float(e_off[2]) * f, avalanche_energy_J=e_av, avalanche_power_W=e_av * f,
        supply_power_W=float(e_on[1] + e_off[1]) * f, elements=tuple(elements),
        switch_junction_mean_K=sw_tj_mean, switch_junction_peak_K=sw_tj_peak, cycle_solves=ss.cycle_solves,
        brute_force_cycles=ss.brute_force_cycles, contraction=ss.contraction, residual=ss.residual,
        mean_speed_rad_s=_mean_rms(w.t, w.y[c.iw])[0] if c.mech else (c.motor.speed if c.motor else None),
        mean_torque_Nm=c.k_emf * mean if c.motor else None, cycle=w, turn_on_discharge_energy_J=e_cap,
        turn_on_discharge_loss_W=e_cap * f)
