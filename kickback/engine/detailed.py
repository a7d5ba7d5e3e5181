"""The detailed engine: stiff implicit integration (Radau IIA, order 5) of the full circuit.

The run is split at the end of the current fall (a short, finely stepped edge phase), then
integrates the decay until the coil current first reaches zero, then — when capacitances can
still ring — until the coil current is below 0.1 % of the start and the energy still
oscillating in the capacitors is below 0.1 % of the stored energy, or until a time bound
derived from L/R (reported). Energies are integrated as states.

References
----------
E. Hairer and G. Wanner, Solving Ordinary Differential Equations II, 2nd ed., Springer 1996
(Radau IIA); scipy.integrate.solve_ivp(method="Radau").
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field

import numpy as np
from scipy.integrate import OdeSolution, Radau, solve_ivp
from scipy.linalg import lapack

from kickback.circuit import FLOAT, FLOAT_ENTRY, FLOAT_LANDING, FLOAT_RESIDUAL, Circuit
from kickback.conventions import RING_END_FRACTION, ZERO_FRACTION
from kickback.engine.radau_check import CheckedNewton
from kickback.engine.ringsteps import stepped_ring
from kickback.engine.step_events import bracketed
from kickback.engine.steptol import tolerances
from kickback.errors import SolverError

#: a snubber capacitor is held (its charge left in it at the run's end) when the energy its chain
#: could move over a span as long as the run so far is below this fraction of the rest level
HELD_FRACTION = 0.1
MAX_RHS_CALLS = 400_000
#: default relative tolerance: figures within ~1e-6 of a tight solve on the demo cases (benchmarks/bench.py)
DEFAULT_RTOL = 1e-5
#: a node with capacitance is pinned at a vertical law this far (relative) before its voltage
PIN_AHEAD = 1e-7
#: a node may float across a jump of its voltage that is an initial layer shorter than this
#: fraction of the fall (see :meth:`PhaseRunner.can_float`)
FLOAT_LAYER = 1e-5
#: smallest factor by which a steep law tightens the node voltage's relative tolerance
STEEP_FLOOR = 1e-6
#: smallest relative tolerance a steep law sets on the node voltage
STEEP_RTOL_FLOOR = 1e-12
#: the edge phase takes at least this many steps over the fall time
EDGE_STEPS = 20

#: the ring's relative tolerance, as a share of the run's: stepped over tens to hundreds of
#: periods, the ring's phase drifts by ~rtol per period, and the run ends at the coil current's
#: zero after the rest level (a swing late at the plain rtol: energies 1e-3–2.3e-3 off on
#: wide-range cases 1988, 3386, 3912, 6982, 9714); 0.1 brings them within 1.2e-6, for up to 77 %
#: more evaluations on ring-heavy cases (0.3: 3386 still 8.7e-5 off; tests/test_ring_tolerance.py)
RING_RTOL_FACTOR = 0.1

#: the energy states' relative tolerance, as a share of the run's (the turn-off transient's edge
#: and decay; see :func:`relative_tolerances`)
ENERGY_RTOL_FACTOR = 0.1
#: a law whose knee is this steep (r·i0/|V_k| below it) ends a step of the edge and decay
#: phases where the node crosses the knee (see :func:`steep_knees`)
KNEE_STEEP = 1e-4
#: after a knee's event the node must come back this far (relative) past it to fire it again
KNEE_HYSTERESIS = 1e-9

#: the largest share of i0 by which landing onto a chain's edge may move the coil current (a
#: drift correction: the coil current's error over a long float is ~rtol·i0)
EDGE_DRIFT = 1e-3


class _Radau(CheckedNewton, Radau):
    """scipy's Radau IIA with the dense LU factorisation called straight from LAPACK.

    The same algorithm and the same arithmetic (getrf/getrs are what ``lu_factor``/``lu_solve``
    call); it skips the general-purpose wrappers, which cost a quarter of the run time on
    systems of a few states.
    """

    def __init__(self, *args, rtol_vector=None, **kwargs):
        super().__init__(*args, **kwargs)
        if rtol_vector is not None:
            # per-state relative tolerance (scipy's Radau takes a scalar; its error scale
            # atol + rtol·|y| is elementwise, so a vector set here is used as is)
            self.rtol = np.maximum(rtol_vector, 100 * np.finfo(float).eps)
        if not hasattr(self.J, "toarray"):
            self.lu = self._lu
            self.solve_lu = self._solve_lu

    def _lu(self, a):
        self.nlu += 1
        getrf = lapack.zgetrf if np.iscomplexobj(a) else lapack.dgetrf
        lu, piv, info = getrf(a, overwrite_a=True)
        if info < 0:
            raise ValueError(f"LU factorisation failed (argument {-info})")
        return lu, piv

    @staticmethod
    def _solve_lu(factors, b):
        lu, piv = factors
        getrs = lapack.zgetrs if np.iscomplexobj(lu) else lapack.dgetrs
        x, info = getrs(lu, piv, b)
        if info != 0:
            raise ValueError("LU solve failed")
        return x


@dataclass(frozen=True)
class Phase:
    name: str
    t0: float
    t1: float
    sol: object  # scipy OdeSolution
    t_steps: np.ndarray
    pin: tuple | None = None  # node pinned at a vertical law: (voltage, branch, side)
    conducting: bool = False  # the switch was on (repetitive switching)
    t_turnoff: float = 0.0  # [s] when the switch was told to turn off


@dataclass
class Waveforms:
    """Sampled turn-off waveforms and the solver's account of the run.

    Attributes
    ----------
    t : ndarray — [s] sample times (solver steps plus interpolated points)
    y : ndarray — state vector at each sample, shape (n_states, n)
    v : ndarray — [V] switch-node voltage
    i_channel, i_offstate : ndarray — [A] switch channel and avalanche/body-diode currents
    i_chains : list of ndarray — [A] each active clamp chain's current
    events : dict — first times [s] of "10%", "1%", "zero" (None when not reached)
    peak_times : list of float — [s] local maxima of v found as events
    bound_hit : bool — the run stopped at its time bound
    """

    circuit: Circuit
    t: np.ndarray
    y: np.ndarray
    v: np.ndarray
    i_channel: np.ndarray
    i_offstate: np.ndarray
    i_chains: list
    events: dict
    peak_times: list
    bound_hit: bool
    phases: list = field(default_factory=list)
    rtol: float = 1e-5
    n_rhs: int = 0
    engine: str = "detailed"

    @property
    def i_coil(self) -> np.ndarray:
        """[A] coil current at each sample (the first state, or from the flux linkage)."""
        return np.asarray(self.circuit.coil_current(self.y[0]), dtype=float)

    @property
    def y_end(self) -> np.ndarray:
        return self.y[:, -1]

    def state(self, t: float) -> np.ndarray:
        """Interpolated state at time t [s] (dense output of the phase holding t)."""
        for ph in self.phases:
            if ph.t0 <= t <= ph.t1:
                return ph.sol(t)
        return self.y[:, -1] if t > self.t[-1] else self.y[:, 0]


def relative_tolerances(c: Circuit, rtol: float) -> np.ndarray:
    """Relative tolerance per state: the energies at ``ENERGY_RTOL_FACTOR`` × ``rtol``, the node
    and snubber voltages tightened for steep laws, the rest at ``rtol``.

    A steep law (incremental resistance r, knee at V_k) turns an error δ of the node voltage
    into a current error δ/r; with δ = rtol·|V_k| that is rtol·|V_k|/r, which for an avalanche
    of 10 mΩ at 400 V is 4·10⁴ times rtol·i0 (the avalanche current lost at the end of its
    pulse). The node voltage and the snubber capacitors' voltages are therefore held to
    rtol·min(1, r·i0/|V_k|) over every law with a finite knee and r > 0 (vertical laws are
    pinned instead), the factor floored at ``STEEP_FLOOR`` and the tolerance at
    ``STEEP_RTOL_FLOOR``.
    """
    out = np.full(c.n_states, rtol)
    # the energies are quadratures (they feed nothing back): each step's error, rtol of the
    # energy booked so far, adds up over a long hold (a Zener pinning the node for 0.3 s: the
    # clamp energy 3.3e-4 high and the ledger 2.7e-4 off, wide-range cases 5450 and 3695)
    out[c.ie:] = rtol * ENERGY_RTOL_FACTOR
    if not c.capacitive:
        return out
    worst = 1.0

    def steep(v_k, r):
        nonlocal worst
        if math.isfinite(v_k) and abs(v_k) > 0 and r > c.r_min:
            worst = min(worst, r * c.i0 / abs(v_k))

    off = c.switch.off_state
    steep(off.v_fwd, off.r_fwd)
    steep(off.v_rev, off.r_rev)
    for k in c.active_chains:
        p = c.chains[k].pieces
        if p is not None:
            ref = c.Vs * c.chains[k].reference
            steep(ref + p.v_fwd, p.r_fwd)
            steep(ref + p.v_rev, p.r_rev)
    if worst >= 1.0:
        return out
    # a relative tolerance near the rounding level stalls the step size control (a node of 400 V
    # at 1e-14): never below STEEP_RTOL_FLOOR, unless rtol itself is
    tight = max(rtol * max(worst, STEEP_FLOOR), min(rtol, STEEP_RTOL_FLOOR))
    out[1] = tight
    for idx in c.icap.values():
        out[idx] = tight
    return out


def steep_knees(c: Circuit) -> list[float]:
    """Node voltages [V] of the steep knees of the switch's off-state law and of the chains
    without a capacitor (r > r_min and r·i0/|V_k| < :data:`KNEE_STEEP`).

    Radau's error estimate is filtered through (I − hγJ)⁻¹, which on a node held by a law of
    milliohms (a time constant r·C of 1e-13 s) shrinks the estimate of that state to nothing: a
    step that straddles the knee, where the node leaves the law and the node's motion turns
    from held to free, passes with an error the estimate does not show. At the plain rtol the
    node left a 1 mΩ diode + Zener chain 3 ns late during the fall and the ring that followed
    was off by 4e-4 in its timing (wide-range cases 8247 and 9338). A step that ends at the knee
    has no kink inside it.
    """
    if not c.capacitive:
        return []
    out = []

    def add(v_k, r):
        if math.isfinite(v_k) and abs(v_k) > 0 and r > c.r_min and r * c.i0 / abs(v_k) < KNEE_STEEP:
            out.append(float(v_k))

    off = c.switch.off_state
    add(off.v_fwd, off.r_fwd)
    add(off.v_rev, off.r_rev)
    for k in c.active_chains:
        p = c.chains[k].pieces
        if p is not None and c.chains[k].capacitance is None:
            ref = c.Vs * c.chains[k].reference
            add(ref + p.v_fwd, p.r_fwd)
            add(ref + p.v_rev, p.r_rev)
    return sorted(set(out))


class PhaseRunner:
    """Integrates a circuit phase by phase with Radau, switching the node's pin mode at the
    vertical laws' events; records the phases (dense solutions) and the node's voltage peaks."""

    def __init__(self, c: Circuit, rtol: float, y0: np.ndarray, t0: float = 0.0, steep: bool = False):
        self.c = c
        self.rtol = rtol
        self.atol = tolerances(c, rtol)
        #: per-state relative tolerance (``steep``: the edge and decay of the turn-off transient;
        #: the cycles of a periodic steady state and the ring keep the plain rtol)
        self.rtol_vector = relative_tolerances(c, rtol) if steep else None
        #: steep knees that end a step in the edge and decay phases (the turn-off transient only)
        self.knees = steep_knees(c) if steep else []
        #: (knee voltage, direction) of the knee event that fired last (it may fire again only
        #: coming back, past its hysteresis)
        self.knee_last: tuple[float, int] | None = None
        self.phase_name = ""
        self.scale = np.maximum(self.atol / rtol, 1e-300)
        self.calls = 0
        #: level of the conductance event that starts the floating mode, relative to the limit
        #: (:meth:`Circuit.float_limit`)
        self.float_entry = FLOAT_ENTRY
        #: [A] the balance residual at which the present floating phase lands
        self.land_residual = 0.0
        #: [s] the entry event is held off before this time (an initial layer passing)
        self.float_gate = -math.inf
        #: [s] the entry event is held off before this time, wherever the node is
        self.float_hold = -math.inf
        #: [s] time constant of the initial layer that refused the last entry (0: none)
        self.layer = 0.0
        #: the last entry was refused at a conduction edge (:meth:`Circuit.edge_margin`)
        self.edge = False
        self.t = t0
        self.y = np.array(y0, dtype=float)
        self.phases: list[Phase] = []
        self.peaks: list[float] = []
        c.pin = None

        def ev_peak(t, y):
            return c.coil_current(y[0]) - sum(c.currents_at(t, float(y[1]), y))
        ev_peak.direction = -1
        ev_peak.spec = ("balance",)  # events as data for kstep (kickback/engine/kstep.py)
        self.ev_peak = ev_peak

    def rhs(self, t, y):
        self.calls += 1
        if self.calls > MAX_RHS_CALLS:
            raise SolverError(f"the solver did not finish within {MAX_RHS_CALLS} evaluations "
                              f"(reached t = {t:.3g} s); the case is too stiff or ill-posed")
        return self.c.rhs(t, y)

    def jac(self, t, y):
        # analytic dynamic block; the energy rows (powers) by forward differences
        c = self.c
        n_dyn = c.ie
        jm = c.jacobian(t, y)
        f0 = self.rhs(t, y)
        for j in range(n_dyn):
            h = 1e-8 * max(abs(y[j]), self.scale[j])
            yp = y.copy()
            yp[j] += h
            jm[n_dyn:, j] = (self.rhs(t, yp)[n_dyn:] - f0[n_dyn:]) / h
        return jm

    def pin_current(self, pin) -> float:
        """[A] current the vertical law ``pin`` would take with the node held at its voltage,
        signed positive in the law's conducting direction."""
        c = self.c
        vals = c.currents_at(self.t, pin[0], self.y)
        vals[pin[1]] = 0.0
        return pin[2] * (float(c.coil_current(self.y[0])) - sum(vals))

    def unpin(self, pin) -> None:
        """Release the node from the vertical law ``pin``: the node is set just off the law's
        voltage (by 2·PIN_AHEAD relative, on its non-conducting side, below the entry event's
        level), so that the entry event cannot fire again at once on a node that merely sits at
        the threshold."""
        c = self.c
        c.pin = None
        self.y[1] = pin[0] - pin[2] * 2 * PIN_AHEAD * max(1.0, abs(pin[0]))

    def coil_tolerance(self, y) -> float:
        """[A] the solver's tolerance on the coil current at state ``y``, rtol·|i| + atol: how
        far an algebraic node's coil current may sit off its exact value (its balance, and the
        voltage solved from it, is no better)."""
        c = self.c
        i = float(c.coil_current(y[0]))
        return self.rtol * abs(i) + self.atol[0] * c.state_gain(i)[0]

    def float_tolerance(self, t, y) -> float:
        """[A] :meth:`coil_tolerance` during a current fall (where the floating mode's limits
        follow from it, :meth:`Circuit.float_limit`); 0 outside (the fixed limits hold)."""
        return self.coil_tolerance(y) if self.c.forced_slope(t) else 0.0

    def can_float(self) -> bool:
        """The algebraic node may float here (:meth:`Circuit.can_float`), and its voltage does
        not jump on entry: by at most 10·rtol·v_scale, unless the jump is an initial layer far
        shorter than the fall (the node's passage along it, :meth:`Circuit.layer_time`, below
        ``FLOAT_LAYER`` × t_f; outside a fall, × L·i0/v_scale). Entered inside a longer layer
        (the node rising after t = 0 through a clamp's conductance), the floating voltage would
        be ahead of the node by volts. The passage is read along the path, not at the algebraic
        voltage alone: that may sit on a kink whose far side is vertical or steep (an ideal
        switch's on-state at 0 V; a diode + Zener chain's conduction edge), which the node
        leaves at once (read there, it kept the node algebraic through a fall, where its
        voltage is lost to rounding: tests/test_pin_rounding.py, tests/test_repro_detailed.py)."""
        c = self.c
        t, y = self.t, self.y
        self.layer = 0.0
        self.edge = abs(float(c.coil_current(y[0]))) >= 1e-6 * c.i0 and \
            c.edge_margin(t, y, self.float_tolerance(t, y)) > 0
        if self.edge or not c.can_float(t, y, self.float_tolerance(t, y)):
            return False
        if not c.forced_slope(t):
            return True
        v_alg = c.node_voltage(t, y)
        if abs(c.forced_voltage(t, y) - v_alg) <= 10.0 * self.rtol * c.v_scale:
            return True
        g0, k0 = c.state_gain(float(c.coil_current(y[0])))
        span = c.switch.fall_time if c._in_fall(t) else c.i0 / (g0 * k0 * c.v_scale)
        tau = c.layer_time(t, y, v_alg, c.forced_voltage(t, y), 10.0 * self.rtol * c.v_scale)
        if tau <= FLOAT_LAYER * span:
            return True
        #: [s] the layer's passage: the entry event waits for it to pass
        self.layer = tau
        return False

    def _wait_layer(self) -> None:
        """Refused inside an initial layer: the entry event is held off for 20 times its
        passage (the layer's conductance falls there so fast that the event, armed again at
        a lower level, would fire again at the same instant)."""
        if math.isfinite(self.layer):
            self.float_gate = self.t + 20.0 * self.layer

    def _float_events(self):
        """Events of a node with no capacitance: it starts to float (its conductance falls
        below the limit), or it lands (the balance at the forced voltage is off, or the
        conductance there rises so far that the dropped quasi-static term matters)."""
        c = self.c
        if c.pin is not None and c.pin is not FLOAT:
            return self._release_events()
        if c.pin is None:
            if self.no_float:
                return []
            entry = self.float_entry

            gate, hold = self.float_gate, self.float_hold
            band = 10.0 * self.rtol * c.v_scale

            def g(t, y):
                if t < hold:
                    return 1.0
                v = c.node_voltage(t, y)
                if t < gate and abs(c.forced_voltage(t, y) - v) > band:
                    # held off while the initial layer passes: until the node has come within
                    # the band :meth:`can_float` asks of its entry (the layer's passage is an
                    # estimate; waiting 20× it out kept a node of 1e-13 S algebraic for 2.3 ns
                    # of 1e-13 s steps, wide-range case 7489)
                    return 1.0
                G = c.node_conductance(t, v, y)
                g_lim = entry * c.float_limit(t, v, y, self.float_tolerance(t, y))
                return 1.0 if not math.isfinite(G) else (G - g_lim) / (G + g_lim)
            g.direction = -1
            g.terminal = True
            g.pin = FLOAT
            return [g]
        eps = self.land_residual = max(FLOAT_RESIDUAL * c.i0, 4.0 * self.float_tolerance(self.t, self.y))
        out = []
        for sign in (1, -1):
            def g(t, y, sign=sign):
                return sign * c.float_residual(t, y) - eps
            g.direction = 1
            g.terminal = True
            g.pin = None
            g.drift = True
            out.append(g)

        def g_rise(t, y):
            v = c.forced_voltage(t, y)
            G = c.node_conductance(t, v, y)
            g_lim = FLOAT_LANDING * c.float_limit(t, v, y, self.float_tolerance(t, y))
            return 1.0 if not math.isfinite(G) else (G - g_lim) / (G + g_lim)
        g_rise.direction = 1
        g_rise.terminal = True
        g_rise.pin = None
        g_rise.rise = True

        def g_edge(t, y):
            return c.edge_margin(t, y, self.float_tolerance(t, y))
        g_edge.direction = 1
        g_edge.terminal = True
        g_edge.pin = None
        g_edge.edge = True
        if c.forced_slope(self.t):
            out += [g_rise, g_edge]
        return out

    def onto_edge(self) -> None:
        """Set the coil current onto the conducting side of the edge the node has reached
        (:meth:`Circuit.edge_margin`): onto the balance at the forced voltage (below the edge,
        where the chain blocks: the limited branches' current and the leakage's), plus
        ``FLOAT_RESIDUAL`` × i0 (10⁴ × the leakage's current), so that the node voltage solved
        from the balance is the edge's plus its chain's resistance × that current, not a point
        of the blocking band (where the coil current, off the balance by its drift, had put it).
        A move beyond ``EDGE_DRIFT`` × i0 is not a drift: the coil current is left as it is."""
        c = self.c
        if c.pin is None:
            # an algebraic node: the balance holds at its own voltage, which lies in the band
            # below the edge or past it. The balance at the voltage the rate sets may lie below
            # that band, where another chain conducts (a leaky Shockley diode's −I_s across the
            # coil: wide-range case 7426, where each refused entry took I_s = 2.1e-5 A out of the
            # coil current, 11 times in 7 ns, ledger residual 3.9e-3)
            self.y[0] = c.coil_state(float(c.coil_current(self.y[0])) + FLOAT_RESIDUAL * c.i0)
            return
        _, v_below, _ = c._rate_conductances(self.t, self.y)
        i = sum(c.currents_at(self.t, v_below, self.y)) + FLOAT_RESIDUAL * c.i0
        # a correction of the coil current's drift only: a balance far from the coil current
        # (the forced voltage read off a law that does not hold at this instant) would take
        # the coil's energy out of the ledger (wide-range case 503: 17.8 A set to ~0 at t = 0)
        if abs(i - float(c.coil_current(self.y[0]))) <= EDGE_DRIFT * abs(c.i0):
            self.y[0] = c.coil_state(i)

    def onto_knee(self, before: np.ndarray) -> None:
        """Landed free by the conductance event (:data:`FLOAT_LANDING`) at a piecewise-linear
        law's knee: the event's root lies within rounding of the jump in conductance, on
        either side of it. On the blocking side, the coil current projected onto the balance
        at the floating voltage leaves the algebraic node on the leakage alone, where one
        rounding unit of the current moves it by volts and the Jacobian's dv/di of ~1e13 Ω
        froze the coil current for a whole step (the first Radau step of the phase, taken with
        that Jacobian fresh, is not re-checked: wide-range case 2041, an avalanche of 2 mΩ
        reached during the fall, ledger residual −3.5 %). The coil current is set past the
        balance at the floating voltage by ``FLOAT_RESIDUAL`` × i0 in the direction the
        floating voltage moved (``before``: the state one step earlier), so the law reached
        takes that current and the node sits on its conducting side; a move beyond
        ``EDGE_DRIFT`` × i0, or one that leaves the node's conductance still below the limit
        (the node is not at a knee), is not made."""
        c = self.c
        t, y = self.t, self.y
        pin, c.pin = c.pin, None
        try:
            v = c.forced_voltage(t, y)
            v_prev = c.forced_voltage(t, before)
            di = self.float_tolerance(t, y)
            lim = c.float_limit(t, v, y, di)
            if c.node_conductance(t, c.node_voltage(t, y), y) >= lim or v == v_prev:
                return
            i_old = float(c.coil_current(y[0]))
            i = sum(c.currents_at(t, v, y)) + math.copysign(FLOAT_RESIDUAL * c.i0, v - v_prev)
            if not (math.isfinite(i) and abs(i - i_old) <= EDGE_DRIFT * abs(c.i0)):
                return
            y[0] = c.coil_state(i)
            if not c.node_conductance(t, c.node_voltage(t, y), y) >= lim:
                y[0] = c.coil_state(i_old)
        finally:
            c.pin = pin

    def _refused_float(self) -> None:
        """The conductance event fired but the node may not float here. Too small a current
        stays so (the event, at its root, would fire again at once): it is left out until the
        next mode. Otherwise (the balance at the forced voltage not yet within its limit) the
        event is armed again at half the present conductance, so that a node whose conductance
        keeps falling does float rather than stay algebraic, where its solve loses every digit."""
        c = self.c
        if abs(float(c.coil_current(self.y[0]))) < 1e-6 * c.i0:
            self.no_float = True
            return
        if self.layer:
            self._wait_layer()
            return
        v = c.node_voltage(self.t, self.y)
        G = c.node_conductance(self.t, v, self.y)
        g_lim = c.float_limit(self.t, v, self.y, self.float_tolerance(self.t, self.y))
        level = 0.5 * G / g_lim if math.isfinite(G) else self.float_entry
        self.float_entry = min(0.5 * self.float_entry, level)

    def _project(self) -> None:
        """Where a floating node lands on its own balance (its conductance has risen), set the
        coil current onto it at the floating voltage: floating, the node voltage is the trusted
        one (off by the quasi-static error only) while the coil current, integrated at its
        forced rate, drifts off the balance by up to the landing residual; solved from the
        balance with that current, the node voltage would jump by residual/G (1.8e-4 V on a
        7.35 V node in tests/test_detailed_float_fall.py). A residual past the landing limit
        (a vertical law reached) is left to :meth:`landing`."""
        c = self.c
        # at the fall's end (the phase ends there, still floating) the floating voltage is the
        # fall's own, just before it
        t = self.t if c.forced_slope(self.t) else float(np.nextafter(self.t, -math.inf))
        r = c.float_residual(t, self.y)
        if abs(r) <= self.land_residual and c.forced_slope(t):
            self.y[0] = c.coil_state(float(c.coil_current(self.y[0])) + r)

    def landing(self):
        """Where a floating node lands: on a vertical law whose voltage its forced voltage has
        reached (held there, the law taking what the others leave), else free."""
        c = self.c
        v = c.forced_voltage(self.t, self.y)
        near = [p for p in c.pin_points if abs(v - p[0]) <= 1e-6 * c.v_scale]
        for p in sorted(near, key=lambda p: abs(v - p[0])):
            if self.pin_current(p) > -FLOAT_RESIDUAL * c.i0:
                return p
        return None

    def _pin_events(self):
        c = self.c
        if not c.capacitive:
            return self._float_events()
        evs = []
        if c.pin is None and self.phase_name in ("edge", "decay"):
            for v_k in self.knees:
                direction, level = 0, v_k
                if self.knee_last is not None and self.knee_last[0] == v_k:
                    back = -self.knee_last[1]
                    direction, level = back, v_k + back * KNEE_HYSTERESIS * max(1.0, abs(v_k))

                def g_knee(t, y, level=level):
                    return y[1] - level
                g_knee.direction = direction
                g_knee.spec = ("level", 1, level)
                g_knee.terminal = True
                g_knee.pin = None
                g_knee.knee = v_k
                evs.append(g_knee)
        if c.pin is None:
            for p in c.pin_points:
                # fires PIN_AHEAD (relative) before the law's voltage: a step whose trial states
                # cross it meets a conductance 1/r_min that its Jacobian does not know, and on a
                # small node capacitance (r_min·C of attoseconds) its Newton iteration diverges
                ahead = p[0] - p[2] * PIN_AHEAD * max(1.0, abs(p[0]))

                def g(t, y, ahead=ahead):
                    return y[1] - ahead
                g.direction = p[2]
                g.spec = ("level", 1, ahead)
                g.terminal = True
                g.pin = p
                evs.append(g)
        else:
            evs = self._release_events()
        return evs

    def _release_events(self):
        """The event that ends a pin: the vertical law's current returns to zero."""
        c = self.c
        pin = c.pin

        def g(t, y):
            vals = c.currents_at(t, pin[0], y)
            vals[pin[1]] = 0.0
            return pin[2] * (float(c.coil_current(y[0])) - sum(vals))
        g.direction = -1
        g.spec = ("release",)
        g.terminal = True
        g.pin = None
        return [g]

    def _solve(self, name, t_end, events, kw):
        c = self.c
        pe = self._pin_events()
        evs = list(events) + pe + ([self.ev_peak] if c.capacitive and c.pin is None else [])
        if kw.get("first_step") is not None and 0 < t_end - self.t < 2 * kw["first_step"]:
            # a phase shorter than the step guessed from the fall time (a fast decay after a slow fall)
            kw = {**kw, "first_step": (t_end - self.t) / 2}
        if getattr(self, "kernel", None) or os.environ.get("KICKBACK_KERNEL"):  # opt-in: kickback/engine/kstep.py
            from kickback.engine.kstep import solve_phase
            sol = solve_phase(self, name, t_end, evs, kw, MAX_RHS_CALLS)
            if sol is not None:
                return sol, evs, pe
        try:
            # scipy's step-size predictor divides by the error norm, which an exactly integrated
            # step (a linear stretch) makes zero; the resulting inf is capped by its own limit
            with np.errstate(divide="ignore"):
                sol = solve_ivp(self.rhs, (self.t, t_end), self.y, method=_Radau, rtol=self.rtol, atol=self.atol,
                                jac=self.jac, dense_output=True, events=bracketed(evs), rtol_vector=self.rtol_vector,
                                fresh_rows=slice(self.c.ie, None), **kw)
        except SolverError:
            raise
        except (ValueError, ArithmeticError, FloatingPointError) as exc:
            raise SolverError(f"the solver failed in the {name} phase at t ≈ {self.t:.3g} s: {exc}") from exc
        if sol.status < 0:
            raise SolverError(f"the solver failed in the {name} phase at t = {sol.t[-1]:.3g} s: {sol.message}")
        if sol.status == 1 and len(sol.t) > 1 and self.c.pin is not None and self.c.pin is not FLOAT:
            self._step_to_event(sol, kw)
        if not np.all(np.isfinite(sol.y)):
            raise SolverError(f"the solution became non-finite in the {name} phase")
        return sol, evs, pe

    def _step_to_event(self, sol, kw) -> None:
        """A terminal event ends the phase inside a step: its state there is the step's
        continuous output (stage order 3), fitted to stages past the event, where a law held
        at its voltage carries its current on through zero and an energy's rate has a kink
        (the avalanche's at its release: 1.9e-5 of its energy, or a negative body-diode energy,
        wide-range cases 7181 and 9839). The last stretch, from the last step's start to the
        event, is integrated again in the same mode, so the event's state is a step's end.
        Done where the node is held at a law (every other event leaves the rates smooth across
        it; done there too, a [drive] case's cycles took twice the time, case 11)."""
        t_a, t_b = float(sol.t[-2]), float(sol.t[-1])
        if not t_b > t_a:
            return
        kw = {k: v for k, v in kw.items() if k != "first_step"}
        with np.errstate(divide="ignore"):
            re = solve_ivp(self.rhs, (t_a, t_b), sol.y[:, -2], method=_Radau, rtol=self.rtol, atol=self.atol,
                           jac=self.jac, dense_output=True, rtol_vector=self.rtol_vector,
                           fresh_rows=slice(self.c.ie, None), first_step=t_b - t_a, **kw)
        if re.status != 0 or not np.all(np.isfinite(re.y)):
            return  # the continuous output stands
        ts = list(sol.sol.ts[:-2]) + list(re.sol.ts)
        sol.sol = OdeSolution(ts, list(sol.sol.interpolants[:-1]) + list(re.sol.interpolants))
        sol.y[:, -1] = re.y[:, -1]

    def run(self, name, t_end, events, record=None, until_free=False, **kw):
        """Integrate to ``t_end`` or a terminal event of ``events``, switching pin modes on the way.

        ``record(event, times)`` is called for every event of ``events`` that occurred.
        ``until_free``: return also where a capacitive node leaves the vertical law it was pinned
        at (the caller may solve the rest in closed form).
        """
        c = self.c
        self.phase_name = name
        switches = 0
        landed = False
        self.no_float = False
        self.float_entry = FLOAT_ENTRY
        self.float_gate = self.float_hold = -math.inf
        while True:
            if not c.capacitive and c.pin is None and not landed:
                if self.can_float():
                    c.pin = FLOAT
                elif self.layer:
                    self._wait_layer()
                elif self.edge:
                    self.onto_edge()
            landed = False
            t_start = self.t
            sol, evs, pe = self._solve(name, t_end, events, kw)
            fired_pin = None
            for ev, times in zip(evs, sol.t_events, strict=True):
                if not len(times):
                    continue
                if ev is self.ev_peak:
                    self.peaks.extend(float(x) for x in times)
                elif ev in pe:
                    fired_pin = ev
                elif record is not None:
                    record(ev, times)
            self.phases.append(Phase(name, self.t, float(sol.t[-1]), sol.sol, sol.t, c.pin, c.conducting,
                                     c.t_turnoff))
            self.t = float(sol.t[-1])
            self.y = sol.y[:, -1].copy()
            if sol.status == 0 and c.pin is FLOAT:
                self._project()
            if sol.status == 1 and fired_pin is not None and not c.capacitive:
                # the node starts to float (when it may), lands, or leaves a vertical law
                self.no_float = False
                self.float_entry = FLOAT_ENTRY
                if c.pin is FLOAT and getattr(fired_pin, "edge", False):
                    self.onto_edge()
                    c.pin = None
                    landed = True
                elif c.pin is FLOAT:
                    self._project()
                    c.pin = self.landing()
                    # free after a residual event, and the node may float on at the projected
                    # state (not at the phase's start: no progress there): the residual was
                    # the coil current's drift from the limited branches (the integration's
                    # error over a long float), not a branch starting to conduct; landed, the
                    # node would sit algebraic where its conductance is the leakage's (the
                    # Jacobian's dv/di of ~1e13 Ω froze the coil current for the rest of the
                    # fall, tests/test_detailed_float_pwl.py) — the projection re-synced it
                    if c.pin is None and getattr(fired_pin, "drift", False) and self.t > t_start \
                            and self.can_float():
                        c.pin = FLOAT
                    if c.pin is None and getattr(fired_pin, "rise", False) and len(sol.t) > 1:
                        self.onto_knee(sol.y[:, -2])
                    landed = c.pin is not FLOAT
                elif c.pin is None:
                    c.pin = FLOAT if self.can_float() else None
                    if c.pin is None and self.edge:
                        self.onto_edge()
                    elif c.pin is None:
                        self._refused_float()
                        if self.t <= t_start:
                            # refused where the run started: the event's root lies within its
                            # time resolution (4 ulps of 1 s, scipy) of the start, where the
                            # conductance limit jumps as the fall begins; armed there again it
                            # fires at once, for ever (wide-range case 2349): held off past it
                            self.float_hold = self.t + 16.0 * np.finfo(float).eps
                else:
                    c.pin = None
                switches += 1
                if switches > 10_000:
                    raise SolverError(f"the node voltage chatters near t = {self.t:.3g} s")
                kw.pop("first_step", None)
                if self.t < t_end:
                    continue
            elif sol.status == 1 and fired_pin is not None and getattr(fired_pin, "knee", None) is not None:
                # a step ends at a steep knee (steep_knees); the integration goes on from there
                y1 = float(sol.y[1, -1])
                prev = float(sol.y[1, -2]) if sol.y.shape[1] > 1 else y1
                self.knee_last = (fired_pin.knee, 1 if y1 >= prev else -1)
                switches += 1
                if switches > 10_000:
                    raise SolverError(f"the node voltage chatters at a knee near t = {self.t:.3g} s")
                # the step goes on as long as the last one: scipy's guess for a fresh start, taken
                # at a node just entering a milliohm law, overshot the peak by 1.2e-5 (case 251)
                last_h = float(sol.t[-1] - sol.t[-2]) if len(sol.t) > 1 else 0.0
                if last_h > 0:
                    kw["first_step"] = last_h
                else:
                    kw.pop("first_step", None)
                if self.t < t_end:
                    continue
            elif sol.status == 1 and fired_pin is not None:
                if c.pin is None:
                    self.peaks.append(self.t)
                    if self.pin_current(fired_pin.pin) > 0:
                        c.pin = fired_pin.pin
                        self.y[1] = c.pin[0]
                    else:
                        # the law would have to take a current against its direction (the
                        # node only touched its voltage): it stays off, the node moves away
                        self.unpin(fired_pin.pin)
                else:
                    self.unpin(c.pin)
                    if until_free:
                        return sol
                switches += 1
                if switches > 10_000:
                    raise SolverError(f"the node voltage chatters at a clamp threshold near t = {self.t:.3g} s")
                kw.pop("first_step", None)
                if self.t < t_end:
                    continue
            return sol


def integrate(circuit: Circuit, *, rtol: float | None = None, samples_per_step: int = 3) -> Waveforms:
    """Integrate the turn-off transient of ``circuit``.

    Parameters
    ----------
    circuit : Circuit
    rtol : float — relative tolerance of every state; absolute tolerances are scaled to the
        initial current, the voltage scale and the stored energy
    samples_per_step : int — interpolated samples added inside each solver step

    Returns
    -------
    Waveforms

    Raises
    ------
    SolverError — when the solver cannot finish; the message says why.
    """
    c = circuit
    rtol = DEFAULT_RTOL if rtol is None else rtol
    i0 = c.i0
    runner = PhaseRunner(c, rtol, c.initial_state(), steep=True)
    e0 = c.coil_energy(i0) + float(c.capacitor_energy(c.on.node_voltage, c.initial_state()))
    zero = ZERO_FRACTION * i0

    def ev_frac(f):
        level = c.coil_state(f * i0)  # the first state is monotone in the coil current

        def g(t, y):
            return y[0] - level
        g.direction = -1
        g.spec = ("level", 0, level)
        return g

    ev10, ev1 = ev_frac(0.1), ev_frac(0.01)
    zero_state = c.coil_state(zero)

    def ev_zero(t, y):
        return y[0] - zero_state
    ev_zero.direction = -1
    ev_zero.spec = ("level", 0, zero_state)
    ev_zero.terminal = True

    v_fin, _ = c.final_capacitor_voltages()
    dyn_caps = [k for k in c.cap_chains if c.chains[k].band == (0.0, 0.0)]

    def dyn_energy(y, t=None):
        """Energy still moving [J]: the coil's, the node's and each snubber capacitor's above its
        rest (:meth:`~kickback.coilstate.CoilStates.ring_rest`); with the time ``t`` [s], less the
        capacitors that are *held*."""
        vf = c.ring_rest(y, v_fin)
        v = y[1] if c.capacitive else vf
        w = c.coil_energy(c.coil_current(y[0])) + 0.5 * c.C_node * (v - vf) ** 2
        for k in dyn_caps:
            target = vf - c.Vs * c.chains[k].reference
            dv = y[c.icap[k]] - target
            if t is not None and _held(k, t, y, dv):
                continue
            w += 0.5 * c.chains[k].capacitance * dv * dv
        return w

    def _held(k, t, y, dv):
        # a capacitor behind a reverse-biased Shockley diode drains only through the diode's
        # saturation current (seconds to hours): it is held when the energy its chain could move
        # at its present current and conductance, over a span as long as the run so far, is
        # below a tenth of the rest level; its charge is then left in the capacitor (DESIGN §3).
        # What the chain could move is read both from its conductance and from the current it
        # would carry with the capacitor at rest (the larger): an RC snubber charged to V_BR by an
        # avalanche has exactly 0 V across its resistor as the ring starts, where a
        # piecewise-linear law's slope reads 0 S, and was taken for a held capacitor (the run
        # ended at the first current zero; tests/test_ring_after_avalanche.py)
        ch = c.chains[k]
        v = c.node_voltage(t, y)
        vx = v - c.Vs * ch.reference
        vc = y[c.icap[k]]
        i = ch.current_at(vx, vc)
        g = ch.conductance_at(vx, vc)
        i_rest = ch.current_at(vx, vc - dv)
        moved = max(g * abs(dv), abs(i_rest - i)) if math.isfinite(i_rest) else math.inf
        return (abs(i) + moved) * abs(dv) * t <= HELD_FRACTION * rest_level

    rest_level = RING_END_FRACTION * e0
    if c.case.coil.release_current is not None:
        # follow the ringing until its amplitude is well below the release current
        rest_level = min(rest_level, 0.5 * c.L * (0.5 * c.case.coil.release_current) ** 2)

    def ev_rest(t, y):
        return dyn_energy(y, t) - rest_level
    ev_rest.direction = -1
    ev_rest.spec = ("ring_energy", v_fin, rest_level) if not dyn_caps and not c.mech else None
    ev_rest.terminal = True

    def ev_cross(t, y):
        return y[0]
    ev_cross.spec = ("level", 0, 0.0)
    ev_cross.terminal = True

    ev_times = {"10%": None, "1%": None, "zero": None}
    names = {ev10: "10%", ev1: "1%", ev_zero: "zero"}

    def record(ev, times):
        key = names.get(ev)
        if key is not None and ev_times[key] is None:
            ev_times[key] = float(times[0])

    tf = c.switch.fall_time
    tau = c.L / c.R if c.R > 0 else c.L * i0 / c.Vs
    t_bound = tf + 60.0 * tau
    bound_hit = False
    if tf > 0:
        runner.run("edge", tf, [ev10, ev1, ev_zero], record, first_step=tf / 1000, max_step=tf / EDGE_STEPS)
    if ev_times["zero"] is None:
        first = tf / 1000 if tf > 0 else min(tau, c.L * i0 / c.v_scale) * 1e-6
        runner.run("decay", t_bound, [ev10, ev1, ev_zero], record, first_step=first)
        bound_hit = ev_times["zero"] is None
    rings = c.capacitive or bool(dyn_caps)
    if not bound_hit and rings and dyn_energy(runner.y, runner.t) > rest_level and runner.t < t_bound:
        if c.pin is not None and c.capacitive:
            # the coil current is at zero, and so is the current of the law the node is pinned
            # at: the pin is released here rather than integrated into the law's kink at zero
            runner.unpin(c.pin)
        c.pin = None  # a floating node is tested again at the phase's start
        # the ring drops the steep laws' node tolerance: over hundreds of periods of an LC ring it
        # costs ~10⁶ evaluations at rtol 1e-8 (its figures are the edge's and decay's); it takes a
        # share of the rtol instead, which keeps its phase (RING_RTOL_FACTOR)
        runner.rtol_vector = None
        ring_rtol = rtol * RING_RTOL_FACTOR
        runner.rtol, runner.atol = ring_rtol, tolerances(c, ring_rtol)
        from kickback.engine.linring import try_linear_ring

        def attempt():
            return try_linear_ring(runner, t_bound, rest_level, ev_times, v_fin, dyn_caps, RING_END_FRACTION)

        done, bound_hit = stepped_ring(runner, attempt, [ev10, ev1, ev_rest], record, t_bound,
                                       lambda: dyn_energy(runner.y, runner.t) <= rest_level * 1.0001)
        if not done and not bound_hit and abs(c.coil_current(runner.y[0])) > RING_END_FRACTION * i0 \
                and runner.t < t_bound:
            # end on a zero of the coil current, so that it too is below 0.1 % of the start: in
            # closed form where the ring is affine (the energy is below its level already, so
            # the closed form looks for the zero alone), else step by step as in the ring above
            # (wide-range case 5834: a capacitor draining at a leaky diode's I_s through the
            # coil for 0.1 s, stepped through a 12 kHz node ring: 19 000 steps)
            stepped_ring(runner, attempt, [ev_cross], record, t_bound)
            bound_hit = abs(c.coil_current(runner.y[0])) > RING_END_FRACTION * i0
    c.pin = None
    from kickback.engine.sampling import sample_run

    return sample_run(c, runner.phases, ev_times, runner.peaks, bound_hit, rtol, runner.calls, samples_per_step)
