"""The final turn-off after a ``[drive]``: from the full periodic steady state at the turn-off
instant, not from a DC on-state.

Under PWM the coil current, the node and snubber-capacitor voltages, a motor's speed and every
junction's Foster stages follow a periodic steady state. The last turn-off happens at a
turn-off instant ``t = D·T`` of that cycle; of the case's duties the one with the highest coil
current there is taken (the worst case for the clamp and the switch). Starting from a DC
on-state at that current instead puts a motor at the speed its DC equilibrium has for the peak
current (too fast under PWM: the back-EMF at turn-off too high; the decay was 16 % short at duty
0.3 and 2.6 % short on the fan demo at duty 0.9) and every junction at ambient.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from kickback.case import Case
from kickback.circuit import Circuit, OnState
from kickback.engine.periodic import SteadyState
from kickback.errors import CaseError


class PeriodicStart(Circuit):
    """The turn-off circuit of ``case`` starting from the periodic steady state ``ss`` at its
    turn-off instant: coil current (or flux), node and snubber-capacitor voltages, motor speed,
    and the channel current the fall starts from."""

    def __init__(self, case: Case, ss: SteadyState):
        x = np.array(ss.x_turnoff, dtype=float)
        i = float(ss.waveforms.circuit.coil_current(x[0]))
        if not i > 0:
            # an on-time too short to bring the coil current positive again after the off
            # phase's ring: there is no current for the final turn-off to interrupt, and its
            # figures (decay to a fraction of the initial current) have no meaning
            raise CaseError(
                f"at duty {ss.duty:g} the coil current at the turn-off instant of the periodic steady "
                f"state is {i:.3g} A (the on-time does not bring it positive): there is no current for "
                "a final turn-off from that state (expected a longer on-time, or final_turn_off = false "
                "for a turn-off from the DC on-state)", source=case.source, key="drive.final_turn_off")
        super().__init__(replace(case, coil=replace(case.coil, initial_current=i)))
        self._x = x
        self.duty = ss.duty
        y = self.initial_state()
        self.conducting = True  # the on-state law holds up to the instant
        try:
            v = float(y[1]) if self.capacitive else self.node_voltage(0.0, y)
            _, _, chains = self.split_currents(0.0, v, y)
        finally:
            self.conducting = False
        currents = [0.0] * len(self.chains)
        for n, k in enumerate(self.active_chains):
            currents[k] = float(chains[n])
        volts = tuple(v - self.Vs * ch.reference for ch in self.chains)
        self.on = OnState(i, v, float(ss.switch_current_turnoff), tuple(currents), volts)
        self.i0 = i
        self.i_on = float(ss.switch_current_turnoff)

    def on_speed(self) -> float:
        """Motor speed [rad/s] at the turn-off instant of the periodic state."""
        return float(self._x[self.iw]) if self.mech else super().on_speed()

    def initial_state(self) -> np.ndarray:
        y = np.zeros(self.n_states)
        y[: self.ie] = self._x
        return y


def turnoff_duty(steady) -> SteadyState:
    """Of the steady states ``steady``, the one whose coil current at the turn-off instant is the
    highest."""
    def current(ss):  # signed: a negative current is no worst case for the turn-off
        return float(ss.waveforms.circuit.coil_current(ss.x_turnoff[0]))

    return max(steady, key=current)


def thermal_start(ss: SteadyState) -> dict:
    """Each Foster network's stage rises [K] at the turn-off instant of the periodic state ``ss``:
    ``"switch"`` and ``(chain, element)`` keys, only for parts given a network.

    The periodic stage states come from the cycle's power waveforms, phase by phase
    (:func:`kickback.pwmfigures.phase_resolved`), through
    :func:`kickback.models.thermal.foster_periodic_stages`.
    """
    from kickback.models.thermal import foster_periodic_stages
    from kickback.pwmfigures import phase_resolved

    c = ss.waveforms.circuit
    t_off = ss.duty / ss.frequency
    rs = phase_resolved(ss.waveforms, ss.switch_current_turnoff)
    # the last sample at the instant is the start of the off phase; the stages are continuous
    at = int(np.searchsorted(rs.t, t_off, side="right")) - 1
    out = {}
    s = c.case.switch
    if s.thermal_resistance is not None:
        p = np.clip(rs.v * rs.i_switch, 0.0, None)
        out["switch"] = foster_periodic_stages(rs.t, p, s.thermal_resistance, s.thermal_tau)[:, at]
    for k, ch in enumerate(c.chains):
        ic, ev = rs.chains[k]
        for j, el in enumerate(ch.clamp.elements):
            if el.thermal_resistance is not None:
                p = np.clip(ev[j] * ic, 0.0, None)
                out[(k, j)] = foster_periodic_stages(rs.t, p, el.thermal_resistance, el.thermal_tau)[:, at]
    return out


def junctions_from(figures, w, start: dict):
    """``figures`` of the final turn-off ``w`` with every junction peak [K] recomputed from the
    stage rises ``start`` (:func:`thermal_start`) instead of from ambient."""
    from kickback.figures import chain_signals
    from kickback.models.thermal import foster_response

    case = w.circuit.case
    amb = case.checks.ambient_temperature

    def peak(p, r, tau, st):
        return float(amb + np.max(foster_response(w.t, np.clip(p, 0.0, None), r, tau, st), initial=0.0))

    s = case.switch
    sw = figures.switch_junction_peak_K
    if "switch" in start:
        sw = peak(w.v * (w.i_channel + w.i_offstate), s.thermal_resistance, s.thermal_tau, start["switch"])
    clamps = []
    for k, cf in enumerate(figures.clamps):
        ic, _, ev = chain_signals(w, k)
        els = []
        for j, ef in enumerate(cf.elements):
            el = w.circuit.chains[k].clamp.elements[j]
            if (k, j) in start:
                ef = replace(ef, junction_peak_K=peak(ev[j] * ic, el.thermal_resistance, el.thermal_tau,
                                                      start[(k, j)]))
            els.append(ef)
        clamps.append(replace(cf, elements=tuple(els)))
    return replace(figures, switch_junction_peak_K=sw, clamps=tuple(clamps))
