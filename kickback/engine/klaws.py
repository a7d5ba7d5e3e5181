"""Element laws of the compiled circuit (:mod:`kickback.engine.kcircuit`): numba functions of plain floats.

Each function is the compiled twin of a scalar method of :mod:`kickback.models` (same branches,
same order of operations, so the same bits up to the library's elementary functions):
``LinearPieces.current_at/slope_at/voltage_at``, ``ShockleyDiode.current_at/voltage_at``,
``Varistor.current_at/voltage_at/resistance_at``. One law is a record of :data:`LAW_WIDTH` floats
in the parameter array (see :func:`law_record`), its kind by an integer code.

numba cannot call :func:`scipy.special.wrightomega`, which ``ShockleyDiode.current_at`` uses for a
diode with series resistance: :func:`wright_omega` solves ω + ln ω = z for real z instead
(Newton's method from the asymptotic start, to rounding; agrees with scipy's to a few units in the
last place, ``tests/test_kcircuit.py``).

References
----------
R. M. Corless and D. J. Jeffrey, "The Wright ω function", AISC 2002 (ω + ln ω = z, its
asymptotics ω ≈ e^z for z → −∞ and ω ≈ z − ln z for z → +∞).
T. C. Banwell and A. Jayakumar, Electronics Letters 36(4), 2000 (the diode with series
resistance in closed form). L. M. Levinson and H. R. Philipp, Am. Ceram. Soc. Bull. 65(4), 1986
(the varistor's power law).
"""

from __future__ import annotations

import math

from kickback.engine.radau5_jit import jit
from kickback.models import LinearPieces, ShockleyDiode, Varistor

#: law codes
LAW_PWL, LAW_SHOCKLEY, LAW_VARISTOR = 0, 1, 2
#: floats per law record: code, i_floor, 4 law parameters, 4 exact (unregularised) pieces, 2 spare
LAW_WIDTH = 12
#: the varistor's CURRENT_CAP (× I_1), as in models.breakdown
VARISTOR_CAP = Varistor.CURRENT_CAP


def law_record(law, exact_pieces) -> list[float]:
    """The :data:`LAW_WIDTH` floats of one element law (``exact_pieces``: its unregularised
    piecewise-linear law, for the pinned element power; None for a smooth law)."""
    p = law.pieces()
    if p is not None:
        e = exact_pieces if exact_pieces is not None else p
        return [float(LAW_PWL), law.i_floor, p.v_fwd, p.r_fwd, p.v_rev, p.r_rev,
                e.v_fwd, e.r_fwd, e.v_rev, e.r_rev, 0.0, 0.0]
    if isinstance(law, ShockleyDiode):
        return [float(LAW_SHOCKLEY), law.i_floor, law.a, law.i_s, law.r_s, law._log_k] + [0.0] * 6
    if isinstance(law, Varistor):
        return [float(LAW_VARISTOR), law.i_floor, law.v1, law.alpha, law.i1, law.x_cap] + [0.0] * 6
    raise TypeError(f"no compiled form of the law {type(law).__name__}")


def pieces_record(p: LinearPieces) -> list[float]:
    return [p.v_fwd, p.r_fwd, p.v_rev, p.r_rev]


# --------------------------------------------------------------------------- Python's min/max
@jit
def pymax(a, b):
    """Python's ``max(a, b)`` of two floats (``a`` unless ``b > a``: the same result for a NaN)."""
    return b if b > a else a


@jit
def pymin(a, b):
    """Python's ``min(a, b)`` of two floats (``a`` unless ``b < a``)."""
    return b if b < a else a


# --------------------------------------------------------------------------- piecewise linear
@jit
def pwl_current(vf, rf, vr, rr, v):
    """LinearPieces.current_at: exact, ±inf on a vertical piece."""
    if v > vf:
        return (v - vf) / rf if rf > 0 else math.inf
    if v < vr:
        return (v - vr) / rr if rr > 0 else -math.inf
    return 0.0


@jit
def pwl_slope(vf, rf, vr, rr, v):
    """LinearPieces.slope_at [S] (inf on a vertical piece)."""
    if v > vf:
        return 1.0 / rf if rf > 0 else math.inf
    if v < vr:
        return 1.0 / rr if rr > 0 else math.inf
    return 0.0


@jit
def pwl_voltage(vf, rf, vr, rr, i):
    """LinearPieces.voltage_at [V]."""
    if i > 0:
        return vf + rf * i
    if i < 0:
        return vr + rr * i
    return pymin(pymax(0.0, vr), vf)


# --------------------------------------------------------------------------- Shockley diode
@jit
def wright_omega(z):
    """Real Wright ω: the root ω > 0 of ω + ln ω = z (nan for nan, inf for inf, 0 where e^z
    underflows), i.e. ω·e^ω = e^z.

    z < 0: Halley's method on f(ω) = ω·e^ω − x, x = e^z (every term relative to x: the residual
    z − ω − ln ω would lose |z|·ε to cancellation), from ω = x·(1 − x) (the series
    ω = x − x² + 3x³/2 − …, Corless et al. 1996) or 1 + (z − 1)/2 + (z − 1)²/16; z ≥ 0: from
    z − ln z (or the same quadratic), the fourth-order iteration of Fritsch, Shafer and Crowley
    (Comm. ACM 16(2), 1973; from memory) on r = z − ω − ln ω:
    ω ← ω·(1 + r/(1 + ω)·(q − r/2)/(q − r)), q = (1 + ω)(1 + ω + 2r/3), Newton's step beyond
    ω = 1e100 (q would overflow). Both stop after a correction below 1e-6 relative (the next
    one is below rounding)."""
    if z != z:
        return z
    if z == math.inf:
        return math.inf
    if z < -50.0:
        # ω = e^z·(1 − e^z + …): the correction is below 2e-22 relative
        return math.exp(z)
    if z < 0.0:
        x = math.exp(z)
        w = x * (1.0 - x) if z < -2.0 else 1.0 + 0.5 * (z - 1.0) + (z - 1.0) * (z - 1.0) / 16.0
        for _ in range(20):
            ew = math.exp(w)
            f = w * ew - x
            d1 = ew * (1.0 + w)
            wn = w - f / (d1 - 0.5 * f * (2.0 + w) / (1.0 + w))
            if not wn > 0.0:
                wn = 0.5 * w
            if abs(wn - w) <= 1e-6 * wn:
                return wn
            w = wn
        return w
    w = z - math.log(z) if z >= 1.0 else 1.0 + 0.5 * (z - 1.0) + (z - 1.0) * (z - 1.0) / 16.0
    for _ in range(20):
        r = z - w - math.log(w)
        wp = 1.0 + w
        if w < 1e100:
            q = wp * (wp + 2.0 * r / 3.0)
            wn = w * (1.0 + r / wp * (q - 0.5 * r) / (q - r))
        else:
            wn = w * (1.0 + r / wp)
        if not wn > 0.0:
            wn = 0.5 * w
        if abs(wn - w) <= 1e-6 * wn:
            return wn
        w = wn
    return w


@jit
def shockley_current(a, i_s, r_s, log_k, v):
    """ShockleyDiode.current_at [A]: i_s·expm1(v/a) without series resistance (inf past 700·a),
    else (a/r_s)·ω(ln(r_s·I_s/a) + (v + r_s·I_s)/a) − I_s."""
    if r_s == 0.0:
        x = v / a
        return i_s * math.expm1(x) if x < 700 else math.inf
    z = log_k + (v + r_s * i_s) / a
    return a / r_s * wright_omega(z) - i_s


@jit
def shockley_voltage(a, i_s, r_s, i):
    """ShockleyDiode.voltage_at [V], the law's floor −I_s clipped at −I_s·(1 − 1e-16)."""
    return a * math.log1p(pymax(i / i_s, -1.0 + 1e-16)) + r_s * i


# --------------------------------------------------------------------------- varistor
@jit
def varistor_current(v1, alpha, i1, x_cap, v):
    """Varistor.current_at [A] (the power law, continued along its tangent past x_cap)."""
    x = abs(v / v1)
    if x <= x_cap:
        y = x ** alpha
    else:
        y = VARISTOR_CAP * (1.0 + alpha * (x / x_cap - 1.0))
    return math.copysign(i1 * y, v) if v else 0.0


@jit
def varistor_voltage(v1, alpha, i1, x_cap, i):
    """Varistor.voltage_at [V]."""
    if not i:
        return 0.0
    y = abs(i / i1)
    if y <= VARISTOR_CAP:
        x = y ** (1.0 / alpha)
    else:
        x = x_cap * (1.0 + (y / VARISTOR_CAP - 1.0) / alpha)
    return math.copysign(v1 * x, i)


@jit
def varistor_resistance(v1, alpha, i1, x_cap, i):
    """Varistor.resistance_at [Ω] at i ≠ 0, in logarithms (inf beyond the largest float)."""
    y = abs(i / i1)
    if y <= VARISTOR_CAP:
        ln_r = math.log(v1 / (alpha * i1)) + (1.0 / alpha - 1.0) * math.log(y)
        return math.exp(ln_r) if ln_r < 709.0 else math.inf
    return v1 * x_cap / (alpha * VARISTOR_CAP * i1)


# --------------------------------------------------------------------------- by record
@jit
def law_voltage(p, o, i):
    """SeriesSolve._law_voltage: voltage [V] of the law at record offset ``o`` at current i."""
    code = int(p[o])
    if code == LAW_PWL:
        return pwl_voltage(p[o + 2], p[o + 3], p[o + 4], p[o + 5], i)
    if code == LAW_SHOCKLEY:
        return shockley_voltage(p[o + 2], p[o + 3], p[o + 4], i)
    return varistor_voltage(p[o + 2], p[o + 3], p[o + 4], p[o + 5], i)


@jit
def law_exact_voltage(p, o, i):
    """The law's unregularised piecewise-linear voltage [V] (Chain.exact_pieces)."""
    return pwl_voltage(p[o + 6], p[o + 7], p[o + 8], p[o + 9], i)


@jit
def law_current(p, o, v):
    """SeriesSolve._law_current: current [A] of the law alone at voltage v."""
    code = int(p[o])
    if code == LAW_PWL:
        return pwl_current(p[o + 2], p[o + 3], p[o + 4], p[o + 5], v)
    if code == LAW_SHOCKLEY:
        return shockley_current(p[o + 2], p[o + 3], p[o + 4], p[o + 5], v)
    return varistor_current(p[o + 2], p[o + 3], p[o + 4], p[o + 5], v)


@jit
def law_slope(p, o, i):
    """SeriesSolve._law_slope: incremental resistance dv/di [Ω] at i ≠ 0."""
    code = int(p[o])
    if code == LAW_PWL:
        return p[o + 3] if i > 0 else p[o + 5]
    if code == LAW_SHOCKLEY:
        return p[o + 2] / pymax(p[o + 3] + i, 1e-300) + p[o + 4]
    return varistor_resistance(p[o + 2], p[o + 3], p[o + 4], p[o + 5], i)


@jit
def law_log_slope(p, o, i):
    """SeriesSolve._law_log_slope: i·dv/di [V] (a varistor's v/α below its cap)."""
    if int(p[o]) == LAW_VARISTOR and abs(i / p[o + 4]) <= VARISTOR_CAP:
        return varistor_voltage(p[o + 2], p[o + 3], p[o + 4], p[o + 5], i) / p[o + 3]
    return i * law_slope(p, o, i)
