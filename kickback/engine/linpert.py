"""A nearly affine phase in closed form: the affine solution corrected by its first-order
perturbation, the correction's own error bounded.

An off phase rings on long after every clamp has stopped conducting; a varistor far below its
knee still leaks a current that curves over the ring (1e-10 A against a 1e-12 allowance of
:data:`kickback.engine.linphase.LIN_TOL`), so the affine model ``x' = A·x + b`` is refused and the
ring is stepped. Here the true rates are written ``x' = A·x + b + g(x)`` with the departure ``g``
small, and the path is taken as ``x = x_lin + e`` with the variation-of-constants correction

    e(t) = ∫₀ᵗ exp(A·(t − s)) · g(x_lin(s)) ds

evaluated in the modes of ``A`` on Gauss–Legendre panels no longer than :data:`PANEL_RAD` radians
of any mode. A second iterate ``e₂`` (the same integral of ``g(x_lin + e)``) measures what the
first one leaves out: the iteration contracts by ``ρ = max|e₂ − e|/max|e|``, so the error left in
``e₂`` (the path taken) is below ``ρ·|e₂ − e|/(1 − ρ)`` and the bound used, ``|e₂ − e|/(1 − ρ)``,
holds it with room; with the quadrature's own error estimate (the last Legendre
coefficients of each panel's integrand) it must stay below :data:`PERT_TOL` of each state's scale
along the whole phase, else the caller steps as before. The energies are the true power laws
integrated along the corrected path.

References
----------
E. A. Coddington and N. Levinson, *Theory of Ordinary Differential Equations*, McGraw-Hill 1955,
ch. 3 (variation of constants, successive approximations);
L. N. Trefethen, *Approximation Theory and Approximation Practice*, SIAM 2013, ch. 8 (the decay
of Legendre/Chebyshev coefficients as an error estimate; common practice).
"""

from __future__ import annotations

import numpy as np
from numpy.polynomial import legendre

#: a path whose rates depart from the affine model by more than this many times what
#: ``LIN_TOL`` allows (anywhere along it) is not tried with the correction (a clamp conducting)
PERT_RATIO = 1e12
#: allowed error of the corrected path, relative to each dynamic state's scale (the stepped phase
#: it replaces is integrated at ``CYCLE_RTOL`` = 1e-8)
PERT_TOL = 1e-10
#: the contraction of the successive approximations must be at least this good
PERT_RHO = 0.25
#: longest panel of the correction's quadrature, in radians of the fastest mode (|λ|·h)
PANEL_RAD = 1.0
#: most Gauss–Legendre panels of one corrected phase
MAX_PANELS = 20_000
#: panels of the first check of a long phase
PREFIX = 500
#: passes splitting the panels the correction's integrand is not resolved on
SPLITS = 2

_N = 10
_XI, _WI = legendre.leggauss(_N)
_XI01, _WI01 = 0.5 * (_XI + 1.0), 0.5 * _WI
#: node values → Legendre coefficients of the interpolant (degree _N − 1)
_FIT = np.linalg.inv(legendre.legvander(_XI, _N - 1))
#: node values → the interpolant's integral from the panel start to each node, on [0, 1]
_TO_NODE = 0.5 * legendre.legvander(_XI, _N) @ np.array(
    [legendre.legint(_FIT[:, m], lbnd=-1.0) for m in range(_N)]).T
_INTEG = np.array([legendre.legint(_FIT[:, m], lbnd=-1.0) for m in range(_N)]).T
#: largest exponent span summed in one block (exp of it stays finite)
_BLOCK_EXP = 200.0


def refine(edges: np.ndarray, lam: np.ndarray, until: float) -> np.ndarray | None:
    """Panel edges [s] (absolute) split so that no panel starting before ``until`` exceeds
    :data:`PANEL_RAD` / max|λ| (where the departure from the model lives) and none after it
    exceeds :data:`PANEL_RAD` / max|Re λ| (the forcing is within ``LIN_TOL`` there: the correction
    is carried by the modes); None beyond :data:`MAX_PANELS`."""
    fast = float(np.max(np.abs(lam))) if lam.size else 0.0
    damp = float(np.max(np.abs(lam.real))) if lam.size else 0.0
    h = np.diff(edges)
    rate = np.where(edges[:-1] < until, fast, damp)
    k = np.maximum(1, np.ceil(h * rate / PANEL_RAD)).astype(int)
    if int(np.sum(k)) > MAX_PANELS:
        return None
    first = np.cumsum(k) - k
    at = np.arange(int(np.sum(k))) - np.repeat(first, k)
    out = np.append(np.repeat(edges[:-1], k) + np.repeat(h / k, k) * at, edges[-1])
    return np.unique(out)


def _mul(A: np.ndarray, X: np.ndarray) -> np.ndarray:
    """``A @ X`` for a small ``A`` and a long ``X`` (many columns) without BLAS: its threads
    spin on such skinny products (3 ms of CPU for a 2 × 2 by 2 × 18000 product, 0.2 ms here)."""
    return np.einsum("ij,jn->in", A, X)


def _per_panel(q: np.ndarray, M: np.ndarray) -> np.ndarray:
    """``q`` (modes × panels × nodes) times ``M`` (nodes × k), panel by panel (without BLAS)."""
    # (a complex M: numpy's mixed complex × real product takes a slow path)
    return np.einsum("mpj,jk->mpk", q, M)


def nodes(edges: np.ndarray) -> np.ndarray:
    """Gauss–Legendre nodes [s] of every panel, panel by panel."""
    return (edges[:-1, None] + np.diff(edges)[:, None] * _XI01[None, :]).ravel()


class Correction:
    """First-order correction ``e(t)`` of one phase, dense: in each panel the modal state at its
    start plus the integral of the interpolated modal integrand."""

    def __init__(self, lam, V, edges, G):
        """``G``: departure of the true rates (n × N, at :func:`nodes` of ``edges``)."""
        self.lam, self.V, self.edges = lam, V, edges
        P = edges.size - 1
        h = np.diff(edges)
        m = lam.size
        modal = _mul(np.linalg.inv(V), G).reshape(m, P, _N)
        # integrand in each panel's own clock: exp(−λ·(s − a))·h(s)
        decay = np.exp(-lam[:, None, None] * (h[None, :, None] * _XI01[None, None, :]))
        self.q = modal * decay
        S = h[None, :] * _per_panel(self.q, _WI01[:, None])[:, :, 0]  # (m, P): the panel's integral
        # modal state at each panel start: Z_p = Σ_{k<p} exp(λ(a_p − a_k))·S_k, in blocks whose
        # exponent range stays finite
        a = edges[:-1]
        Z = np.zeros((m, P + 1), dtype=complex)
        start, acc = 0, np.zeros(m, dtype=complex)
        rate = max(float(np.max(np.abs(lam.real))), 1e-300)
        while start < P:
            stop = int(np.searchsorted(a, a[start] + _BLOCK_EXP / rate, side="right"))
            stop = max(stop, start + 1)
            rel = edges[start:stop + 1] - a[start]
            grow = np.exp(-lam[:, None] * rel[None, :-1])
            csum = np.cumsum(grow * S[:, start:stop], axis=1)
            Z[:, start + 1:stop + 1] = np.exp(lam[:, None] * rel[None, 1:]) * (acc[:, None] + csum)
            acc = Z[:, stop].copy()
            start = stop
        self.Z = Z
        self.end = np.real(_mul(V, Z[:, -1:]))[:, 0]
        # at the nodes: exp(λ·(s − a))·(Z_p + ∫_a^s q)
        inner = h[None, :, None] * _per_panel(self.q, _TO_NODE.T)
        grow_n = 1.0 / decay  # (|λ|·h ≤ PANEL_RAD)
        self.at_nodes = np.real(_mul(V, (grow_n * (Z[:, :-1, None] + inner)).reshape(m, P * _N)))
        # quadrature error estimate: the last two Legendre coefficients of each panel's integrand,
        # times its length, summed over the panels (a growing mode: times its largest growth)
        span = edges[-1] - edges[0]
        grow_max = np.exp(np.maximum(lam.real, 0.0) * span)
        #: each panel's estimate in the states (n × P)
        tail = np.abs(_per_panel(self.q, _FIT[-2:].T)).sum(axis=2)
        self.panel_err = _mul(np.abs(V), tail * h[None, :] * grow_max[:, None])
        self.quad_err = np.sum(self.panel_err, axis=1)

    def __call__(self, ts: np.ndarray) -> np.ndarray:
        """``e(ts)`` (n × N); nil before the phase, the end value after it."""
        ts = np.clip(np.asarray(ts, dtype=float), self.edges[0], self.edges[-1])
        k = np.clip(np.searchsorted(self.edges, ts, side="right") - 1, 0, self.edges.size - 2)
        h = self.edges[k + 1] - self.edges[k]
        frac = np.clip((ts - self.edges[k]) / h, 0.0, 1.0)
        w = 0.5 * legendre.legvander(2.0 * frac - 1.0, _N) @ _INTEG  # (N, nodes)
        inner = h[None, :] * np.sum(w[None, :, :] * self.q[:, k, :], axis=2)
        z = np.exp(self.lam[:, None] * (h * frac)[None, :]) * (self.Z[:, k] + inner)
        return np.real(_mul(self.V, z))


def correct(model, dynamic, t0: float, y0: np.ndarray, edges: np.ndarray, rates, until: float = np.inf):
    """The corrected path of an affine phase whose rates depart from the model.

    ``dynamic``: the affine solution's states at given times; ``edges``: its panel edges [s];
    ``rates``: the vectorised true rates ``(c, t, Y) → F`` (or None); ``until`` [s]: where the
    departure has fallen within what ``LIN_TOL`` allows for good (the panels are fine up to
    there). Returns (correction, panel
    edges, nodes, true rates along the corrected path) or None where the correction's error bound
    exceeds :data:`PERT_TOL` (or it cannot be formed); ``model.pert_excess`` is then by how much
    (inf: cannot be formed).

    The bound is first checked on a prefix of :data:`PREFIX` panels (where a ring is largest, the
    correction's error grows most): a refusal costs a fraction of the whole phase's.
    """
    model.pert_excess = np.inf  # (cannot be formed: not worth trying again on this model)
    lam, V = np.linalg.eig(model.A)
    lam, V = lam.astype(complex), V.astype(complex)
    if not np.all(np.isfinite(lam)) or np.linalg.cond(V) > 1e8:
        return None
    edges = refine(edges, lam, until)
    if edges is None:
        return None
    if edges.size > 2 * PREFIX and _attempt(model, dynamic, y0, edges[:PREFIX + 1], rates, lam, V) is None:
        return None
    return _attempt(model, dynamic, y0, edges, rates, lam, V)


def _attempt(model, dynamic, y0, edges, rates, lam, V):
    """:func:`correct` on the panels ``edges`` (refined): its result, or None."""
    c, ie, scale = model.c, model.ie, model.scale
    for n in range(SPLITS + 1):
        t = nodes(edges)
        Y = np.empty((c.n_states, t.size))
        Y[:ie], Y[ie:] = dynamic(t), np.asarray(y0, dtype=float)[ie:, None]
        X = Y[:ie].copy()
        F = rates(c, t, Y)
        if F is None:
            return None
        corr = Correction(lam, V, edges, F[:ie] - _mul(model.A, X) - model.b[:, None])
        # panels the integrand is not resolved on (a varistor's current peaking at each crest of
        # the ring) are split into 4 (each of the others holds its share of the bound ten times over)
        share = np.max(corr.panel_err / scale[:, None], axis=0)
        split = share > 0.1 * PERT_TOL / share.size
        if (n == SPLITS or np.sum(share) <= 0.5 * PERT_TOL or not np.any(split)
                or edges.size + 3 * int(np.sum(split)) > MAX_PANELS + 1):
            break
        h = np.diff(edges)[split]
        edges = np.union1d(edges, (edges[:-1][split, None] + h[:, None] * np.array([0.25, 0.5, 0.75])).ravel())
    Y[:ie] = X + corr.at_nodes
    F = rates(c, t, Y)
    if F is None:
        return None
    second = Correction(lam, V, edges, F[:ie] - _mul(model.A, Y[:ie]) - model.b[:, None])
    diff = np.max(np.abs(np.column_stack([second.at_nodes - corr.at_nodes, second.end - corr.end])), axis=1)
    size = np.max(np.abs(np.column_stack([corr.at_nodes, corr.end])), axis=1)
    rho = float(np.max(diff / np.maximum(size, 1e-300)))
    est = (corr.quad_err + second.quad_err + diff / (1.0 - min(rho, 0.5))) / scale
    if not (rho <= PERT_RHO and np.all(est <= PERT_TOL)):
        # how far the bound is exceeded, for the caller's next try
        model.pert_excess = float(max(np.max(est) / max(PERT_TOL, 1e-300), 1.0 if rho <= PERT_RHO else rho / PERT_RHO))
        return None
    # the path taken is the second iterate (off by ~ρ·|e₂ − e|), the energies the true powers along it
    Y[:ie] = X + second.at_nodes
    F = rates(c, t, Y)
    return None if F is None else (second, edges, t, F)


def next_try(model, span_left: float, tries: list) -> float:
    """Time [s] to step on before the correction is tried again.

    The slowest ringing mode's envelope decays by ``exp(−σ·t)``; the bound falls with a power of
    it (2 for a quadratic departure, twice the law's exponent at a varistor's crest). First guess:
    a 32nd power; once two tries are known (``tries``: (time, excess) of each refused one), the rate
    measured between the last two, 20 % beyond. At least one period. The excess is the bound's own
    (not raised: a ring decaying over several periods of the switching, σ = 147 /s in a 975-like
    motor cycle, would be stepped for ln(10)/(32σ) ≈ 0.5 ms, ~500 ring periods, past the solver's
    evaluation limit, where the bound was missed by 15 %)."""
    lam = np.linalg.eigvals(model.A)
    ring = lam[(lam.imag != 0) & (lam.real < 0)]
    excess = max(model.pert_excess, 1.0)
    if not ring.size:
        return 0.01 * span_left
    k = int(np.argmin(-ring.real))
    sigma, period = float(-ring[k].real), 2.0 * np.pi / abs(float(ring[k].imag))
    rate = 32.0 * sigma
    if len(tries) >= 2 and tries[-1][0] > tries[-2][0]:
        measured = np.log(tries[-2][1] / tries[-1][1]) / (tries[-1][0] - tries[-2][0])
        rate = measured / 1.2 if measured > 0 else 2.0 * sigma
    return min(span_left, max(np.log(excess) / rate, period))


def with_extrema(steps: np.ndarray, dynamic, model) -> np.ndarray:
    """The sampling grid ``steps`` [s] of a closed-form phase with the turning points of the coil
    current added (a ring's troughs and crests fall between the grid's points: the sampled
    minimum current would be off by ~(ω·Δt)²/8 of the swing).

    A turning point lies between two grid points where the model's rate of the current changes
    sign (the phase's first and last intervals included); it is found by Newton's method on that
    rate, kept inside the interval."""
    A, b = model.A, model.b[:, None]
    rate = (_mul(A[:1], dynamic(steps)) + b[:1])[0]
    k = np.flatnonzero(rate[:-1] * rate[1:] < 0)
    if not k.size:
        return steps
    lo, hi = steps[k], steps[k + 1]
    # first guess: where the rate's chord crosses zero
    t = lo + (hi - lo) * rate[k] / (rate[k] - rate[k + 1])
    for _ in range(3):
        r1 = _mul(A, dynamic(t)) + b
        with np.errstate(all="ignore"):
            dt = -r1[0] / _mul(A[:1], r1)[0]
        t = np.clip(t + np.where(np.isfinite(dt), dt, 0.0), lo, hi)
    return np.union1d(steps, t)
