"""Branch currents of piecewise-linear laws and the exact node voltage where they balance.

The current of a :class:`~kickback.engine.batch_laws.Law` at branch voltage ``u`` is the sum of
its segments' clipped contributions, each anchored at zero current,

.. math:: I(u) = \\sum_k \\left(\\mathrm{clip}\\big((u - V_k)/r_k,\\ I_{lo,k},\\ I_{hi,k}\\big) - a_k\\right),

(``a_k`` the end of segment k nearest zero current; a vertical segment jumps from ``I_lo`` to
``I_hi`` at ``V_k``), which is exact, monotone and insensitive to the one-ulp gaps chords leave
between segments. The node voltage solving ``Σ I_b(v − off_b) + g·v = target`` is found exactly:
the residual is nondecreasing in v, so bisection over the sorted kinks finds the first one at
which it is ≥ 0; the kink or the linear piece before it holds the root, and a root on a vertical
jump is the vertical law's own voltage.
"""

from __future__ import annotations

import numpy as np


def law_current(law, u, side: int = 1, limit=None):
    """Current [A] of ``law`` at branch voltage ``u`` [V] (G,); ``side`` −1/+1: left/right limit at a
    vertical segment; ``limit`` (G,) caps the current (the channel during the fall).

    All segments at once, as (G, S) arrays (a fitted law has a few dozen)."""
    seg = [k for k, kind in enumerate(law.kinds) if kind != "block"]
    u = np.asarray(u, dtype=float)
    if not seg:
        total = np.zeros_like(u, dtype=float)
    else:
        V, r, lo, hi = law.V[:, seg], law.r[:, seg], law.Ilo[:, seg], law.Ihi[:, seg]
        uu = u[:, None]
        vert = r == 0
        with np.errstate(invalid="ignore", divide="ignore"):
            lin = np.clip((uu - V) / np.where(vert, 1.0, r), lo, hi)
        at = lo if side < 0 else hi
        tol = 1e-12 * np.maximum(1.0, np.abs(np.where(np.isfinite(V), V, 0.0)))
        f = np.where(vert, np.where(uu < V - tol, lo, np.where(uu > V + tol, hi, at)), lin)
        anchor = np.where(lo >= 0, lo, np.where(hi <= 0, hi, 0.0))
        total = np.zeros_like(u, dtype=float)
        for k in range(len(seg)):  # summed in segment order, as one segment after another
            total = total + (f[:, k] - anchor[:, k])
    if limit is not None:
        total = np.minimum(total, limit)
    return total


def law_voltage_at(law, current):
    """Branch voltage [V] where ``law`` carries ``current`` [A] ≥ 0 (for the channel's limit kink)."""
    out = np.full(current.shape, np.nan)
    for k, kind in enumerate(law.kinds):
        if kind == "block":
            continue
        inside = (law.Ilo[:, k] <= current) & (current <= law.Ihi[:, k])
        out = np.where(inside & np.isnan(out), law.V[:, k] + law.r[:, k] * np.where(np.isfinite(current), current,
                                                                                      0.0), out)
    return out


def _residual(laws, offs, v, target, g_extra, side, limits, active, exact=None):
    """Σ I_b(v − off_b) + g·v − target; ``exact`` (branch (G,), u (G,)): that branch at u itself."""
    res = g_extra * v - target
    for b, law in enumerate(laws):
        if law is None:
            continue
        u = v - offs[b] if exact is None else np.where(exact[0] == b, exact[1], v - offs[b])
        cur = law_current(law, u, side, limits[b])
        res = res + (cur if active[b] is None else np.where(active[b], cur, 0.0))
    return res


def solve_node(laws, offs, target, g_extra=0.0, limits=None, active=None):
    """Node voltage balancing the branch currents.

    Parameters
    ----------
    laws : list of Law or None — the branches (None: absent)
    offs : list of (G,) — [V] far-end voltage of each branch
    target : (G,) — [A] current into the node
    g_extra : (G,) or float — [S] an extra linear conductance to ground (the coil in the on-state)
    limits : list of (G,) or None — current caps per branch (None: no cap)
    active : list of (G,) bool or None — where a branch is present (None: everywhere)

    Returns
    -------
    v : (G,) — [V]
    ok : (G,) bool — a solution exists (something takes the current)
    pin : (G,) int — branch whose vertical law holds the node at v (−1: none)
    currents : list of (G,) — [A] branch currents at v (the pinned branch takes the remainder)
    u_in : (G,) — [V] a voltage inside the open interval between knots that holds
        ``v`` (``v`` itself where it sits on a knot): every branch's state there is the state at
        ``v``, whereas ``v`` may round onto the interval's end knot (a current of 1e-13 A into a
        0.05 Ω avalanche piece moves the node by less than one unit in the last place at 260 V)
    """
    G = target.shape[0]
    g_extra = np.broadcast_to(np.asarray(g_extra, float), (G,))
    limits = limits if limits is not None else [None] * len(laws)
    active = active if active is not None else [None] * len(laws)
    knots, owner, own_u = [], [], []
    for b, law in enumerate(laws):
        if law is None:
            continue
        here = []
        for k in range(law.n_states):
            here += [law.ulo[:, k], law.uhi[:, k]]
        if limits[b] is not None:
            here.append(law_voltage_at(law, limits[b]))
        if active[b] is not None:
            here = [np.where(active[b], x, np.nan) for x in here]
        knots += [u + offs[b] for u in here]
        own_u += here
        owner += [b] * len(here)
    kn = np.stack(knots, axis=1) if knots else np.zeros((G, 0))
    kn = np.where(np.isfinite(kn), kn, np.nan)
    order = np.argsort(kn, axis=1, kind="stable")
    kn = np.take_along_axis(kn, order, axis=1)
    # each knot remembers its branch and its voltage in that branch's own frame: at a knot the branch
    # is evaluated there exactly, since (u + off) − off may miss u by an ulp, which a 1 mΩ piece turns
    # into 1e-12 A — more than a root a few attoseconds into the fall asks for
    own_b = np.take_along_axis(np.broadcast_to(np.array(owner, int), kn.shape), order, axis=1) if knots else \
        np.zeros((G, 0), int)
    own_u = np.take_along_axis(np.stack(own_u, axis=1), order, axis=1) if knots else np.zeros((G, 0))
    nk = kn.shape[1]
    big = np.nanmax(np.abs(np.concatenate([kn, np.ones((G, 1))], axis=1)), axis=1)
    D = np.maximum(big, 1.0)
    valid = np.isfinite(kn)
    safe = np.where(valid, kn, 0.0)
    v = np.full(G, np.nan)
    u_in = np.full(G, np.nan)
    nvalid = valid.sum(axis=1)
    rows = np.arange(G)

    def res_at(j, side):
        # the residual at knot j of every row (+inf past the valid knots, which sort last)
        jj = np.minimum(j, max(nk - 1, 0))
        ok_j = (j < nvalid) & valid[rows, jj]
        r = _residual(laws, offs, np.where(ok_j, safe[rows, jj], 0.0), target, g_extra, side, limits, active,
                      exact=(own_b[rows, jj], own_u[rows, jj]))
        return np.where(ok_j, r, np.inf)

    if nk:
        # the first knot whose right-hand residual is ≥ 0: the residual is nondecreasing in v (every
        # law's current is), so bisection finds the knot a scan over all knots would
        lo = np.zeros(G, int)
        hi = nvalid.copy()
        while np.any(lo < hi):
            mid = (lo + hi) // 2
            c = res_at(mid, 1) >= 0
            live = lo < hi
            hi = np.where(live & c, mid, hi)
            lo = np.where(live & ~c, mid + 1, lo)
        j = lo
        has = j < nvalid
        j = np.minimum(j, nk - 1)
        rlj = res_at(j, -1)
        at = has & (rlj <= 0)
        v = np.where(at, kn[rows, j], v)
        jm = np.maximum(j - 1, 0)
        inter = has & ~at & (j > 0)
        rrm = res_at(jm, 1)
        with np.errstate(invalid="ignore", divide="ignore"):
            vi = kn[rows, jm] - rrm * (kn[rows, j] - kn[rows, jm]) / (rlj - rrm)
        v = np.where(inter, vi, v)
        u_in = np.where(inter, 0.5 * (kn[rows, jm] + kn[rows, j]), u_in)
        below = has & ~at & (j == 0)
        k0 = np.where(below, kn[:, 0], 0.0)
        r0 = _residual(laws, offs, k0 - D, target, g_extra, 1, limits, active)
        with np.errstate(invalid="ignore", divide="ignore"):
            rl0 = res_at(np.zeros(G, int), -1)
            slope = (rl0 - r0) / D
            vb = k0 - rl0 / slope
        v = np.where(below & (slope > 0), vb, v)
        u_in = np.where(below, k0 - 0.5 * D, u_in)
        above = ~has & (nvalid > 0)
        last = np.maximum(nvalid - 1, 0)
        kl = np.where(above, kn[rows, last], 0.0)
        rl = res_at(last, 1)
        r1 = _residual(laws, offs, kl + D, target, g_extra, 1, limits, active)
        with np.errstate(invalid="ignore", divide="ignore"):
            slope = (r1 - rl) / D
            va = kl - rl / slope
        v = np.where(above & (slope > 0) & np.isfinite(rl), va, v)
        u_in = np.where(above, kl + 0.5 * D, u_in)
        jump = at & (rlj < res_at(j, 1))
    else:
        jump = np.zeros(G, bool)
    none = nvalid == 0
    if np.any(none):
        r0 = _residual(laws, offs, np.zeros(G), target, g_extra, 1, limits, active)
        r1 = _residual(laws, offs, D, target, g_extra, 1, limits, active)
        with np.errstate(invalid="ignore", divide="ignore"):
            slope = (r1 - r0) / D
            vn = -r0 / slope
        v = np.where(none & (slope > 0), vn, v)
    ok = np.isfinite(v)
    v = np.where(ok, v, 0.0)
    u_in = np.where(np.isfinite(u_in), u_in, v)
    pin = np.full(G, -1)
    for b, law in enumerate(laws):
        if law is None:
            continue
        for k, kind in enumerate(law.kinds):
            if kind != "seg":
                continue
            vert = (law.r[:, k] == 0) & (np.abs(v - offs[b] - law.V[:, k]) <= 1e-12 * np.maximum(1.0, np.abs(v)))
            if active[b] is not None:
                vert &= active[b]
            pin = np.where(jump & (pin < 0) & vert, b, pin)
    currents = []
    for b, law in enumerate(laws):
        if law is None:
            currents.append(np.zeros(G))
            continue
        cur = np.where(pin == b, 0.0, law_current(law, v - offs[b], 1, limits[b]))
        currents.append(cur if active[b] is None else np.where(active[b], cur, 0.0))
    rest = target - g_extra * v - sum(currents)
    for b in range(len(laws)):
        currents[b] = np.where(pin == b, rest, currents[b])
    return v, ok, pin, currents, u_in
