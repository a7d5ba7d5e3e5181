"""The algebraic switch node of the compiled circuit (no node capacitance), numba.

Without node capacitance the node voltage is not a state: it is solved from the node's current
balance at every evaluation. These are the compiled twins of :meth:`Circuit.node_voltage` (the
monotone solve of :func:`kickback.nodebalance.solve_monotone`: the same bracketing over the
vertical laws' voltages, the same tolerances, Newton's method on the branches' conductances
inside the bracket safeguarded by bisection, and where that does not finish Brent's method
with the steps of scipy's ``brentq``), :meth:`Circuit.split_currents` and ``_vertical_at`` (a
vertical law takes what the others leave), the pinned and the floating mode (its forced voltage from
:mod:`kickback.engine.kfloat`) and the algebraic branch of :meth:`Circuit.jacobian` (incl.
``_floating_jacobian``), branch for branch in the same order. ``_vertical_at`` and
``node_conductance`` are in :mod:`kickback.engine.kbase`.

References
----------
R. P. Brent, Algorithms for Minimization without Derivatives, Prentice-Hall 1973, ch. 4
(the bracketed root by inverse interpolation safeguarded by bisection). C. K. Alexander and
M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 3 (Kirchhoff's current law at a node).
W. H. Press et al., Numerical Recipes, 3rd ed., §9.4 (Newton's method safeguarded by bisection;
from memory).
"""

from __future__ import annotations

import math

import numpy as np

from kickback.engine import kcache
from kickback.engine.kbase import (
    CONDUCTING,
    I0,
    INERTIA,
    IW,
    K_EMF,
    MECH,
    N_AFTER,
    N_CHAINS,
    N_DURING,
    PIN_ACTIVE,
    PIN_FLOAT,
    PIN_N,
    PIN_V,
    R_,
    THR_AFTER,
    THR_DURING,
    V_SCALE,
    VISC,
    chain_off,
    coil_current,
    conductances,
    conductances_with,
    currents_at,
    fsum_list,
    in_fall,
    state_gain,
    vertical_at,
)
from kickback.engine.kfloat import forced_voltage
from kickback.engine.klaws import pymax
from kickback.engine.radau5_jit import jit

kcache.register()  # the cache of these functions follows the modules they call into

#: brentq's default rtol (4 × machine epsilon) and iteration limit
_RTOL = 4 * np.finfo(float).eps
_MAXITER = 100


# --------------------------------------------------------------------------- the node solve
@jit
def balance(p, t, v, y, i):
    """Residual [A] of the node's current balance at node voltage v: Σ branch currents − i."""
    return fsum_list(currents_at(p, t, v, y)) - i


@jit
def balance_with_slope(p, t, v, y, i):
    """Circuit.node_voltage's ``with_slope``: the balance's residual [A] and its derivative [S]
    (the branches' conductances at the currents just solved) at node voltage v."""
    vals = currents_at(p, t, v, y)
    return fsum_list(vals) - i, fsum_list(conductances_with(p, t, v, y, vals, True))


@jit
def newton(p, t, y, i, a, b, ra, rb, xtol):
    """nodebalance._newton: the root in [a, b] (ra < 0 < rb) by Newton's method on the
    branches' conductances from the chord's root (the middle where that is not inside),
    safeguarded by bisection (a step leaving the shrinking bracket or not at most half the
    step before last); (root, True), or (nan, False) after 100 iterates."""
    x = a - ra * (b - a) / (rb - ra)
    if not a < x < b:
        x = 0.5 * (a + b)
    step_before = step = b - a
    for _ in range(_MAXITER):
        r, g = balance_with_slope(p, t, x, y, i)
        if r == 0:
            return x, True
        if r < 0:
            a = x
        else:
            b = x
        tol = xtol + _RTOL * abs(x)
        xn = x - r / g if 0 < g < math.inf else math.nan
        if abs(xn - x) <= tol and a <= xn <= b:
            return xn, True
        step_before, step = step, abs(xn - x)
        if not (a < xn < b and step <= 0.5 * step_before):
            xn = 0.5 * (a + b)
            step = abs(xn - x)
        if b - a <= tol:
            return xn, True
        x = xn
    return math.nan, False


@jit
def brent(p, t, y, i, xpre, xcur, fpre, fcur, xtol, rtol):
    """Root of :func:`balance` in [xpre, xcur] (fpre, fcur its values, of opposite signs) by
    Brent's method, stepping as scipy's ``brentq`` does (inverse quadratic or secant step where
    it is short, else bisection), to |step| < (xtol + rtol·|x|)/2."""
    xblk, fblk, spre, scur = 0.0, 0.0, 0.0, 0.0
    for _ in range(_MAXITER):
        if fpre * fcur < 0:
            xblk, fblk = xpre, fpre
            spre = scur = xcur - xpre
        if abs(fblk) < abs(fcur):
            xpre, xcur, xblk = xcur, xblk, xcur
            fpre, fcur, fblk = fcur, fblk, fcur
        delta = (xtol + rtol * abs(xcur)) / 2
        sbis = (xblk - xcur) / 2
        if fcur == 0 or abs(sbis) < delta:
            return xcur
        if abs(spre) > delta and abs(fcur) < abs(fpre):
            if xpre == xblk:
                stry = -fcur * (xcur - xpre) / (fcur - fpre)
            else:
                dpre = (fpre - fcur) / (xpre - xcur)
                dblk = (fblk - fcur) / (xblk - xcur)
                stry = -fcur * (fblk * dblk - fpre * dpre) / (dblk * dpre * (fblk - fpre))
            if 2 * abs(stry) < min(abs(spre), 3 * abs(sbis) - delta):
                spre, scur = scur, stry
            else:
                spre, scur = sbis, sbis
        else:
            spre, scur = sbis, sbis
        xpre, fpre = xcur, fcur
        if abs(scur) > delta:
            xcur += scur
        else:
            xcur += delta if sbis > 0 else -delta
        fcur = balance(p, t, xcur, y, i)
    return xcur


@jit
def bracketed(p, t, y, i, a, b, scale):
    """nodebalance.bracketed: widen [a, b] (infinite ends from ``scale``) until the balance
    changes sign, then the root by :func:`newton` (Brent's method where that does not finish;
    nan where 200 doublings find no bracket: nothing conducts)."""
    span = pymax(scale, 1.0)
    if not math.isfinite(a) and not math.isfinite(b):
        a, b = -span, span
        ra, rb = balance(p, t, a, y, i), balance(p, t, b, y, i)
    elif not math.isfinite(a):
        rb = balance(p, t, b, y, i)
        a = b - span
        ra = balance(p, t, a, y, i)
    elif not math.isfinite(b):
        ra = balance(p, t, a, y, i)
        b = a + span
        rb = balance(p, t, b, y, i)
    else:
        ra, rb = balance(p, t, a, y, i), balance(p, t, b, y, i)
    grow = span
    found = False
    for _ in range(200):
        if ra <= 0 <= rb:
            found = True
            break
        grow *= 2.0
        if ra > 0:
            b, rb = a, ra
            a -= grow
            ra = balance(p, t, a, y, i)
        else:
            a, ra = b, rb
            b += grow
            rb = balance(p, t, b, y, i)
    if not found:
        return math.nan
    if ra == 0:
        return a
    if rb == 0:
        return b
    xtol = 1e-14 * max(1.0, abs(a), abs(b))
    x, ok = newton(p, t, y, i, a, b, ra, rb, xtol)
    if ok:
        return x
    return brent(p, t, y, i, a, b, ra, rb, xtol, _RTOL)


@jit
def solve_node(p, t, y, i):
    """nodebalance.solve_monotone on the node balance: the root, or the vertical law's voltage
    where the balance jumps over zero there (thresholds as Circuit._node_thresholds)."""
    if p[CONDUCTING] != 0.0 or in_fall(p, t):
        o, n = int(p[THR_DURING]), int(p[N_DURING])
    else:
        o, n = int(p[THR_AFTER]), int(p[N_AFTER])
    lower = -math.inf
    for k in range(n):
        x = p[o + k]
        d = 1e-12 * pymax(1.0, abs(x))
        below, above = balance(p, t, x - d, y, i), balance(p, t, x + d, y, i)
        if below > 0:
            return bracketed(p, t, y, i, lower, x - d, p[V_SCALE])
        if above >= 0:
            return x
        lower = x + d
    return bracketed(p, t, y, i, lower, math.inf, p[V_SCALE])


# --------------------------------------------------------------------------- node and split
@jit
def node_voltage(p, t, y):
    """Circuit.node_voltage of an algebraic node [V]: forced (floating), the pin's, or solved."""
    mode = p[PIN_ACTIVE]
    if mode == PIN_FLOAT:
        return forced_voltage(p, t, y)
    if mode != 0.0:
        return p[PIN_V]
    return solve_node(p, t, y, coil_current(p, y[0]))


@jit
def split_currents(p, t, v, y, i):
    """Circuit.split_currents of an algebraic node: branch currents at the solved v [A]; held
    (or floating) the pinned branch (the channel) takes what the others leave, else every law
    vertical at v takes an equal share of it."""
    vals = currents_at(p, t, v, y)
    if p[PIN_ACTIVE] != 0.0:
        n = int(p[PIN_N])
        for k in range(vals.size):
            if not math.isfinite(vals[k]):
                vals[k] = 0.0
        if n:
            vals[n] = 0.0
        vals[n] += i - fsum_list(vals)
        return vals
    vert = vertical_at(p, t, v)
    nv = 0
    rest = 0.0
    for k in range(vals.size):
        if vert[k]:
            nv += 1
        else:
            rest += vals[k]
    if nv:
        rest = i - rest
        for k in range(vals.size):
            if vert[k]:
                vals[k] = rest / nv
    return vals


# --------------------------------------------------------------------------- Jacobian
@jit
def jac_algebraic(t, y, p, jm):
    """The algebraic branch of Circuit.jacobian (and _floating_jacobian) into ``jm`` (zeros):
    v follows i and the capacitor voltages by dv = (di − Σ g_k dv_k)/G; where the node has no
    more than leakage, the larger conductance just either side of v bounds dv/di."""
    v = node_voltage(p, t, y)
    g = conductances(p, t, v, y)
    g0, k0 = state_gain(p, coil_current(p, y[0]))
    mech = p[MECH] != 0.0
    iw = int(p[IW])
    nc = int(p[N_CHAINS])
    if p[PIN_ACTIVE] == PIN_FLOAT:
        dv_dx0 = -p[R_] * g0
        if mech:
            jm[iw, 0] = p[K_EMF] * g0 / p[INERTIA]
            jm[iw, iw] = -p[VISC] / p[INERTIA]
        for k in range(nc):
            o = chain_off(p, k)
            ic = int(p[o + 2])
            if ic < 0:
                continue
            gk, ck = g[2 + k], p[o + 3]
            gk = gk if math.isfinite(gk) else 0.0
            jm[ic, 0] = gk * dv_dx0 / ck
            jm[ic, ic] = -gk / ck
            if mech:
                jm[ic, iw] = -gk * p[K_EMF] / ck
        return jm
    if p[PIN_ACTIVE] != 0.0:
        g[int(p[PIN_N])] = math.inf
    else:
        vert = vertical_at(p, t, v)
        for b in range(g.size):
            if vert[b]:
                g[b] = math.inf
    G = fsum_list(g)
    if mech:
        jm[0, iw] = -k0 * p[K_EMF]
        jm[iw, 0] = p[K_EMF] * g0 / p[INERTIA]
        jm[iw, iw] = -p[VISC] / p[INERTIA]
    if math.isfinite(G) and G < 1e-6 * p[I0] / p[V_SCALE]:
        d = 1e-9 * p[V_SCALE]
        for side in (v - d, v + d):
            gs = fsum_list(conductances(p, t, side, y))
            G = pymax(G, gs) if math.isfinite(gs) else G
    finite = math.isfinite(G) and G > 0
    dv_di = 1.0 / G if finite else 0.0
    jm[0, 0] = -k0 * (p[R_] + dv_di) * g0
    for k in range(nc):
        o = chain_off(p, k)
        ic = int(p[o + 2])
        if ic < 0:
            continue
        gk, ck = g[2 + k], p[o + 3]
        jm[0, ic] = -k0 * (gk / G if finite else 0.0)
        jm[ic, 0] = gk * dv_di * g0 / ck
        for m in range(nc):
            om = chain_off(p, m)
            im = int(p[om + 2])
            if im < 0:
                continue
            dv_m = g[2 + m] / G if finite else 0.0
            jm[ic, im] = gk * (dv_m - (1.0 if m == k else 0.0)) / ck
    return jm
