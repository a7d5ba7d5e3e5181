"""A clamp chain: elements in series, its current for a given chain voltage."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from kickback.case import Clamp
from kickback.chainsolve import SeriesSolve
from kickback.models import ElementLaw, LinearPieces, ShockleyDiode, Varistor, element_law
from kickback.models.base import PiecewiseLinearLaw

NO_REST = LinearPieces(0.0, 0.0, 0.0, 0.0)


def regularized(pieces: LinearPieces, r_min: float) -> LinearPieces:
    """``pieces`` with every zero conduction resistance raised to ``r_min`` [Ω]."""
    if r_min <= 0:
        return pieces
    return LinearPieces(pieces.v_fwd, pieces.r_fwd if pieces.r_fwd > 0 else r_min,
                        pieces.v_rev, pieces.r_rev if pieces.r_rev > 0 else r_min)


def _regularize_last(laws: list, r_min: float) -> list:
    """Piecewise-linear ``laws`` of one chain (None: a capacitor) with ``r_min`` [Ω] given, per
    conduction direction where the chain's total resistance is zero, to the last element of zero
    resistance (its element power then carries the regularising r_min·i², and the elements still
    add up to the chain's law)."""
    out = list(laws)
    idx = [k for k, law in enumerate(laws) if law is not None]
    for side in ("r_fwd", "r_rev"):
        if idx and sum(getattr(laws[k].pieces(), side) for k in idx) == 0:
            k = idx[-1]
            p = out[k].pieces()
            q = LinearPieces(p.v_fwd, r_min if side == "r_fwd" else p.r_fwd,
                             p.v_rev, r_min if side == "r_rev" else p.r_rev)
            out[k] = PiecewiseLinearLaw(q, out[k].description)
    return out


@dataclass
class Chain(SeriesSolve):
    """One clamp as used by the circuit.

    Parameters
    ----------
    clamp : Clamp — the case's clamp
    r_min : float — [Ω] resistance given to zero-resistance pieces and, as series resistance, to a
        Shockley diode that has none (0: exact, vertical)
    """

    clamp: Clamp
    r_min: float = 0.0
    laws: list[ElementLaw | None] = field(init=False)
    capacitance: float | None = field(init=False)

    def __post_init__(self):
        self.laws = []
        self.exact_pieces: list[LinearPieces | None] = []
        self.capacitance = None
        laws = exact = [element_law(el) for el in self.clamp.elements]
        # a chain of piecewise-linear laws only is regularised as a whole, where its total
        # resistance is zero: a zero-resistance diode beside a 1 Ω Zener given r_min of its own
        # moved the chain's current at V_BR by r_min/1 Ω relative, and an avalanche sharing the
        # current with it by far more (1.1e-4 of its energy at the default regularisation)
        whole = all(law is None or law.pieces() is not None for law in laws)
        if whole and self.r_min > 0:
            laws = _regularize_last(laws, self.r_min)
        for el, law, law_exact in zip(self.clamp.elements, laws, exact, strict=True):
            self.exact_pieces.append(law_exact.pieces() if law_exact is not None else None)
            if law is None:
                self.capacitance = el.capacitance
            elif whole:
                pass
            elif self.r_min > 0 and law.pieces() is not None:
                p = regularized(law.pieces(), self.r_min)
                law = PiecewiseLinearLaw(p, law.description)
            elif self.r_min > 0 and isinstance(law, ShockleyDiode) and law.r_s == 0:
                # a Shockley diode with no series resistance is vertical in the limit: its current
                # overflows to inf beyond ~700·n·V_T, where a trial state of an implicit step may
                # land (and inf − inf then made the supply current NaN); r_min in series keeps it
                # finite at every finite voltage, as for the other zero-resistance laws
                desc = law.description
                law = ShockleyDiode(law.n, law.i_s, self.r_min, law.a / law.n)
                law.description = desc
            self.laws.append(law)
        self.reference = 1.0 if self.clamp.across == "coil" else 0.0  # × supply voltage
        active = [law for law in self.laws if law is not None]
        pw = [law.pieces() for law in active]
        self.pieces: LinearPieces | None = None
        self._smooth: tuple[ElementLaw, LinearPieces] | None = None
        if active and all(p is not None for p in pw):
            total = pw[0]
            for p in pw[1:]:
                total = total + p
            self.pieces = total
        else:
            smooth = [law for law, p in zip(active, pw, strict=True) if p is None]
            rest = LinearPieces(0.0, 0.0, 0.0, 0.0)
            for p in pw:
                if p is not None:
                    rest = rest + p
            if len(smooth) == 1:
                self._smooth = (smooth[0], rest)
                if isinstance(smooth[0], ShockleyDiode):
                    d = smooth[0]
                    self._fwd = ShockleyDiode(d.n, d.i_s, d.r_s + rest.r_fwd, d.a / d.n)
                    self._rev = ShockleyDiode(d.n, d.i_s, d.r_s + rest.r_rev, d.a / d.n)
        self.active = active
        self._active_idx = [k for k, law in enumerate(self.laws) if law is not None]
        self.band = (sum(law.band[0] for law in active), sum(law.band[1] for law in active))
        self.piecewise_linear = self.pieces is not None

    @property
    def name(self) -> str:
        return self.clamp.name

    @property
    def capacitor_only(self) -> bool:
        return not self.active

    def thresholds(self) -> list[float]:
        """Chain voltages [V] at which the chain's law is vertical (exact ideal elements)."""
        out = []
        if self.pieces is not None:
            if self.pieces.r_fwd == 0 and math.isfinite(self.pieces.v_fwd):
                out.append(self.pieces.v_fwd)
            if self.pieces.r_rev == 0 and math.isfinite(self.pieces.v_rev):
                out.append(self.pieces.v_rev)
        return out

    def current(self, voltage, v_cap=0.0):
        """Chain current [A] (from ``sw`` to the chain's far end) at chain voltage [V]."""
        vx = np.asarray(voltage, dtype=float) - v_cap
        if self.pieces is not None:
            return self.pieces.current(vx)
        if self._smooth is not None:
            law, rest = self._smooth
            if isinstance(law, ShockleyDiode):
                fwd = self._fwd.current(np.maximum(vx - rest.v_fwd, 0.0))
                if math.isfinite(rest.v_rev):
                    rev = self._rev.current(np.minimum(vx - rest.v_rev, 0.0))
                else:
                    rev = 0.0
                return np.where(vx > rest.v_fwd, fwd, np.where(vx < rest.v_rev, rev, 0.0))
            if rest == LinearPieces(0.0, 0.0, 0.0, 0.0):
                return law.current(vx)
            if isinstance(law, Varistor):
                return np.vectorize(self._solve_varistor_rest, otypes=[float])(vx)
        return np.vectorize(self._solve_numeric, otypes=[float])(vx)

    def current_at(self, voltage: float, v_cap: float = 0.0) -> float:
        """Scalar :meth:`current`, for the engine's inner loop."""
        vx = voltage - v_cap
        if self.pieces is not None:
            return self.pieces.current_at(vx)
        if self._smooth is not None and isinstance(self._smooth[0], ShockleyDiode):
            rest = self._smooth[1]
            if vx > rest.v_fwd:
                return self._fwd.current_at(vx - rest.v_fwd)
            if vx < rest.v_rev:
                return self._rev.current_at(vx - rest.v_rev)
            return 0.0
        if self._smooth is None:
            return self._solve_numeric(float(vx))
        law, rest = self._smooth
        if rest == NO_REST:
            if hasattr(law, "current_at"):  # a lone varistor: its scalar law
                return law.current_at(float(vx))
            return float(law.current(vx))
        # a curved law beside piecewise-linear ones (a diode + varistor): the series solve, called
        # directly (through np.vectorize, as :meth:`current` does for arrays, each scalar call
        # built a vectorised wrapper: a quarter of a ring's CPU, wide-range case 9779)
        if isinstance(law, Varistor):
            return self._solve_varistor_rest(float(vx))
        return self._solve_numeric(float(vx))

    def conductance_at(self, voltage: float, v_cap: float = 0.0, current: float | None = None) -> float:
        """Incremental conductance di/dV [S] of the chain at chain voltage [V] (``current``: the
        chain's current there, when known)."""
        vx = voltage - v_cap
        if self.pieces is not None:
            return self.pieces.slope_at(vx)
        if self._smooth is not None and isinstance(self._smooth[0], ShockleyDiode):
            rest = self._smooth[1]
            if vx > rest.v_fwd:
                d = self._fwd
            elif vx < rest.v_rev:
                d = self._rev
            elif vx == rest.v_fwd == rest.v_rev:
                # the diode's own zero with no band of the linear laws (a lone diode, a diode and a
                # resistor): it conducts either way, the larger one-sided slope (as
                # LinearPieces.slope_at; 0 left the diodes out of the Jacobian of a node solved
                # onto exactly the supply by Newton's method, wide-range case 4886)
                d = self._fwd if rest.r_fwd <= rest.r_rev else self._rev
            else:
                return 0.0
            i = self.current_at(voltage, v_cap) if current is None else current
            # an overflowing current (a voltage far past the knee, no series resistance): vertical
            den = d.a / max(d.i_s + i, 1e-300) + d.r_s
            return 1.0 / den if den > 0 else math.inf
        if self._smooth is None and self.active:
            # several nonlinear laws in series: the exact derivative at the solved current,
            # 1 / Σ dv_k/di (one chain solve instead of two for a difference quotient)
            i = self.current_at(voltage, v_cap) if current is None else current
            if i == 0.0 or not math.isfinite(i):
                return 0.0 if i == 0.0 else math.inf
            r = sum(self._law_slope(k, i) for k in self._active_idx)
            return 1.0 / r if r > 0 else math.inf
        h = 1e-6 * max(abs(vx), 1.0)
        return (self.current_at(vx + h) - self.current_at(vx - h)) / (2 * h)

    def power_at(self, k: int, current: float, exact: bool = False) -> float:
        """Power [W] in element ``k`` of the chain at chain current [A] (0 for a capacitor).

        ``exact``: use the law without its regularizing resistance (the node is pinned at the
        law's exact voltage).
        """
        law = self.laws[k]
        if law is None or current == 0.0:
            return 0.0
        p = self.exact_pieces[k] if exact else law.pieces()
        if p is not None:
            v = p.voltage_at(current)
            if not math.isfinite(v):
                # a blocking piece (an ideal diode in reverse) met by a trial state of an implicit
                # step across the pin's release: the law carries no current there, so no power
                # (a true state has none; an infinite rate would stall the step)
                return 0.0
            return v * current
        if isinstance(law, ShockleyDiode):
            return law.voltage_at(current) * current
        return float(law.voltage(current)) * current

    def powers_at(self, current: float, voltage: float, v_cap: float = 0.0, exact: bool = False) -> list[float]:
        """Power [W] in each non-capacitor element (in chain order) at chain current [A] and
        chain voltage [V]; they add up to the chain's power less the capacitor's.

        A chain with nonlinear laws gives its residual voltage (the chain voltage less what the
        other elements' laws drop) to one nonlinear element — the only one, or the one with the
        smallest reverse current: a reverse-biased Shockley diode near its saturation current
        holds what its clipped law cannot show, and its power is that voltage times the current.
        """
        ks = [k for k, law in enumerate(self.laws) if law is not None]
        if current == 0.0:
            return [0.0] * len(ks)
        if self.pieces is not None:
            return [self.power_at(k, current, exact) for k in ks]
        if self._smooth is not None:
            big = self.laws.index(self._smooth[0])
        else:
            big = max(ks, key=lambda j: self.laws[j].i_floor)
        volts = {k: self._law_voltage(k, current) for k in ks if k != big}
        volts[big] = (voltage - v_cap) - sum(volts.values())
        return [volts[k] * current for k in ks]

    def element_voltages(self, current, voltage, v_cap=0.0) -> list[np.ndarray]:
        """Voltage [V] across each element (capacitors included) at chain current [A].

        With no current, the chain voltage is shared by the elements that block it, in chain
        order, each up to the edge of its zero-current band.
        """
        i = np.asarray(current, dtype=float)
        vx = np.asarray(voltage, dtype=float) - v_cap
        out = []
        for law in self.laws:
            if law is None:
                out.append(np.broadcast_to(np.asarray(v_cap, dtype=float), i.shape).copy())
            else:
                out.append(np.where(i != 0, law.voltage(np.where(i != 0, i, 1.0)), 0.0))
        if self._smooth is not None:
            # the one nonlinear element takes what the linear ones leave (exact, also in reverse,
            # where its own law has lost all precision near -I_s)
            k = self.laws.index(self._smooth[0])
            others = sum(out[j] for j, law in enumerate(self.laws) if j != k)
            out[k] = np.where(i != 0, vx + (v_cap if self.capacitance is not None else 0.0) - others, out[k])
        elif self.pieces is None and self.active:
            # several nonlinear laws: a saturated reverse diode holds what its clipped law cannot
            # show; give the residual to the law with the smallest reverse current
            k = max(range(len(self.laws)), key=lambda j: self.laws[j].i_floor if self.laws[j] is not None
                    else -math.inf)
            total = sum(out)
            chain_v = vx + (v_cap if self.capacitance is not None else 0.0)
            out[k] = np.where(i != 0, out[k] + (chain_v - total), out[k])
        # share the held-off voltage among blocking elements where the chain carries no current
        rest = np.where(i == 0, vx, 0.0)
        for k, law in enumerate(self.laws):
            if law is None:
                continue
            lo, hi = law.band
            take = np.clip(rest, lo, hi)
            out[k] = np.where(i == 0, out[k] + take, out[k])
            rest = rest - take
        return out
