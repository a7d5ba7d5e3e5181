"""A switch node with no capacitance that *floats*: its coil current follows current-limited
branches and the coil sets its voltage.

Without node capacitance the node voltage is solved from the node's current balance
i = Σ branch currents(v). Where nothing but current-limited branches conducts — the channel
during its current fall (a current ramp whatever its voltage), a saturated reverse Shockley
diode (−I_s whatever its voltage), the leakage — the balance's slope in v is almost zero and
solving it for v loses every digit: one rounding unit of i moves v by 1/(slope). There the
coil current follows the limited branches and the node voltage is the coil's:
v = V_s − R·i − (back-EMF) − L·di/dt (the limit of the balance as the slope → 0; C. K.
Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 6, v = L di/dt).
The engine (:mod:`kickback.engine.detailed`) enters this mode by events and leaves it when
the balance at the forced voltage is off by more than ``FLOAT_RESIDUAL``·i0.
"""

from __future__ import annotations

import math

import numpy as np

#: the pin value of a node with no capacitance that *floats* (see :meth:`Circuit.forced_voltage`)
FLOAT = (math.nan, 0, 0)
#: a node with no capacitance floats where the branches' total conductance is below this
#: [S, relative to i0/v_scale]: one rounding unit of the coil current would move an algebraic
#: node voltage by more than ~1e-9 of v_scale
FLOAT_CONDUCTANCE = 1e-7
#: [relative to i0] a floating node's current balance may be off by this before it lands
FLOAT_RESIDUAL = 1e-8
#: the event that starts the floating mode fires where the conductance at the algebraic node
#: voltage has fallen to this fraction of ``FLOAT_CONDUCTANCE``: :meth:`FloatingNode.can_float`
#: checks the limit at the forced voltage, a little off the algebraic one, and an event at the
#: limit itself could be refused there — leaving the node algebraic below the limit, where one
#: step tolerance of the coil current moves the node voltage by volts and the solver stalls
FLOAT_ENTRY = 0.5


class FloatingNode:
    """Mixin of :class:`kickback.circuit.Circuit`: the floating-node mode (``pin is FLOAT``)."""

    @property
    def floating(self) -> bool:
        """The node has no capacitance and floats: nothing but current-limited branches (a
        channel during its current fall, a saturated reverse diode, the leakage) takes the
        coil current, so the coil current follows them and the coil sets the node voltage."""
        return self.pin is FLOAT

    def forced_slope(self, t: float) -> float:
        """[A/s] rate of the current-limited branches' current: the channel's fall, else 0."""
        if not self.conducting and self._in_fall(t):
            return -self.i_on / self.switch.fall_time
        return 0.0

    def forced_voltage(self, t: float, y: np.ndarray) -> float:
        """[V] node voltage of a floating node: the coil's current follows the limited
        branches, so v = V_s − R·i − (back-EMF) − L·di/dt with di/dt their current's rate.

        This is the limit of the node balance i = i_limited + h(v) as the other branches'
        conductance h'(v) → 0, where solving the balance for v loses every digit (one rounding
        unit of i moves v by 1/h'); see DEVELOPERS.md ("How the engine works")."""
        i = float(self.coil_current(y[0]))
        g0, k0 = self.state_gain(i)
        emf = self.k_emf * self.speed_of(y) if self.motor else 0.0
        return self.Vs - self.R * i - emf - self.forced_slope(t) / (g0 * k0)

    def node_conductance(self, t: float, v: float, y: np.ndarray) -> float:
        """[S] total small-signal conductance of the node's branches at v (inf on a vertical law)."""
        g = self._conductances(t, v, y)
        if not self.capacitive:
            for b in self._vertical_at(t, v):
                g[b] = math.inf
        return float(sum(g))

    def float_residual(self, t: float, y: np.ndarray) -> float:
        """[A] the node balance at the floating voltage: branch currents less the coil current,
        clipped to ±i0 (a vertical law past its voltage counts as i0)."""
        v = self.forced_voltage(t, y)
        vals = self.currents_at(t, v, y)
        r = sum(vals) - float(self.coil_current(y[0]))
        if not math.isfinite(r):
            r = -self.i0 if r == -math.inf else self.i0
        return max(-self.i0, min(self.i0, r))

    def can_float(self, t: float, y: np.ndarray) -> bool:
        """The node may float at (t, y): its balance holds at the forced voltage to within
        half of ``FLOAT_RESIDUAL`` and the branches' conductance there is below the limit."""
        if self.capacitive or self.conducting:
            return False
        if abs(float(self.coil_current(y[0]))) < 1e-6 * self.i0:
            # one rounding unit of so small a current moves the node by < 1e-10 of v_scale even
            # on the leakage alone: the node balance is solved as usual, down to the zero event
            return False
        v = self.forced_voltage(t, y)
        if abs(self.float_residual(t, y)) > 0.5 * FLOAT_RESIDUAL * self.i0:
            return False
        return self.node_conductance(t, v, y) < FLOAT_CONDUCTANCE * self.i0 / self.v_scale

    def _floating_jacobian(self, t, v, y, g, jm):
        """Jacobian of a floating node: the coil current follows its forced rate, the node
        voltage V_s − R·i − … moves with the coil current by −R (per unit of the first state)."""
        g0, k0 = self.state_gain(float(self.coil_current(y[0])))
        dv_dx0 = -self.R * g0
        if self.mech:
            m = self.motor
            jm[self.iw, 0] = m.back_emf_constant * g0 / m.inertia
            jm[self.iw, self.iw] = -m.viscous_friction / m.inertia
        for k in self.cap_chains:
            gk, ck = g[2 + self._pos[k]], self.chains[k].capacitance
            gk = gk if math.isfinite(gk) else 0.0
            jm[self.icap[k], 0] = gk * dv_dx0 / ck
            jm[self.icap[k], self.icap[k]] = -gk / ck
            if self.mech:
                jm[self.icap[k], self.iw] = -gk * self.k_emf / ck
        return jm

