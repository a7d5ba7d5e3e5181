"""From a :class:`~kickback.case.Case` to state equations, on-state and bookkeeping.

State vector (capacitive node, ``C_node > 0``)::

    [i, v, v_C1 … v_Cm, E_R, E_supply, E_channel, E_avalanche, E_body, E_el1 … E_elK]

With no node capacitance the node voltage ``v`` is algebraic (solved from the node's current
balance at every evaluation, exactly, vertical ideal laws included) and is left out.
The energies are integrals carried as states so that the ledger is as accurate as the solve.
"""

from __future__ import annotations

import math

import numpy as np

from kickback.case import Case
from kickback.chain import Chain, regularized
from kickback.coilstate import CoilStates
from kickback.errors import CaseError
from kickback.floatnode import FLOAT, FLOAT_CONDUCTANCE, FLOAT_ENTRY, FLOAT_LANDING, FLOAT_RESIDUAL, FloatingNode  # noqa: F401
from kickback.models.switch import switch_law
from kickback.nodebalance import solve_monotone as _solve_monotone
from kickback.onstate import OnState, solve_on_state

N_ENERGY_FIXED = 5  # E_R, E_supply, E_channel, E_avalanche, E_body
#: relative size of the resistance given to zero-resistance laws when the node has capacitance
REGULARIZATION = 1e-7
#: conductance [S, relative to i0/v_scale] across the switch when the node has no capacitance, so
#: that the node voltage is defined when nothing else conducts
LEAKAGE = 1e-12


class Circuit(CoilStates, FloatingNode):
    """The turn-off circuit of one case, ready for an engine."""

    def __init__(self, case: Case):
        self.case = case
        c, s = case.coil, case.switch
        self.L, self.R, self.Vs = c.inductance, c.resistance, case.supply.voltage
        #: saturating coil: the first state is the flux linkage λ [Wb] instead of the current
        self.i_sat = c.saturation_current
        self.flux = self.i_sat is not None
        #: DC motor: back-EMF k·ω in series with the coil; ω a state with a mechanical model
        self.motor = case.motor
        self.k_emf = case.motor.back_emf_constant if case.motor else 0.0
        self.mech = bool(case.motor and case.motor.mechanical)
        merged_coil = sum(el.capacitance for cl in case.clamps if _cap_only(cl) and cl.across == "coil"
                          for el in cl.elements)
        merged_sw = sum(el.capacitance for cl in case.clamps if _cap_only(cl) and cl.across == "switch"
                        for el in cl.elements)
        self.C_plus = c.capacitance + merged_coil  # capacitance sw -> +
        self.C_gnd = s.capacitance + merged_sw  # capacitance sw -> ground
        self.C_node = self.C_plus + self.C_gnd
        self.capacitive = self.C_node > 0
        exact_switch = switch_law(s.type, on_resistance=s.on_resistance,
                                  saturation_voltage=s.saturation_voltage, fall_time=s.fall_time,
                                  breakdown_voltage=s.breakdown_voltage,
                                  avalanche_resistance=s.avalanche_resistance,
                                  body_diode_voltage=s.body_diode_voltage)
        exact_chains = [Chain(cl) for cl in case.clamps]
        for ch in exact_chains:
            _check_chain(case, ch)
        self.switch = exact_switch
        self.chains = exact_chains
        if not self.capacitive and not case.clamps and s.breakdown_voltage is None:
            raise CaseError("no conducting path takes the coil current at turn-off: the switch-node voltage "
                            "would be unbounded (expected a clamp, switch.breakdown_voltage or "
                            "switch.capacitance)", source=case.source, key="switch")
        self.on: OnState = solve_on_state(case, self.switch.on_state, self.chains)
        self.i0 = self.on.coil_current
        if self.i0 <= 0:
            raise CaseError("the coil carries no current before turn-off (expected a positive "
                            "on-state current)", source=case.source, key="coil")
        self.v_scale = max(self.Vs, *(abs(x) for x in self._finite_thresholds()), 1.0)
        self.r_min = REGULARIZATION * self.v_scale / self.i0 if self.capacitive else 0.0
        self.pin_points = self._pin_points()
        self.pin: tuple[float, int, int] | None = None
        if self.r_min > 0:
            self.switch = switch_law(s.type, on_resistance=s.on_resistance,
                                     saturation_voltage=s.saturation_voltage, fall_time=s.fall_time,
                                     breakdown_voltage=s.breakdown_voltage,
                                     avalanche_resistance=s.avalanche_resistance,
                                     body_diode_voltage=s.body_diode_voltage)
            object.__setattr__(self.switch, "on_state", regularized(self.switch.on_state, self.r_min))
            object.__setattr__(self.switch, "off_state", regularized(self.switch.off_state, self.r_min))
            self.chains = [Chain(cl, self.r_min) for cl in case.clamps]
        self.g_leak = 0.0 if self.capacitive else LEAKAGE * self.i0 / self.v_scale
        self.active_chains = [k for k, ch in enumerate(self.chains) if not ch.capacitor_only]
        self.cap_chains = [k for k in self.active_chains if self.chains[k].capacitance is not None]
        # element energy slots: one per non-capacitor element of every active chain
        self.energy_slots: list[tuple[int, int]] = [
            (k, j) for k in self.active_chains for j, law in enumerate(self.chains[k].laws) if law is not None]
        nv = 1 if self.capacitive else 0
        self.iv = 1 if self.capacitive else None
        self.icap = {k: 1 + nv + n for n, k in enumerate(self.cap_chains)}
        self.iw = 1 + nv + len(self.cap_chains) if self.mech else None  # motor speed ω [rad/s]
        self.ie = 1 + nv + len(self.cap_chains) + (1 if self.mech else 0)
        #: the motor's electrical-to-mechanical energy ∫ k·ω·i dt is the last state
        self.n_states = self.ie + N_ENERGY_FIXED + len(self.energy_slots) + (1 if self.motor else 0)
        self.i_on = self.on.switch_current
        #: switch state for repetitive switching: conducting (on-state law) or turning off at
        #: ``t_turnoff`` (the current falls from ``i_on`` over the fall time, then the switch is off)
        self.conducting = False
        self.t_turnoff = 0.0
        self._pos = {k: n for n, k in enumerate(self.active_chains)}
        self._thresholds = self._node_thresholds()

    # ----------------------------------------------------------------- on-state
    def _pin_points(self) -> list[tuple[float, int, int]]:
        """Exact vertical laws as (node voltage [V], branch index, side ±1).

        Branch 1 is the switch's off-state law, 2… the active chains. With node capacitance the
        node is *pinned* at such a voltage while the vertical law takes the current.
        """
        out = []
        off = self.switch.off_state
        if off.r_fwd == 0 and math.isfinite(off.v_fwd):
            out.append((off.v_fwd, 1, 1))
        if off.r_rev == 0 and math.isfinite(off.v_rev):
            out.append((off.v_rev, 1, -1))
        n = 0
        for ch in self.chains:
            if ch.capacitor_only:
                continue
            p = ch.pieces
            ref = self.Vs * ch.reference
            if p is not None and p.r_fwd == 0 and math.isfinite(p.v_fwd):
                out.append((ref + p.v_fwd, 2 + n, 1))
            if p is not None and p.r_rev == 0 and math.isfinite(p.v_rev):
                out.append((ref + p.v_rev, 2 + n, -1))
            n += 1
        return out

    def _finite_thresholds(self) -> list[float]:
        out = [self.switch.off_state.v_fwd] if math.isfinite(self.switch.off_state.v_fwd) else []
        for ch in self.chains:
            if ch.pieces is not None:
                ref = self.Vs * ch.reference
                out += [ref + x for x in (ch.pieces.v_fwd,) if math.isfinite(x)]
        return out

    def initial_state(self) -> np.ndarray:
        y = np.zeros(self.n_states)
        y[0] = self.coil_state(self.i0)
        if self.mech:
            y[self.iw] = self.on_speed()
        if self.capacitive:
            y[1] = self.on.node_voltage
        for k in self.cap_chains:
            ch = self.chains[k]
            lo, hi = ch.band
            vx = self.on.chain_voltages[k]
            y[self.icap[k]] = vx - float(np.clip(0.0, lo, hi)) if not (lo <= 0 <= hi) else vx
        return y

    # ---------------------------------------------------------------- currents
    def branch_currents(self, t, v, y):
        """Channel, off-state (avalanche/body diode) and chain currents [A] at node voltage v."""
        sw = self.switch
        if self.conducting:
            ich = sw.on_state.current(v)
        elif sw.fall_time > 0:
            ich = sw.channel_current(v, np.asarray(t) - self.t_turnoff, self.i_on)
        else:
            ich = np.zeros_like(np.asarray(v, dtype=float))
        ich = ich + self.g_leak * v
        ioff = sw.off_state.current(v)
        ichains = []
        for k in self.active_chains:
            ch = self.chains[k]
            vcap = y[self.icap[k]] if k in self.icap else 0.0
            ichains.append(ch.current(v - self.Vs * ch.reference, vcap))
        return ich, ioff, ichains

    def node_voltage(self, t: float, y: np.ndarray) -> float:
        """Switch-node voltage [V]: the state, or solved from the node current balance."""
        if self.capacitive:
            return float(y[1])
        if self.pin is FLOAT:
            return self.forced_voltage(t, y)
        if self.pin is not None:
            return self.pin[0]
        i = float(self.coil_current(y[0]))

        def resid(v):
            return sum(self.currents_at(t, v, y)) - i

        def with_slope(v):
            vals = self.currents_at(t, v, y)
            return sum(vals) - i, sum(self._conductances(t, v, y, vals))

        in_fall = self.conducting or self._in_fall(t)
        return _solve_monotone(resid, self._thresholds[in_fall], self.v_scale, with_slope)

    def _node_thresholds(self) -> dict[bool, list[float]]:
        """Node voltages [V] of vertical laws, after the fall (False) and during it (True)."""
        after = []
        off = self.switch.off_state
        if math.isfinite(off.v_fwd) and off.r_fwd == 0:
            after.append(off.v_fwd)
        for k in self.active_chains:
            ch = self.chains[k]
            after += [x + self.Vs * ch.reference for x in ch.thresholds()]
        during = list(after)
        on = self.switch.on_state
        during += [x for x in (on.v_fwd, on.v_rev) if math.isfinite(x)]
        return {False: after, True: during}

    def split_currents(self, t: float, v: float, y: np.ndarray):
        """Branch currents at a solved node voltage; a vertical law takes what the others leave."""
        ich, ioff, ichains = self.branch_currents(t, v, y)
        vals = [float(ich), float(ioff)] + [float(x) for x in ichains]
        if self.capacitive:
            if self.pin is not None:
                n = self.pin[1]
                vals[n] = 0.0
                vals[n] = float(self.coil_current(y[0])) - sum(vals)
            return vals[0], vals[1], vals[2:]
        if self.pin is not None:
            # floating: the current-limited channel takes what the others leave; held at a
            # vertical law: that law does
            n = self.pin[1]
            vals = [x if math.isfinite(x) else 0.0 for x in self.currents_at(t, v, y)]
            vals[n] = 0.0 if n else vals[n]
            vals[n] += float(self.coil_current(y[0])) - sum(vals)
            return vals[0], vals[1], vals[2:]
        vertical = self._vertical_at(t, v)
        if vertical:
            rest = float(self.coil_current(y[0])) - sum(x for n, x in enumerate(vals) if n not in vertical)
            for n in vertical:
                vals[n] = rest / len(vertical)
        return vals[0], vals[1], vals[2:]

    def _vertical_at(self, t: float, v: float) -> list[int]:
        """Indices (channel 0, off-state 1, chains 2…) of branches whose law is vertical at v."""
        def at(x):
            return math.isfinite(x) and abs(v - x) <= 1e-12 * max(1.0, abs(x))

        out = []
        on = self.switch.on_state
        if (self.conducting or self._in_fall(t)) and (
                (on.r_fwd == 0 and at(on.v_fwd)) or (on.r_rev == 0 and at(on.v_rev))):
            out.append(0)
        off = self.switch.off_state
        if (off.r_fwd == 0 and at(off.v_fwd)) or (off.r_rev == 0 and at(off.v_rev)):
            out.append(1)
        for n, k in enumerate(self.active_chains):
            ch = self.chains[k]
            if any(at(x + self.Vs * ch.reference) for x in ch.thresholds()):
                out.append(2 + n)
        return out

    # ---------------------------------------------------------------- equations
    def _in_fall(self, t: float) -> bool:
        tf = self.switch.fall_time
        return 0 < tf and 0 <= t - self.t_turnoff < tf

    def _limit(self, t: float) -> float:
        """[A] channel current ceiling during the fall."""
        return self.i_on * (1.0 - (t - self.t_turnoff) / self.switch.fall_time)

    def _channel_at(self, t: float, v: float) -> float:
        """Scalar channel current [A]: on-state law while conducting, limited during the fall."""
        on = self.switch.on_state.current_at(v)
        if self.conducting:
            return on
        return min(on, self._limit(t)) if self._in_fall(t) else 0.0

    def currents_at(self, t: float, v: float, y) -> list[float]:
        """Scalar branch currents [A]: channel, off-state, then each active chain."""
        sw = self.switch
        ich = self._channel_at(t, v)
        vals = [ich + self.g_leak * v, sw.off_state.current_at(v)]
        for k in self.active_chains:
            ch = self.chains[k]
            vals.append(ch.current_at(v - self.Vs * ch.reference, y[self.icap[k]] if k in self.icap else 0.0))
        return vals

    def rhs(self, t: float, y: np.ndarray) -> np.ndarray:
        """Time derivative of the state vector (see the module docstring for the layout)."""
        i = float(self.coil_current(y[0]))
        if self.capacitive:
            v = float(y[1])
            vals = self.currents_at(t, v, y)
            if self.pin is not None:
                vals[self.pin[1]] = 0.0
                vals[self.pin[1]] = i - sum(vals)
        else:
            v = self.node_voltage(t, y)
            ich, ioff, ichains = self.split_currents(t, v, y)
            vals = [ich, ioff, *ichains]
        d = np.zeros_like(y)
        emf = self.k_emf * self.speed_of(y) if self.motor else 0.0
        d[0] = (self.Vs - v - self.R * i - emf) * (self.state_gain(i)[1] if self.flux else 1.0 / self.L)
        if self.motor:
            m = self.motor
            d[-1] = emf * i
            if self.mech:
                w = float(y[self.iw])
                d[self.iw] = (m.back_emf_constant * i - m.viscous_friction * w - m.load_torque) / m.inertia
        dv = (i - sum(vals)) / self.C_node if self.capacitive and self.pin is None else 0.0
        if self.capacitive:
            d[1] = dv
        i_supply = i - self.C_plus * dv
        for n, k in enumerate(self.active_chains):
            ch = self.chains[k]
            ic = vals[2 + n]
            if ch.reference:
                i_supply -= ic
            if k in self.icap:
                d[self.icap[k]] = ic / ch.capacitance
        e = self.ie
        ioff = vals[1]
        d[e] = self.R * i * i
        d[e + 1] = self.Vs * i_supply
        d[e + 2] = v * vals[0]
        # avalanche or body diode by the current's sign; with the node held at the off-state law,
        # only the held side's slot, and only for current in its conducting direction. Held, the
        # law takes what the others leave, and a step past the release (its current back at
        # zero, a terminal event) carries it on through zero: booked by its sign, the dense
        # output read at the event put the step's far side into the other slot (a body diode of
        # −7e-7 J at +51 V in wide-range case 9839)
        side = self.pin[2] if self.pin is not None and self.pin[1] == 1 else (1 if ioff > 0 else -1)
        d[e + 3] = v * ioff if side > 0 and ioff > 0 else 0.0
        d[e + 4] = v * ioff if side < 0 and ioff < 0 else 0.0
        pinned = self.pin[1] if self.pin is not None else -1
        m = e + N_ENERGY_FIXED
        for k in self.active_chains:
            n = 2 + self._pos[k]
            ch = self.chains[k]
            pw = ch.powers_at(vals[n], v - self.Vs * ch.reference, y[self.icap[k]] if k in self.icap else 0.0,
                              exact=n == pinned)
            d[m:m + len(pw)] = pw
            m += len(pw)
        return d

    def jacobian(self, t: float, y: np.ndarray) -> np.ndarray:
        """Analytic Jacobian of :meth:`rhs` in its dynamic block (coil current, node and
        capacitor voltages). The energy rows are left zero: energies never feed back, so the
        Newton iteration of an implicit method still converges on them."""
        n = self.n_states
        jm = np.zeros((n, n))
        v = float(y[1]) if self.capacitive else self.node_voltage(t, y)
        # conductance of each branch at v
        g = self._conductances(t, v, y)
        if self.floating:
            return self._floating_jacobian(t, v, y, g, jm)
        if self.pin is not None:
            g[self.pin[1]] = math.inf
        elif not self.capacitive:
            for b in self._vertical_at(t, v):
                g[b] = math.inf
        G = sum(g)
        # chain rule through the first state: di/dx0 = g0; dx0/dt = k0 × (coil voltage)
        g0, k0 = self.state_gain(float(self.coil_current(y[0])))
        if self.mech:
            m = self.motor
            jm[0, self.iw] = -k0 * m.back_emf_constant
            jm[self.iw, 0] = m.back_emf_constant * g0 / m.inertia
            jm[self.iw, self.iw] = -m.viscous_friction / m.inertia
        if self.capacitive:
            jm[0, 0] = -k0 * self.R * g0
            jm[0, 1] = -k0
            if self.pin is None:
                C = self.C_node
                jm[1, 0] = g0 / C
                jm[1, 1] = -G / C
                for k in self.cap_chains:
                    jm[1, self.icap[k]] = g[2 + self._pos[k]] / C
            for k in self.cap_chains:
                gk, ck = g[2 + self._pos[k]], self.chains[k].capacitance
                jm[self.icap[k], 1] = gk / ck
                jm[self.icap[k], self.icap[k]] = -gk / ck
            return jm
        # algebraic node: v follows i and the capacitor voltages. At a kink of a law (the node
        # sitting exactly at a clamp's threshold, say) the conductance at v is one-sided and may
        # be only the leakage: dv/di would then be ~1e12 × too large and the implicit method's
        # Newton iteration, stalled by it, could accept an unconverged step. Where the node has
        # no more than leakage, the larger conductance just either side bounds dv/di instead.
        if math.isfinite(G) and G < 1e-6 * self.i0 / self.v_scale:
            d = 1e-9 * self.v_scale
            for side in (v - d, v + d):
                gs = sum(self._conductances(t, side, y))
                G = max(G, gs) if math.isfinite(gs) else G
        finite = math.isfinite(G) and G > 0
        dv_di = 1.0 / G if finite else 0.0
        dv_dcap = {k: (g[2 + self._pos[k]] / G if finite else 0.0) for k in self.cap_chains}
        jm[0, 0] = -k0 * (self.R + dv_di) * g0
        for k in self.cap_chains:
            jm[0, self.icap[k]] = -k0 * dv_dcap[k]
            gk, ck = g[2 + self._pos[k]], self.chains[k].capacitance
            jm[self.icap[k], 0] = gk * dv_di * g0 / ck
            for m in self.cap_chains:
                jm[self.icap[k], self.icap[m]] = gk * (dv_dcap[m] - (1.0 if m == k else 0.0)) / ck
        return jm

    def _conductances(self, t: float, v: float, y, currents=None) -> list[float]:
        """Small-signal conductance [S] of each branch at node voltage v: channel (with the
        leakage), off-state, then each active chain (``currents``: the branches' currents there,
        from :meth:`currents_at`, so that a chain is not solved again)."""
        sw = self.switch
        g_ch = self.g_leak
        if self.conducting or (self._in_fall(t) and sw.on_state.current_at(v) < self._limit(t)):
            g_ch += sw.on_state.slope_at(v)
        g = [g_ch, sw.off_state.slope_at(v)]
        for j, k in enumerate(self.active_chains):
            ch = self.chains[k]
            g.append(ch.conductance_at(v - self.Vs * ch.reference, y[self.icap[k]] if k in self.icap else 0.0,
                                       None if currents is None else currents[2 + j]))
        return g

    def capacitor_energy(self, v, y) -> float:
        """Energy [J] in every capacitor at node voltage v and state y."""
        w = 0.5 * self.C_gnd * v * v + 0.5 * self.C_plus * (self.Vs - v) ** 2
        for k in self.cap_chains:
            w = w + 0.5 * self.chains[k].capacitance * y[self.icap[k]] ** 2
        return w

    def final_capacitor_voltages(self) -> tuple[float, dict[int, float]]:
        """Node and snubber-capacitor voltages [V] once everything has settled (switch off);
        a spinning motor keeps its back-EMF on the node."""
        v_fin = self.Vs - (self.k_emf * self.on_speed() if self.motor else 0.0)
        vcaps = {}
        for k in self.cap_chains:
            ch = self.chains[k]
            vcaps[k] = v_fin - self.Vs * ch.reference
        return v_fin, vcaps


def _cap_only(clamp) -> bool:
    return all(el.type == "capacitor" for el in clamp.elements)


def _check_chain(case: Case, ch: Chain) -> None:
    if ch.capacitance is None or ch.capacitor_only:
        return
    p = ch.pieces
    if p is not None and (p.r_fwd <= 0 or (math.isfinite(p.v_rev) and p.r_rev <= 0)):
        raise CaseError("a capacitor in series with elements of zero resistance has no defined current "
                        "(expected a resistor or a series_resistance in this chain)",
                        source=case.source, key=ch.clamp.path or ch.name)
