"""Clamp chains of the compiled circuit: current, conductance and element powers (numba).

The compiled twins of :meth:`kickback.chain.Chain.current_at`, ``conductance_at`` and
``powers_at`` (the series solves of :class:`kickback.chainsolve.SeriesSolve` are in
:mod:`kickback.engine.kseries`): the same branches in the same order. A chain is a record at an
offset of the parameter array (:func:`chain_record`), its kind by an integer code, its element
laws as :mod:`klaws` records.

References
----------
C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 2 (series
connection: one current, voltages add).
"""

from __future__ import annotations

import math

from kickback.chain import NO_REST, Chain
from kickback.engine import kcache
from kickback.engine.klaws import (
    law_current,
    law_exact_voltage,
    law_record,
    law_voltage,
    pieces_record,
    pwl_current,
    pwl_slope,
    pwl_voltage,
    pymax,
    shockley_current,
)
from kickback.engine.kseries import CHAIN_HEAD, law_off, solve_numeric, solve_varistor_rest, sum_slope
from kickback.engine.radau5_jit import jit
from kickback.models import ShockleyDiode, Varistor

kcache.register()  # the cache of these functions follows kseries.py and klaws.py too

#: chain kinds: piecewise-linear total; one Shockley diode with a linear rest; a lone varistor;
#: the numeric series solve (several nonlinear laws); one varistor with a linear rest (its Newton
#: descent in ln|i|, SeriesSolve._solve_varistor_rest; conductance by a central difference)
CH_PIECES, CH_SHOCKLEY, CH_VARISTOR, CH_NUMERIC, CH_SMOOTH_REST = 0, 1, 2, 3, 4


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
        return law_current(p, law_off(o, 0), vx)
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
            if not (vx == p[o + 8] and vx == p[o + 10]):
                return 0.0
            d = o + 12 if p[o + 9] <= p[o + 11] else o + 16  # no band: the larger one-sided slope
        i = current if has_current else chain_current(p, o, voltage, v_cap)
        den = p[d] / pymax(p[d + 1] + i, 1e-300) + p[d + 2]
        return 1.0 / den if den > 0 else math.inf
    if kind == CH_NUMERIC and int(p[o + 20]) > 0:
        i = current if has_current else chain_current(p, o, voltage, v_cap)
        if i == 0.0 or not math.isfinite(i):
            return 0.0 if i == 0.0 else math.inf
        r = sum_slope(p, o, i)
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
            lo_ = law_off(o, j)
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
            v = law_voltage(p, law_off(o, j), current)
            out[m + j] = v
            s += v
    out[m + big] = (voltage - v_cap) - s
    for j in range(n):
        out[m + j] = out[m + j] * current
