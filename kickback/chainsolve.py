"""The series solve of a clamp chain with several nonlinear laws: its current at a chain voltage.

One current flows through every element and their voltages add (Kirchhoff's voltage law for a
series connection — C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits,
ch. 2). A Shockley diode's voltage is linear in ln(1 + i/I_s) (A. S. Sedra and K. C. Smith,
Microelectronic Circuits, ch. 4) and a varistor's nearly so in ln|i| (L. M. Levinson and
H. R. Philipp, Am. Ceram. Soc. Bull. 65(4), 1986): Newton's method runs in those variables,
kept inside a shrinking bracket and bisecting where a step leaves it (Newton's method safeguarded
by bisection: W. H. Press et al., Numerical Recipes, 3rd ed., §9.4, from memory).
"""

from __future__ import annotations

import math

from kickback.models import ShockleyDiode, Varistor


def _geometric_mean(a: float, b: float) -> float:
    """√(a·b) of two positive numbers without forming the product: a chain current of ~1e-256 A
    (a varistor far below its knee) squared underflows to 0, and the bisection then returned to
    zero current and back, 200 times (a bracket that never shrank)."""
    return math.sqrt(a) * math.sqrt(b)


class SeriesSolve:
    """Mixin of :class:`kickback.chain.Chain`: the numeric series solve (uses ``laws``,
    ``active``, ``band`` and ``_active_idx`` of the chain)."""

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

    def _law_log_slope(self, k: int, i: float) -> float:
        """dv/ds of element ``k`` in s = ln|i|, i.e. i·dv/di [V], at current ``i`` ≠ 0 [A].

        Formed without the incremental resistance where that is not a float: a varistor far
        below its knee (i ~ 1e-256 A) has dv/di beyond 1e308 Ω while i·dv/di = v/α stays small
        (v = V_1·|i/I_1|^(1/α), Levinson & Philipp 1986); the product inf × i rejected every
        Newton step there, and the solve crept up on the root by bisection."""
        law = self.laws[k]
        if isinstance(law, Varistor) and abs(i / law.i1) <= law.CURRENT_CAP:
            return law.voltage_at(i) / law.alpha
        return i * self._law_slope(k, i)

    def _newton(self, g, lo: float, hi: float, g_lo: float | None = None, g_hi: float | None = None,
                start: float | None = None) -> float:
        """Root of the increasing ``g`` (chain voltage less the target) in [lo, hi], a bracket
        on one side of zero: Newton's method in s = ln|i| (a diode's and a varistor's voltage
        are nearly linear in it) on the summed incremental resistance, kept inside the shrinking
        bracket (a step that leaves it bisects in s), to 1e-13 relative. With ``g`` known at both
        ends of a bracket of one sign, the first iterate is the chord's root in s (regula falsi),
        else the bracket's geometric mean."""
        sign = 1.0 if hi > 0 else -1.0
        same_side = (lo > 0 and hi > 0) or (lo < 0 and hi < 0)
        x = sign * _geometric_mean(abs(lo), abs(hi)) if same_side else 0.5 * (lo + hi)
        if same_side and g_lo is not None and g_hi is not None and g_lo < 0 < g_hi:
            s_lo, s_hi = math.log(abs(lo)), math.log(abs(hi))
            s = s_lo + (s_hi - s_lo) * (-g_lo) / (g_hi - g_lo)
            if min(s_lo, s_hi) < s < max(s_lo, s_hi):
                x = sign * math.exp(s)
        if start is not None and lo <= start <= hi:
            x = start
        other_last = False
        for _ in range(200):
            f = g(x)
            if abs(f) <= self._v_round:
                return x  # the chain voltage is met to its rounding error
            if f < 0:
                lo, g_lo = x, f
            else:
                hi, g_hi = x, f
            a_lo, a_hi = sorted((abs(lo), abs(hi)))
            # no NaN here (a comparison with NaN raises the FPU's invalid flag, which the
            # vectorised caller reports): a rejected Newton step is None
            # dv/ds in s = ln|i| (same sign as x for an increasing chain voltage)
            dv_ds = sum(self._law_log_slope(k, x) for k in self._active_idx) if x != 0 else 0.0
            xn = None
            if 0 < dv_ds * sign < math.inf:
                ds = -f / dv_ds
                if abs(ds) < 50:
                    xn = x * math.exp(ds)
            if xn is None or not lo < xn < hi:
                # a Newton step from the bracket's other end: from the convex side Newton's step
                # overshoots the bracket every time, and bisection alone then creeps up on a root
                # that lies near the far end (a varistor far below its knee: 27 steps for one
                # chain current); every other fallback bisects (in s), so that it cannot stall
                xn = None
                other, g_other = (hi, g_hi) if f < 0 else (lo, g_lo)
                if not other_last and g_other is not None and other != 0 and math.isfinite(g_other):
                    d_other = sum(self._law_log_slope(k, other) for k in self._active_idx)
                    if 0 < d_other * sign < math.inf and abs(g_other / d_other) < 50:
                        xn = other * math.exp(-g_other / d_other)
                        if not lo < xn < hi:
                            xn = None
                other_last = xn is not None
                if xn is None:
                    xn = sign * (_geometric_mean(a_lo, a_hi) if a_lo > 0 else 0.5 * a_hi)
            else:
                other_last = False
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

    def _solve_varistor_rest(self, vx: float) -> float:
        """Current of a chain of one varistor and piecewise-linear laws summed in ``_smooth[1]``
        (v_fwd + r_fwd·i forward, v_rev + r_rev·i in reverse, no current between) at chain
        voltage ``vx`` [V]: Newton's method in s = ln|i| on |V(i)| + r·|i| = |w|, w the voltage
        past the linear laws' offset. Both terms are convex and increasing in s (the power law
        e^{s/α}, its tangent continuation and r·e^s alike), so from the smaller of the currents
        each term alone would carry at |w| — at or past the root — the iterates fall
        monotonically onto it, without the bracket of the general solve (a diode + varistor
        stepped through its knee for 150 node periods, wide-range case 5804); to 1e-14
        relative in the current."""
        law, rest = self._smooth
        vx = float(vx)
        if rest.v_rev <= vx <= rest.v_fwd:
            return 0.0
        w, r = (vx - rest.v_fwd, rest.r_fwd) if vx > rest.v_fwd else (vx - rest.v_rev, rest.r_rev)
        sign, aw = math.copysign(1.0, w), abs(w)
        hi = abs(law.current_at(w))
        if r > 0:
            hi = min(hi, aw / r)
        if not 0.0 < hi < math.inf:
            return self._solve_numeric(vx)
        k = self.laws.index(law)
        v_round = 4e-16 * abs(vx)
        s = math.log(hi)
        for _ in range(100):
            i = sign * math.exp(s)
            g = abs(law.voltage_at(i)) + r * abs(i) - aw
            if g <= v_round:
                return i
            ds = g / (abs(self._law_log_slope(k, i)) + r * abs(i))
            s -= ds
            if ds <= 1e-14:
                return sign * math.exp(s)
        return self._solve_numeric(vx)

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
