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
the balance at the forced voltage is off by more than its limit, or (during a current fall)
when the other branches' conductance rises past :meth:`FloatingNode.float_limit`, where the
quasi-static coil rate s/(1 + R·G) stops being the more accurate one.
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
#: [S, relative to i0/v_scale] the largest conductance at which a node may float during a current
#: fall (see :meth:`FloatingNode.float_limit`): with R·G ≤ R·i0/v_scale·1e-2 ≤ 1e-2 the
#: quasi-static slope s/(1 + R·G) holds
FLOAT_CONDUCTANCE_MAX = 1e-2
#: the coil current of an algebraic node is off its exact value by this fraction of the solver's
#: tolerance rtol·|i| + atol: measured 2e-2 (a 20 V varistor across a 24 V, 10 µH, 5 kΩ coil
#: during a 1 µs fall, tests/test_detailed_float_fall.py); a Radau step's error estimate bounds
#: the error well below its tolerance where the solution is smooth (E. Hairer and G. Wanner,
#: Solving Ordinary Differential Equations II, §IV.8, from memory)
ALGEBRAIC_ERROR = 1e-2
#: [relative to i0] a floating node's current balance may be off by this before it lands
FLOAT_RESIDUAL = 1e-8
#: the event that starts the floating mode fires where the conductance at the algebraic node
#: voltage has fallen to this fraction of :meth:`FloatingNode.float_limit`;
#: :meth:`FloatingNode.can_float` checks twice the limit at the forced voltage, a little off the
#: algebraic one (an event at the checked limit itself could be refused there, leaving the node
#: algebraic below the limit, where one step tolerance of the coil current moves the node
#: voltage by volts and the solver stalls)
FLOAT_ENTRY = 0.5
#: a floating node lands where its conductance rises above this multiple of the limit
FLOAT_LANDING = 4.0
#: a conductance that falls below this fraction of itself between the quasi-static and the
#: forced voltage marks a chain's conduction edge between them (:meth:`FloatingNode.float_rate`)
EDGE_JUMP = 1e-3
#: geometric points of :meth:`FloatingNode.layer_time` along the node's path
LAYER_POINTS = 40


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
        return self.Vs - self.R * i - emf - self.float_rate(t, y) / (g0 * k0)

    def float_rate(self, t: float, y: np.ndarray) -> float:
        """[A/s] rate of a floating node's coil current: s/(1 + R·G), s the limited branches'
        rate and G the other branches' conductance at the node.

        The node balance i = i_limited(t) + h(v), differentiated with v = V_s − R·i − L·di/dt,
        gives di/dt·(1 + R·G) = s − G·L·d²i/dt²; the last term (the quasi-static error) is
        dropped. With s alone the balance would drift by R·G·s per second and the floating
        voltage would have to land as soon as G·R·s·Δt reached the residual limit."""
        s = self.forced_slope(t)
        if not s:
            return 0.0
        G, _, g1 = self._rate_conductances(t, y)
        if g1 < EDGE_JUMP * G:
            # the rate read past a chain's conduction edge would set the node below it, where
            # the chain blocks (:meth:`edge_margin`): the node is at the edge, where the chain
            # does not conduct yet; the edge event lands it (within the event's time tolerance)
            return s
        return s / (1.0 + self.R * G) if math.isfinite(G) else s

    def _rate_conductances(self, t: float, y: np.ndarray) -> tuple[float, float, float]:
        """(G_q [S], v_1 [V], G_1 [S]): the conductance at :meth:`quasi_static_voltage`, the
        forced voltage its rate s/(1 + R·G_q) sets, and the conductance there (G_q where the
        rate moves the node by less than 1e-9 of L·|s|: no edge can matter)."""
        vq = self.quasi_static_voltage(t, y)
        G = self.node_conductance(t, vq, y)
        if not (math.isfinite(G) and self.R * G > 1e-9):
            return G, vq, G
        g0, k0 = self.state_gain(float(self.coil_current(y[0])))
        s = self.forced_slope(t)
        v1 = vq + s / (g0 * k0) * (1.0 - 1.0 / (1.0 + self.R * G))
        return G, v1, self.node_conductance(t, v1, y)

    def quasi_static_voltage(self, t: float, y: np.ndarray) -> float:
        """[V] the node voltage with the coil current following the limited branches' rate s
        itself, V_s − R·i − (back-EMF) − L·s: where :meth:`float_rate` reads the conductance."""
        i = float(self.coil_current(y[0]))
        g0, k0 = self.state_gain(i)
        emf = self.k_emf * self.speed_of(y) if self.motor else 0.0
        return self.Vs - self.R * i - emf - self.forced_slope(t) / (g0 * k0)

    def edge_margin(self, t: float, y: np.ndarray, di: float) -> float:
        """During a current fall, > 0 where a chain's conduction edge lies between the forced
        voltage and :meth:`quasi_static_voltage`: the conductance at the latter is at least
        ``FLOAT_LANDING`` × :meth:`float_limit` while at the forced voltage it is below the
        limit (each side as a normalised difference; −1 outside a fall).

        There the floating mode contradicts itself: its rate s/(1 + R·G), with G read above
        the edge (a diode + resistor chain conducting), sets the forced voltage below it,
        where the chain blocks and the balance still holds, so that the node floated on with
        the chain's current missing; and landed there, the node voltage solved from the
        balance sat in the blocking band, where its conductance is the leakage's: the
        Jacobian's dv/di of ~1e13 Ω froze the coil current for the rest of the fall (peaks off
        by up to 0.4 % at any tolerance, tests/test_detailed_float_pwl.py). The node is then set onto
        the edge's conducting side instead (:meth:`PhaseRunner.onto_edge`). The forced voltage
        is the one the rate read at the quasi-static voltage sets (:meth:`_rate_conductances`)."""
        if not self.forced_slope(t):
            return -1.0
        gq, v, gf = self._rate_conductances(t, y)
        lim = self.float_limit(t, v, y, di)
        if not (math.isfinite(gq) and math.isfinite(gf)):
            return -1.0  # a vertical law: the balance's residual lands the node (a pin)
        a = (gq - FLOAT_LANDING * lim) / (gq + FLOAT_LANDING * lim)
        return min(a, (lim - gf) / (lim + gf))

    def float_limit(self, t: float, v: float, y: np.ndarray, di: float) -> float:
        """[S] node conductance below which the floating voltage is the more accurate one.

        Solved from the balance (the algebraic mode), the node voltage is off by δi/G, δi [A]
        the coil current's error: ``ALGEBRAIC_ERROR`` × ``di``, the solver's tolerance on it.
        Floating, it is off by the dropped L·G·L·d²i/dt² ≈ (L·s)²·κ·(R·G)², κ = |dG/dv|/G
        [1/V] (d²i/dt² from
        differentiating s/(1 + R·G) with dv/dt ≈ −R·s). The two are equal at
        G* = (δi/((L·s)²·κ·R²))^(1/3); G* is kept within ``FLOAT_CONDUCTANCE`` and
        ``FLOAT_CONDUCTANCE_MAX`` (relative to i0/v_scale). Without a current fall (s = 0) the
        fixed lower limit holds."""
        unit = self.i0 / self.v_scale
        lo, hi = FLOAT_CONDUCTANCE * unit, FLOAT_CONDUCTANCE_MAX * unit
        s = self.forced_slope(t)
        if not s or not math.isfinite(v):
            return lo
        d = 1e-6 * self.v_scale
        ga, gb = self.node_conductance(t, v - d, y), self.node_conductance(t, v + d, y)
        if not (math.isfinite(ga) and math.isfinite(gb) and ga > 0 and gb > 0):
            return lo
        kappa = abs(math.log(gb / ga)) / (2 * d)
        g0, k0 = self.state_gain(float(self.coil_current(y[0])))
        a = (s / (g0 * k0)) ** 2 * kappa * self.R ** 2
        if a <= 0:
            return hi
        return min(hi, max(lo, (ALGEBRAIC_ERROR * di / a) ** (1.0 / 3.0)))

    def layer_time(self, t: float, y: np.ndarray, v_from: float, v_to: float, u_min: float) -> float:
        """[s] time an algebraic node takes to move from ``v_from`` to within ``u_min`` [V] of
        the floating voltage ``v_to`` (the initial layer a floating entry would skip).

        With the coil current's rate set by the limited branches, the node balance gives
        G(v)·dv/dt = (v_to − v)·(1 + R·G)/L (the test module tests/test_detailed_float_fall.py
        writes the same equation), so the passage takes ∫ τ(v) d ln|v_to − v|,
        τ = L·G/(1 + R·G) the local time constant, read along the open path: at ``v_from``
        itself the node may sit on a kink whose other side is vertical or steep (an ideal
        switch's on-state at 0 V, a clamp chain's conduction edge), a conductance the node
        leaves at once. Trapezoids in ln u, u = |v_to − v|, on ``LAYER_POINTS`` geometric points
        and 9 more within 1e-9…1e-1 of the path's start; inf where a vertical law lies on it."""
        u_max = abs(v_to - v_from)
        if not u_max > u_min:
            return 0.0
        g0, k0 = self.state_gain(float(self.coil_current(y[0])))
        near = u_max * (1.0 - np.logspace(-9.0, -1.0, 9))
        u = np.unique(np.concatenate([np.geomspace(u_min, near[-1], LAYER_POINTS), near]))
        side = 1.0 if v_from > v_to else -1.0
        tau = np.empty(u.size)
        for n, x in enumerate(u):
            G = self.node_conductance(t, v_to + side * x, y)
            if not math.isfinite(G):
                return math.inf
            tau[n] = G / (g0 * k0 * (1.0 + self.R * G))
        w = np.diff(np.log(u))
        return float(np.sum(0.5 * (tau[1:] + tau[:-1]) * w))

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

    def can_float(self, t: float, y: np.ndarray, di: float = 0.0) -> bool:
        """The node may float at (t, y): its balance holds at the forced voltage to within half
        of ``FLOAT_RESIDUAL`` (or twice ``di``, the solver's tolerance on the coil current [A]:
        the balance of an algebraic node is no better) and the branches' conductance there is
        below twice :meth:`float_limit` during a current fall (the entry event fires at half of
        it), below ``FLOAT_CONDUCTANCE`` outside."""
        if self.capacitive or self.conducting:
            return False
        if abs(float(self.coil_current(y[0]))) < 1e-6 * self.i0:
            # one rounding unit of so small a current moves the node by < 1e-10 of v_scale even
            # on the leakage alone: the node balance is solved as usual, down to the zero event
            return False
        v = self.forced_voltage(t, y)
        if abs(self.float_residual(t, y)) > max(0.5 * FLOAT_RESIDUAL * self.i0, 2.0 * di):
            return False
        if self.forced_slope(t) and self.edge_margin(t, y, di) > 0:
            return False
        g_lim = 2.0 * self.float_limit(t, v, y, di) if self.forced_slope(t) else \
            FLOAT_CONDUCTANCE * self.i0 / self.v_scale
        return self.node_conductance(t, v, y) < g_lim

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

