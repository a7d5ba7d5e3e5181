"""Figures of a periodic steady state: ripple, mean and RMS currents, losses, energy per cycle
and junction temperatures."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from kickback.engine.periodic import SteadyState
from kickback.figures import chain_signals


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

    def to_dict(self) -> dict:
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in self.__dict__.items() if k != "cycle"}


def _mean_rms(t, x) -> tuple[float, float]:
    span = t[-1] - t[0]
    return float(np.trapezoid(x, t) / span), float(np.sqrt(np.trapezoid(x * x, t) / span))


def _junction(t, p, r, tau, ambient):
    if r is None:
        return None, None
    from kickback.models.thermal import foster_periodic

    rise = foster_periodic(t, np.clip(p, 0.0, None), r, tau)
    mean = float(np.trapezoid(np.clip(p, 0.0, None), t) / (t[-1] - t[0])) * float(sum(r))
    return float(ambient + mean), float(ambient + rise.max())


def pwm_figures(ss: SteadyState) -> PwmFigures:
    """Figures of the steady-state cycle ``ss``."""
    w = ss.waveforms
    c = w.circuit
    case = c.case
    t = w.t
    f = ss.frequency
    i = w.i_coil
    i_sw = w.i_channel + w.i_offstate
    mean, rms = _mean_rms(t, i)
    sw_mean, sw_rms = _mean_rms(t, i_sw)
    e_on, e_off = ss.energies_on, ss.energies_off
    amb = case.checks.ambient_temperature
    elements = []
    slot = {kj: m for m, kj in enumerate(c.energy_slots)}
    for k, ch in enumerate(c.chains):
        ic, _, ev = chain_signals(w, k)
        m_i, r_i = _mean_rms(t, ic)
        for j, el in enumerate(ch.clamp.elements):
            energy = float(e_on[5 + slot[(k, j)]] + e_off[5 + slot[(k, j)]]) if (k, j) in slot else 0.0
            tj_mean, tj_peak = _junction(t, ev[j] * ic, el.thermal_resistance, el.thermal_tau, amb)
            elements.append({"clamp": ch.name, "element": el.name or f"{el.type} {j + 1}", "type": el.type,
                             "mean_A": m_i, "rms_A": r_i, "energy_J": energy, "power_W": energy * f,
                             "junction_mean_K": tj_mean, "junction_peak_K": tj_peak})
    s = case.switch
    sw_tj_mean, sw_tj_peak = _junction(t, w.v * i_sw, s.thermal_resistance, s.thermal_tau, amb)
    e_av = float(e_on[3] + e_off[3])
    return PwmFigures(
        duty=ss.duty, frequency_Hz=f, ripple_A=float(i.max() - i.min()), min_current_A=float(i.min()),
        max_current_A=float(i.max()), mean_current_A=mean, rms_current_A=rms, switch_mean_A=sw_mean,
        switch_rms_A=sw_rms, conduction_loss_W=float(e_on[2]) * f, crossover_energy_J=float(e_off[2]),
        crossover_loss_W=float(e_off[2]) * f, avalanche_energy_J=e_av, avalanche_power_W=e_av * f,
        supply_power_W=float(e_on[1] + e_off[1]) * f, elements=tuple(elements),
        switch_junction_mean_K=sw_tj_mean, switch_junction_peak_K=sw_tj_peak, cycle_solves=ss.cycle_solves,
        brute_force_cycles=ss.brute_force_cycles, contraction=ss.contraction, residual=ss.residual,
        mean_speed_rad_s=_mean_rms(t, w.y[c.iw])[0] if c.mech else (c.motor.speed if c.motor else None),
        mean_torque_Nm=c.k_emf * mean if c.motor else None, cycle=w)
