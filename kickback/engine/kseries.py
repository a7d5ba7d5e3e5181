"""The series solves of the compiled circuit's clamp chains (numba): one current, voltages add.

The compiled twins of :class:`kickback.chainsolve.SeriesSolve`: ``_solve_numeric`` (Newton's
method in ln|i| kept in a shrinking bracket, the reverse solve towards −I_s in ln(1 + i/I_s)) and
``_solve_varistor_rest`` (a varistor beside piecewise-linear laws: Newton's descent in ln|i|
from the smaller current either part alone carries), the same branches and safeguards in the
same order. They work on a chain record of the parameter array at offset ``o`` (layout:
:func:`kickback.engine.kchain.chain_record`: rest pieces at o+8..11, law count o+20, the smooth
law's index o+21, band o+22..23, reverse floor o+24; the law records from o + CHAIN_HEAD).

References
----------
C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 2 (series
connection: one current, voltages add). W. H. Press et al., Numerical Recipes, 3rd ed., §9.4
(Newton's method safeguarded by bisection; from memory).
"""

from __future__ import annotations

import math

from kickback.engine import kcache
from kickback.engine.klaws import (
    LAW_WIDTH,
    law_current,
    law_log_slope,
    law_slope,
    law_voltage,
    pymax,
    pymin,
)
from kickback.engine.radau5_jit import jit

kcache.register()  # the cache of these functions follows klaws.py too

#: floats before a chain's law records (see kchain.chain_record)
CHAIN_HEAD = 28
_LN_1E12 = math.log(1e-12)
_LN_HALF = math.log(0.5)


@jit
def law_off(o, j):
    return o + CHAIN_HEAD + j * LAW_WIDTH


@jit
def total_voltage(p, o, i):
    """SeriesSolve._total_voltage: Σ v_k(i) over the chain's laws [V]."""
    s = 0.0
    for j in range(int(p[o + 20])):
        s += law_voltage(p, law_off(o, j), i)
    return s


@jit
def sum_log_slope(p, o, i):
    s = 0.0
    for j in range(int(p[o + 20])):
        s += law_log_slope(p, law_off(o, j), i)
    return s


@jit
def sum_slope(p, o, i):
    s = 0.0
    for j in range(int(p[o + 20])):
        s += law_slope(p, law_off(o, j), i)
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
        dv_ds = sum_log_slope(p, o, x) if x != 0 else 0.0
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
                d_other = sum_log_slope(p, o, other)
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
        slope = sum_slope(p, o, i) * di_dw if i != 0 else 0.0
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
    m = abs(law_current(p, law_off(o, 0), v))
    for j in range(1, n):
        x = abs(law_current(p, law_off(o, j), v))
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
    lo_ = law_off(o, int(p[o + 21]))
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
