"""A clamp chain: elements in series, its current for a given chain voltage."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import brentq

from kickback.case import Clamp
from kickback.models import ElementLaw, LinearPieces, ShockleyDiode, element_law
from kickback.models.base import PiecewiseLinearLaw


_NO_REST = LinearPieces(0.0, 0.0, 0.0, 0.0)


def regularized(pieces: LinearPieces, r_min: float) -> LinearPieces:
    """``pieces`` with every zero conduction resistance raised to ``r_min`` [Ω]."""
    if r_min <= 0:
        return pieces
    return LinearPieces(pieces.v_fwd, pieces.r_fwd if pieces.r_fwd > 0 else r_min,
                        pieces.v_rev, pieces.r_rev if pieces.r_rev > 0 else r_min)


@dataclass
class Chain:
    """One clamp as used by the circuit.

    Parameters
    ----------
    clamp : Clamp — the case's clamp
    r_min : float — [Ω] resistance given to zero-resistance pieces (0: exact, vertical)
    """

    clamp: Clamp
    r_min: float = 0.0
    laws: list[ElementLaw | None] = field(init=False)
    capacitance: float | None = field(init=False)

    def __post_init__(self):
        self.laws = []
        self.exact_pieces: list[LinearPieces | None] = []
        self.capacitance = None
        for el in self.clamp.elements:
            law = element_law(el)
            self.exact_pieces.append(law.pieces() if law is not None else None)
            if law is None:
                self.capacitance = el.capacitance
            elif self.r_min > 0 and law.pieces() is not None:
                p = regularized(law.pieces(), self.r_min)
                law = PiecewiseLinearLaw(p, law.description)
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
        if rest == _NO_REST and hasattr(law, "current_at"):  # a lone varistor: its scalar law
            return law.current_at(float(vx))
        return float(self.current(vx))

    def conductance_at(self, voltage: float, v_cap: float = 0.0) -> float:
        """Incremental conductance di/dV [S] of the chain at chain voltage [V]."""
        vx = voltage - v_cap
        if self.pieces is not None:
            return self.pieces.slope_at(vx)
        if self._smooth is not None and isinstance(self._smooth[0], ShockleyDiode):
            rest = self._smooth[1]
            if vx > rest.v_fwd:
                d = self._fwd
            elif vx < rest.v_rev:
                d = self._rev
            else:
                return 0.0
            i = self.current_at(voltage, v_cap)
            return 1.0 / (d.a / max(d.i_s + i, 1e-300) + d.r_s)
        if self._smooth is None and self.active:
            # several nonlinear laws in series: the exact derivative at the solved current,
            # 1 / Σ dv_k/di (one chain solve instead of two for a difference quotient)
            i = self.current_at(voltage, v_cap)
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

    def _law_voltage(self, k: int, current: float) -> float:
        law = self.laws[k]
        p = law.pieces()
        if p is not None:
            return p.voltage_at(current)
        if hasattr(law, "voltage_at"):
            return law.voltage_at(current)
        return float(law.voltage(current))

    def _law_current(self, k: int, v: float) -> float:
        """Scalar current [A] of element ``k`` alone at voltage ``v`` [V] (math only: numpy's
        error flags would reach the vectorised caller)."""
        law = self.laws[k]
        p = law.pieces()
        if p is not None:
            return p.current_at(v)
        if hasattr(law, "current_at"):
            return law.current_at(v)
        return float(law.current(v))

    def _law_slope(self, k: int, i: float) -> float:
        """Incremental resistance dv/di [Ω] of element ``k`` at current ``i`` [A] (i ≠ 0)."""
        law = self.laws[k]
        p = law.pieces()
        if p is not None:
            return p.r_fwd if i > 0 else p.r_rev
        if isinstance(law, ShockleyDiode):
            return law.a / max(law.i_s + i, 1e-300) + law.r_s
        if hasattr(law, "resistance_at"):  # varistor
            return law.resistance_at(i)
        h = 1e-6 * abs(i)
        return (self._law_voltage(k, i + h) - self._law_voltage(k, i - h)) / (2 * h)

    def _newton(self, g, lo: float, hi: float, g_lo: float | None = None, g_hi: float | None = None,
                start: float | None = None) -> float:
        """Root of the increasing ``g`` (chain voltage less the target) in [lo, hi], a bracket
        on one side of zero: Newton's method in s = ln|i| (a diode's and a varistor's voltage
        are nearly linear in it) on the summed incremental resistance, kept inside the shrinking
        bracket (a step that leaves it bisects in s), to 1e-13 relative. With ``g`` known at both
        ends of a bracket of one sign, the first iterate is the chord's root in s (regula falsi),
        else the bracket's geometric mean."""
        sign = 1.0 if hi > 0 else -1.0
        x = 0.5 * (lo + hi) if lo * hi <= 0 else sign * math.sqrt(lo * hi)
        if lo * hi > 0 and g_lo is not None and g_hi is not None and g_lo < 0 < g_hi:
            s_lo, s_hi = math.log(abs(lo)), math.log(abs(hi))
            s = s_lo + (s_hi - s_lo) * (-g_lo) / (g_hi - g_lo)
            if min(s_lo, s_hi) < s < max(s_lo, s_hi):
                x = sign * math.exp(s)
        if start is not None and lo <= start <= hi:
            x = start
        for _ in range(200):
            f = g(x)
            if abs(f) <= self._v_round:
                return x  # the chain voltage is met to its rounding error
            if f < 0:
                lo = x
            else:
                hi = x
            a_lo, a_hi = sorted((abs(lo), abs(hi)))
            # no NaN here (a comparison with NaN raises the FPU's invalid flag, which the
            # vectorised caller reports): a rejected Newton step is None
            slope = sum(self._law_slope(k, x) for k in self._active_idx) if x != 0 else 0.0
            xn = None
            if 0 < slope < math.inf:
                ds = -f / (slope * x)
                if abs(ds) < 50:
                    xn = x * math.exp(ds)
            if xn is None or not lo < xn < hi:
                xn = sign * (math.sqrt(a_lo * a_hi) if a_lo > 0 else 0.5 * a_hi)
            if abs(xn - x) <= 1e-13 * abs(xn) or a_hi - a_lo <= 1e-15 * a_hi:
                return xn
            if abs(xn - x) <= 1e-8 * abs(xn) and lo < xn < hi:
                # quadratic convergence: the next correction is ~(1e-8)² relative, below 1e-13
                return xn
            x = xn
        return x

    def _solve_reverse(self, g, floor: float, g_edge: float, g_half: float | None = None) -> float:
        """Root of ``g`` for a reverse current in (floor, 0), floor = −I_s of the chain's most
        limiting diode: Newton's method in w = ln(1 + i/I_s), in which a diode's voltage n·V_T·w
        is linear (the chain's voltage nearly so), kept inside the shrinking bracket
        [ln 1e-12, 0] (a step that leaves it bisects), to 1e-13 relative in the current."""
        lo, hi = math.log(1e-12), 0.0
        g_lo = g_edge
        if g_half is not None and g_half >= 0.0:
            hi, g_hi = math.log(0.5), g_half  # the root is within half the saturation current
        else:
            g_hi = g(0.0)
            if g_hi <= 0.0:
                return 0.0

        def current(w):
            return -floor * math.expm1(w)

        w = lo + (hi - lo) * (-g_lo) / (g_hi - g_lo)  # the chord: g is nearly linear in w
        for _ in range(200):
            i = current(w)
            f = g(i)
            if f == 0.0:
                return i
            if f < 0:
                lo = w
            else:
                hi = w
            di_dw = -floor * math.exp(w)
            slope = sum(self._law_slope(k, i) for k in self._active_idx) * di_dw if i != 0 else 0.0
            wn = None
            if 0 < slope < math.inf:
                wn = w - f / slope
            if wn is None or not lo < wn < hi:
                wn = 0.5 * (lo + hi)
            if abs(current(wn) - i) <= 1e-13 * abs(i) + 1e-15 * abs(floor) or hi - lo <= 1e-15:
                return current(wn)
            w = wn
        return current(w)

    def _total_voltage(self, i: float) -> float:
        return sum(self._law_voltage(k, i) for k in self._active_idx)

    def _solve_numeric(self, vx: float) -> float:
        """Series solve for chains of several nonlinear laws: the current at chain voltage ``vx``."""
        vx = float(vx)
        lo, hi = self.band
        if lo <= vx <= hi:
            return 0.0

        def g(x):
            return self._total_voltage(x) - vx

        self._v_round = 4e-16 * abs(vx)

        floor = max(law.i_floor for law in self.active)
        if vx < lo and math.isfinite(floor):
            if floor == 0.0:
                return 0.0
            # reverse, towards a diode's saturation current: the root lies in (floor, 0)
            edge = floor * (1.0 - 1e-12)
            g_edge = g(edge)
            if g_edge >= 0.0:
                return edge  # the chain is saturated: within 1e-12 of its reverse current limit
            half = 0.5 * floor
            g_half = g(half)
            if g_half < 0.0:
                # far from saturation (a law other than the diode limits the current): Newton in
                # ln|i| as in forward conduction, bracketed by each law alone at the whole
                # voltage and at its n-th part (clipped to half the saturation current)
                n = len(self._active_idx)
                upper = min(abs(self._law_current(k, vx)) for k in self._active_idx)
                lower = min(abs(self._law_current(k, vx / n)) for k in self._active_idx)
                upper = min(upper, abs(half))
                lower = max(lower, 1e-300)
                if lower < upper:
                    g_up = g_half if upper == abs(half) else g(-upper)
                    g_low = g(-lower)
                    if 0.0 < g_up <= self._v_round and g_low >= 0.0:
                        return -upper  # the limiting law alone meets the voltage to rounding
                    if g_up <= 0.0 <= g_low:
                        # start where the most limiting law alone takes the whole voltage
                        return self._newton(g, -upper, -lower, g_up, g_low, start=-upper)
                return self._solve_reverse(g, floor, g_edge)
            return self._solve_reverse(g, floor, g_edge, g_half)
        sign = 1.0 if vx > hi else -1.0
        # each law alone at the whole voltage carries more than the chain, and one of the n
        # laws holds at least vx/n: a bracket from 2n law evaluations
        n = len(self._active_idx)
        upper = min(abs(self._law_current(k, vx)) for k in self._active_idx)
        lower = min(abs(self._law_current(k, vx / n)) for k in self._active_idx)
        if math.isfinite(upper) and math.isfinite(lower) and upper > 0:
            g_up = g(sign * upper)
            if 0.0 <= g_up * sign <= self._v_round:
                return sign * upper  # the limiting law alone meets the voltage to rounding
            g_low = g(sign * lower)
            if g_up * sign >= 0 and g_low * sign <= 0:
                lo, hi_ = sorted((sign * lower, sign * upper))
                g_a, g_b = (g_low, g_up) if sign > 0 else (g_up, g_low)
                # a deterministic start (not the last solution): event functions evaluate this
                # twice at the same voltage and must get the same current
                return self._newton(g, lo, hi_, g_a, g_b)
        a, b = 0.0, sign * 1e-6
        while abs(b) < 1e300:
            gb = g(b)
            if gb * sign >= 0:
                return self._newton(g, min(a, b), max(a, b))
            if math.isnan(gb):
                break
            a, b = b, b * 4.0
        # the chain's voltage stays below vx up to 1e300 A (a varistor's steep law reaches
        # such currents only far beyond any physical voltage, as a trial state may ask): the
        # chain takes any current there, like a vertical law
        return sign * math.inf

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
