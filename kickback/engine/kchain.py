"""Clamp chains of the compiled circuit: current, conductance and element powers (numba).

The compiled twins of :meth:`kickback.chain.Chain.current_at`, ``conductance_at``, ``powers_at``
and the series solve of :class:`kickback.chainsolve.SeriesSolve` (Newton's method in ln|i| kept
in a shrinking bracket, the reverse solve towards −I_s in ln(1 + i/I_s)): the same branches and
safeguards in the same order. A chain is a record at an offset of the parameter array
(:func:`chain_record`), its kind by an integer code, its element laws as :mod:`klaws` records.

References
----------
C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 2 (series
connection: one current, voltages add). W. H. Press et al., Numerical Recipes, 3rd ed., §9.4
(Newton's method safeguarded by bisection; from memory).
"""

from __future__ import annotations

import math

from kickback.chain import NO_REST, Chain
from kickback.engine import kcache
from kickback.engine.klaws import (
    LAW_WIDTH,
    law_current,
    law_exact_voltage,
    law_log_slope,
    law_record,
    law_slope,
    law_voltage,
    pieces_record,
    pwl_current,
    pwl_slope,
    pwl_voltage,
    pymax,
    pymin,
    shockley_current,
)
from kickback.engine.radau5_jit import jit
from kickback.models import ShockleyDiode, Varistor

kcache.register()  # the cache of these functions follows klaws.py too

#: chain kinds: piecewise-linear total; one Shockley diode with a linear rest; a lone varistor;
#: the numeric series solve (several nonlinear laws); one varistor with a linear rest (its Newton
#: descent in ln|i|, SeriesSolve._solve_varistor_rest; conductance by a central difference)
CH_PIECES, CH_SHOCKLEY, CH_VARISTOR, CH_NUMERIC, CH_SMOOTH_REST = 0, 1, 2, 3, 4
#: floats before a chain's law records (see chain_record)
CHAIN_HEAD = 28
_LN_1E12 = math.log(1e-12)
_LN_HALF = math.log(0.5)


def chain_kind(ch: Chain) -> int:
    """The kind code of an active chain, following Chain.current_at's branches."""
    if ch.pieces is not None:
        return CH_PIECES
    if ch._smooth is None:
        return CH_NUMERIC
    law, rest = ch._smooth
    if isinstance(law, ShockleyDiode):
        return CH_SHOCKLEY
    if rest == NO_REST and hasattr(law, "current_at"):
        return CH_VARISTOR
    if not isinstance(law, Varistor):  # the compiled laws: piecewise linear, Shockley, varistor
        raise ValueError(f"no compiled chain for a {type(law).__name__} beside linear laws")
    return CH_SMOOTH_REST


def chain_record(ch: Chain, reference: float, icap: int) -> list[float]:
    """Floats of one active chain: kind, reference (× supply), capacitor state index (−1: none),
    capacitance, total pieces, rest pieces, forward and reverse diodes (a, I_s, R_s, ln k), law
    count, the element given the residual voltage in powers_at, band, floor; then the laws."""
    kind = chain_kind(ch)
    idx = [k for k, law in enumerate(ch.laws) if law is not None]
    out = [float(kind), reference, float(icap), ch.capacitance if ch.capacitance is not None else 0.0]
    out += pieces_record(ch.pieces) if ch.pieces is not None else [0.0] * 4
    out += pieces_record(ch._smooth[1]) if ch._smooth is not None else [0.0] * 4
    for d in ((ch._fwd, ch._rev) if kind == CH_SHOCKLEY else (None, None)):
        out += [d.a, d.i_s, d.r_s, d._log_k] if d is not None else [0.0] * 4
    if kind == CH_PIECES:
        big = -1
    elif ch._smooth is not None:
        big = idx.index(ch.laws.index(ch._smooth[0]))
    else:
        big = idx.index(max(idx, key=lambda j: ch.laws[j].i_floor))
    floor = max(law.i_floor for law in ch.active)
    out += [float(len(idx)), float(big), ch.band[0], ch.band[1], floor, 0.0, 0.0, 0.0]
    assert len(out) == CHAIN_HEAD
    for k in idx:
        out += law_record(ch.laws[k], ch.exact_pieces[k])
    return out


@jit
def _law_off(o, j):
    return o + CHAIN_HEAD + j * LAW_WIDTH


@jit
def total_voltage(p, o, i):
    """SeriesSolve._total_voltage: Σ v_k(i) over the chain's laws [V]."""
    s = 0.0
    for j in range(int(p[o + 20])):
        s += law_voltage(p, _law_off(o, j), i)
    return s


@jit
def _sum_log_slope(p, o, i):
    s = 0.0
    for j in range(int(p[o + 20])):
        s += law_log_slope(p, _law_off(o, j), i)
    return s


@jit
def _sum_slope(p, o, i):
    s = 0.0
    for j in range(int(p[o + 20])):
        s += law_slope(p, _law_off(o, j), i)
    return s


@jit
def _gmean(a, b):
    return math.sqrt(a) * math.sqrt(b)


@jit
def newton(p, o, vx, v_round, lo, hi, g_lo, has_glo, g_hi, has_ghi, start, has_start):
    """SeriesSolve._newton: root of Σ v_k(i) − vx in [lo, hi] (one sign), Newton in ln|i|."""
    sign = 1.0 if hi > 0 else -1.0
    same_side = (lo > 0 and hi > 0) or (lo < 0 and hi < 0)
    x = sign * _gmean(abs(lo), abs(hi)) if same_side else 0.5 * (lo + hi)
    if same_side and has_glo and has_ghi and g_lo < 0 < g_hi:
        s_lo, s_hi = math.log(abs(lo)), math.log(abs(hi))
        s = s_lo + (s_hi - s_lo) * (-g_lo) / (g_hi - g_lo)
        if pymin(s_lo, s_hi) < s < pymax(s_lo, s_hi):
            x = sign * math.exp(s)
    if has_start and lo <= start <= hi:
        x = start
    other_last = False
    for _ in range(200):
        f = total_voltage(p, o, x) - vx
        if abs(f) <= v_round:
            return x
        if f < 0:
            lo, g_lo, has_glo = x, f, True
        else:
            hi, g_hi, has_ghi = x, f, True
        a_lo, a_hi = abs(lo), abs(hi)
        if a_hi < a_lo:
            a_lo, a_hi = a_hi, a_lo
        dv_ds = _sum_log_slope(p, o, x) if x != 0 else 0.0
        xn = 0.0
        ok = False
        if 0 < dv_ds * sign < math.inf:
            ds = -f / dv_ds
            if abs(ds) < 50:
                xn = x * math.exp(ds)
                ok = True
        if not ok or not lo < xn < hi:
            ok = False
            if f < 0:
                other, g_other, has_other = hi, g_hi, has_ghi
            else:
                other, g_other, has_other = lo, g_lo, has_glo
            if not other_last and has_other and other != 0 and math.isfinite(g_other):
                d_other = _sum_log_slope(p, o, other)
                if 0 < d_other * sign < math.inf and abs(g_other / d_other) < 50:
                    xn = other * math.exp(-g_other / d_other)
                    ok = lo < xn < hi
            other_last = ok
            if not ok:
                xn = sign * (_gmean(a_lo, a_hi) if a_lo > 0 else 0.5 * a_hi)
        else:
            other_last = False
        if abs(xn - x) <= 1e-13 * abs(xn) or a_hi - a_lo <= 1e-15 * a_hi:
            return xn
        if abs(xn - x) <= 1e-8 * abs(xn) and lo < xn < hi:
            return xn
        x = xn
    return x


@jit
def solve_reverse(p, o, vx, floor, g_edge, g_half, has_half):
    """SeriesSolve._solve_reverse: a reverse current in (floor, 0), Newton in ln(1 + i/I_s)."""
    lo, hi = _LN_1E12, 0.0
    g_lo = g_edge
    if has_half and g_half >= 0.0:
        hi, g_hi = _LN_HALF, g_half
    else:
        g_hi = total_voltage(p, o, 0.0) - vx
        if g_hi <= 0.0:
            return 0.0
    w = lo + (hi - lo) * (-g_lo) / (g_hi - g_lo)
    for _ in range(200):
        i = -floor * math.expm1(w)
        f = total_voltage(p, o, i) - vx
        if f == 0.0:
            return i
        if f < 0:
            lo = w
        else:
            hi = w
        di_dw = -floor * math.exp(w)
        slope = _sum_slope(p, o, i) * di_dw if i != 0 else 0.0
        wn = 0.5 * (lo + hi)
        if 0 < slope < math.inf:
            wn = w - f / slope
            if not lo < wn < hi:
                wn = 0.5 * (lo + hi)
        if abs(-floor * math.expm1(wn) - i) <= 1e-13 * abs(i) + 1e-15 * abs(floor) or hi - lo <= 1e-15:
            return -floor * math.expm1(wn)
        w = wn
    return -floor * math.expm1(w)


@jit
def _min_abs_current(p, o, v):
    n = int(p[o + 20])
    m = abs(law_current(p, _law_off(o, 0), v))
    for j in range(1, n):
        x = abs(law_current(p, _law_off(o, j), v))
        if x < m:
            m = x
    return m


@jit
def solve_numeric(p, o, vx):
    """SeriesSolve._solve_numeric: the current [A] of several laws in series at chain voltage vx."""
    lo, hi = p[o + 22], p[o + 23]
    if lo <= vx <= hi:
        return 0.0
    v_round = 4e-16 * abs(vx)
    floor = p[o + 24]
    n = int(p[o + 20])
    if vx < lo and math.isfinite(floor):
        if floor == 0.0:
            return 0.0
        edge = floor * (1.0 - 1e-12)
        g_edge = total_voltage(p, o, edge) - vx
        if g_edge >= 0.0:
            return edge
        half = 0.5 * floor
        g_half = total_voltage(p, o, half) - vx
        if g_half < 0.0:
            upper = _min_abs_current(p, o, vx)
            lower = _min_abs_current(p, o, vx / n)
            if abs(half) < upper:
                upper = abs(half)
            if 1e-300 > lower:
                lower = 1e-300
            if lower < upper:
                g_up = g_half if upper == abs(half) else total_voltage(p, o, -upper) - vx
                g_low = total_voltage(p, o, -lower) - vx
                if 0.0 < g_up <= v_round and g_low >= 0.0:
                    return -upper
                if g_up <= 0.0 <= g_low:
                    return newton(p, o, vx, v_round, -upper, -lower, g_up, True, g_low, True, -upper, True)
            return solve_reverse(p, o, vx, floor, g_edge, 0.0, False)
        return solve_reverse(p, o, vx, floor, g_edge, g_half, True)
    sign = 1.0 if vx > hi else -1.0
    upper = _min_abs_current(p, o, vx)
    lower = _min_abs_current(p, o, vx / n)
    if math.isfinite(upper) and math.isfinite(lower) and upper > 0:
        g_up = total_voltage(p, o, sign * upper) - vx
        if 0.0 <= g_up * sign <= v_round:
            return sign * upper
        g_low = total_voltage(p, o, sign * lower) - vx
        if g_up * sign >= 0 and g_low * sign <= 0:
            x1, x2 = sign * lower, sign * upper
            lo_, hi_ = (x2, x1) if x2 < x1 else (x1, x2)  # sorted(), as the Python solve
            g_a, g_b = (g_low, g_up) if sign > 0 else (g_up, g_low)
            return newton(p, o, vx, v_round, lo_, hi_, g_a, True, g_b, True, 0.0, False)
    a, b = 0.0, sign * 1e-6
    while abs(b) < 1e300:
        gb = total_voltage(p, o, b) - vx
        if gb * sign >= 0:
            return newton(p, o, vx, v_round, pymin(a, b), pymax(a, b), 0.0, False, 0.0, False, 0.0, False)
        if math.isnan(gb):
            break
        a, b = b, b * 4.0
    return sign * math.inf


@jit
def solve_varistor_rest(p, o, vx):
    """SeriesSolve._solve_varistor_rest: the current [A] of one varistor (law record ``big``)
    and piecewise-linear laws summed in the rest pieces, at chain voltage vx: Newton's method in
    s = ln|i| on |V(i)| + r·|i| = |w| from the smaller current either part alone carries (the
    general series solve where that is not a positive float or after 100 steps)."""
    vf, rf, vr, rr = p[o + 8], p[o + 9], p[o + 10], p[o + 11]
    if vr <= vx <= vf:
        return 0.0
    if vx > vf:
        w, r = vx - vf, rf
    else:
        w, r = vx - vr, rr
    sign, aw = math.copysign(1.0, w), abs(w)
    lo_ = _law_off(o, int(p[o + 21]))
    hi = abs(law_current(p, lo_, w))
    if r > 0:
        hi = pymin(hi, aw / r)
    if not 0.0 < hi < math.inf:
        return solve_numeric(p, o, vx)
    v_round = 4e-16 * abs(vx)
    s = math.log(hi)
    for _ in range(100):
        i = sign * math.exp(s)
        g = abs(law_voltage(p, lo_, i)) + r * abs(i) - aw
        if g <= v_round:
            return i
        ds = g / (abs(law_log_slope(p, lo_, i)) + r * abs(i))
        s -= ds
        if ds <= 1e-14:
            return sign * math.exp(s)
    return solve_numeric(p, o, vx)


@jit
def _shockley_side(p, o, vx):
    """Chain.current_at of a Shockley chain: offset of the conducting diode's record, or −1."""
    if vx > p[o + 8]:
        return o + 12
    if vx < p[o + 10]:
        return o + 16
    return -1


@jit
def chain_current(p, o, voltage, v_cap):
    """Chain.current_at [A] at chain voltage [V] (less the snubber capacitor's v_cap)."""
    vx = voltage - v_cap
    kind = int(p[o])
    if kind == CH_PIECES:
        return pwl_current(p[o + 4], p[o + 5], p[o + 6], p[o + 7], vx)
    if kind == CH_SHOCKLEY:
        d = _shockley_side(p, o, vx)
        if d < 0:
            return 0.0
        ref = p[o + 8] if d == o + 12 else p[o + 10]
        return shockley_current(p[d], p[d + 1], p[d + 2], p[d + 3], vx - ref)
    if kind == CH_VARISTOR:
        return law_current(p, _law_off(o, 0), vx)
    if kind == CH_SMOOTH_REST:
        return solve_varistor_rest(p, o, vx)
    return solve_numeric(p, o, vx)


@jit
def chain_conductance(p, o, voltage, v_cap):
    """Chain.conductance_at [S] without the current known (solved here where needed)."""
    return chain_conductance_at(p, o, voltage, v_cap, 0.0, False)


@jit
def chain_conductance_at(p, o, voltage, v_cap, current, has_current):
    """Chain.conductance_at [S]: exact for pieces, the Shockley chain and the numeric solve (at
    ``current`` where ``has_current``: the chain's current there, already solved); a central
    difference (h = 1e-6·max(|vx|, 1)) for a varistor alone or with a linear rest."""
    vx = voltage - v_cap
    kind = int(p[o])
    if kind == CH_PIECES:
        return pwl_slope(p[o + 4], p[o + 5], p[o + 6], p[o + 7], vx)
    if kind == CH_SHOCKLEY:
        d = _shockley_side(p, o, vx)
        if d < 0:
            return 0.0
        i = current if has_current else chain_current(p, o, voltage, v_cap)
        den = p[d] / pymax(p[d + 1] + i, 1e-300) + p[d + 2]
        return 1.0 / den if den > 0 else math.inf
    if kind == CH_NUMERIC and int(p[o + 20]) > 0:
        i = current if has_current else chain_current(p, o, voltage, v_cap)
        if i == 0.0 or not math.isfinite(i):
            return 0.0 if i == 0.0 else math.inf
        r = _sum_slope(p, o, i)
        return 1.0 / r if r > 0 else math.inf
    h = 1e-6 * pymax(abs(vx), 1.0)
    return (chain_current(p, o, vx + h, 0.0) - chain_current(p, o, vx - h, 0.0)) / (2 * h)


@jit
def chain_powers(p, o, current, voltage, v_cap, exact, out, m):
    """Chain.powers_at: power [W] in each law of the chain, written to out[m:m + n_laws].
    ``exact``: a piecewise-linear chain uses its laws' unregularised pieces (the node is pinned
    at the law's exact voltage); a non-finite voltage (a blocking piece met by a trial state)
    books no power. Other chains give the residual voltage to one law (the smooth one, or the
    one with the highest reverse floor)."""
    n = int(p[o + 20])
    if current == 0.0:
        for j in range(n):
            out[m + j] = 0.0
        return
    if int(p[o]) == CH_PIECES:
        for j in range(n):
            lo_ = _law_off(o, j)
            if exact:
                v = law_exact_voltage(p, lo_, current)
            else:
                v = pwl_voltage(p[lo_ + 2], p[lo_ + 3], p[lo_ + 4], p[lo_ + 5], current)
            out[m + j] = v * current if math.isfinite(v) else 0.0
        return
    big = int(p[o + 21])
    s = 0.0
    for j in range(n):
        if j != big:
            v = law_voltage(p, _law_off(o, j), current)
            out[m + j] = v
            s += v
    out[m + big] = (voltage - v_cap) - s
    for j in range(n):
        out[m + j] = out[m + j] * current
