"""A phase whose state equations are affine, solved in closed form instead of step by step.

While the switch conducts, a coil through an on-resistance or a saturation voltage (a motor at
fixed speed or with its linear mechanics) obeys ``dx/dt = A·x + b`` once every clamp has stopped
conducting: the clamp laws then sit on a straight part (a reverse diode at ``−I_s``, a blocking
Zener, a resistor). The node capacitance discharging through the channel at turn-on is such a
phase, and resolving its picosecond exponential step by step is most of a cycle's cost.

Here the affine model is taken from the circuit's analytic Jacobian at the settled node voltage,
the phase is solved through the eigen-decomposition of the augmented matrix
``[[A, b], [0, 0]]`` (its end state by an extended-precision exponential), and the model is *verified* along the
solution: wherever the true right-hand side departs from it by more than :data:`LIN_TOL`
(integrated over the phase, relative to each state's scale) the caller integrates as before.
The energies (powers carried as states) are integrated by Gauss–Legendre quadrature of the
true power laws along the exact trajectory, on panels graded to every mode's time constant.

References
----------
C. Moler and C. Van Loan, "Nineteen dubious ways to compute the exponential of a matrix,
twenty-five years later", SIAM Review 45(1), 2003 (eigenvector method and its conditioning);
G. H. Golub and J. H. Welsch, "Calculation of Gauss quadrature rules", Math. Comp. 23, 1969.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.polynomial import legendre

from kickback.circuit import Circuit
from kickback.nodebalance import solve_monotone

#: allowed departure of the true right-hand side from the affine model, integrated over the
#: phase and relative to each dynamic state's scale
LIN_TOL = 1e-12
#: Gauss–Legendre nodes per panel
GL_NODES = 10
MAX_PANELS = 400
#: the sampling grid of a closed-form phase has at least this many steps
SAMPLE_SPLITS = 32
#: allowed disagreement of the dense (eigenvector) solution with :func:`expm_extended` at the end of the
#: phase, relative to each state's scale (eigenvalues of a stiff matrix are only accurate to
#: ~eps·‖A‖; the extended-precision exponential gives the end state that the cycle map uses)
DENSE_TOL = 1e-10
#: rounding allowance of a rate, relative to the sum of the magnitudes of its terms
ROUNDING = 64 * np.finfo(float).eps
_XI, _WI = legendre.leggauss(GL_NODES)
_XI01, _WI01 = 0.5 * (_XI + 1.0), 0.5 * _WI


def settled_probe(c: Circuit, t: float, y: np.ndarray) -> np.ndarray:
    """State ``y`` with the node voltage moved to where the node's currents balance (the value a
    capacitive node settles to in a few of its time constants); unchanged without capacitance."""
    yq = np.array(y, dtype=float)
    if not c.capacitive or c.pin is not None:
        return yq
    i = float(c.coil_current(y[0]))

    def resid(v):
        return sum(c.currents_at(t, v, yq)) - i

    yq[1] = solve_monotone(resid, c._thresholds[c.conducting or c._in_fall(t)], c.v_scale)
    return yq


class AffineModel:
    """``dx/dt = A·x + b`` of the dynamic states, linearised at a probe state; its defect."""

    def __init__(self, c: Circuit, t: float, y_probe: np.ndarray, scale: np.ndarray, span: float):
        ie = c.ie
        self.c, self.ie, self.scale, self.span = c, ie, scale, span
        self.A = c.jacobian(t, y_probe)[:ie, :ie]
        self.b = c.rhs(t, y_probe)[:ie] - self.A @ y_probe[:ie]
        self._abs_a = np.abs(self.A)

    def defect(self, t: float, y: np.ndarray) -> tuple[float, np.ndarray]:
        """(Departure of the true dynamic rates from the model, relative to what :data:`LIN_TOL`
        allows — ≤ 1 where the model holds —, the true rates).

        Allowed: ``LIN_TOL·scale/span`` (its effect integrated over the phase) plus the rounding
        of the rates themselves (a few ulps of the terms they sum).
        """
        f = self.c.rhs(t, y)
        x = y[: self.ie]
        d = np.abs(f[: self.ie] - self.A @ x - self.b)
        allow = LIN_TOL * self.scale / self.span + ROUNDING * (self._abs_a @ np.abs(x) + np.abs(self.b))
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(d == 0.0, 0.0, d / allow)  # nothing allowed: any departure is infinite
        return float(np.max(ratio)), f


class LinearSolution:
    """Dense closed-form solution of an affine phase: callable like scipy's OdeSolution."""

    def __init__(self, t0, y0, ie, lam, vec, coef, edges, x_end, nodes=None, rates=None, steps=None):
        self.t0, self.y0, self.ie, self.x_end = t0, y0, ie, x_end
        self.steps = edges if steps is None else steps  # [s] sampling grid offered to the sampler
        self.lam, self.vec, self.coef = lam, vec, coef
        self.edges = edges  # [s] absolute panel edges
        self.nodes, self.rates = nodes, rates  # GL nodes [s] per panel, power rates there
        if rates is not None:
            h = np.diff(edges)
            panel = np.einsum("j,pjk->pk", _WI01, rates) * h[:, None]
            self.cum = np.vstack([np.zeros(rates.shape[2]), np.cumsum(panel, axis=0)])

    def dynamic(self, t) -> np.ndarray:
        s = np.atleast_1d(np.asarray(t, dtype=float)) - self.t0
        z = np.real(self.vec @ (self.coef[:, None] * np.exp(self.lam[:, None] * s[None, :])))[: self.ie]
        z[:, s >= self.edges[-1] - self.t0] = self.x_end[:, None]
        return z

    def __call__(self, t):
        scalar = np.ndim(t) == 0
        ts = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.empty((self.y0.size, ts.size))
        out[: self.ie] = self.dynamic(ts)
        if self.rates is None:
            out[self.ie:] = self.y0[self.ie:, None]
        else:
            out[self.ie:] = (self.y0[self.ie:, None] + self._energy(ts).T)
        return out[:, 0] if scalar else out

    def _energy(self, ts: np.ndarray) -> np.ndarray:
        """Cumulative energies at ``ts``: whole panels plus the interpolating polynomial of the
        power at the panel's Gauss nodes, integrated to the sample."""
        k = np.clip(np.searchsorted(self.edges, ts, side="right") - 1, 0, len(self.edges) - 2)
        h = self.edges[k + 1] - self.edges[k]
        frac = np.clip((ts - self.edges[k]) / h, 0.0, 1.0)
        out = self.cum[k].copy()
        for n in np.unique(k):
            m = k == n
            coef = legendre.legfit(_XI, self.rates[n], GL_NODES - 1)  # exact interpolation
            integ = legendre.legint(coef, lbnd=-1.0)
            out[m] += 0.5 * h[m, None] * legendre.legval(2.0 * frac[m] - 1.0, integ).T
        return out


def expm_extended(M: np.ndarray, t: float) -> np.ndarray:
    """``exp(M·t)`` by scaling and squaring of a Taylor series in extended precision
    (``numpy.longdouble``): stiff matrices lose ~eps·‖M‖·t/|λ_slow| to the squarings, and the
    extra digits keep that below double rounding for the matrices met here.

    References
    ----------
    C. Moler and C. Van Loan, SIAM Review 45(1), 2003, method 3 (scaling and squaring).
    """
    a = np.asarray(M, dtype=np.longdouble) * np.longdouble(t)
    norm = float(np.max(np.sum(np.abs(a), axis=0)))
    s = max(0, int(math.ceil(math.log2(norm))) + 1) if norm > 0 else 0
    a = a / np.longdouble(2.0) ** s
    eye = np.eye(a.shape[0], dtype=np.longdouble)
    term, out = eye.copy(), eye.copy()
    for k in range(1, 24):  # ‖a‖ ≤ 1/2: the remainder is below 2⁻²⁴/24!
        term = term @ a / np.longdouble(k)
        out = out + term
    for _ in range(s):
        out = out @ out
    return out


def _decompose(A: np.ndarray, b: np.ndarray, x0: np.ndarray, span: float, scale: np.ndarray):
    """Eigen-decomposition of the augmented matrix (for the dense solution) and the end state by
    :func:`expm_extended` (the accurate one on stiff matrices); None when the two disagree beyond
    :data:`DENSE_TOL` or the decomposition is ill-conditioned."""
    m = A.shape[0] + 1
    M = np.zeros((m, m))
    M[:-1, :-1], M[:-1, -1] = A, b
    z0 = np.append(x0, 1.0)
    lam, vec = np.linalg.eig(M)
    if not np.all(np.isfinite(lam)) or np.linalg.cond(vec) > 1e8 or np.max(lam.real) * span > 50.0:
        return None
    coef = np.linalg.solve(vec, z0.astype(complex))
    z_end = np.real(vec @ (coef * np.exp(lam * span)))
    ref = np.asarray(expm_extended(M, span) @ z0.astype(np.longdouble), dtype=float)
    if not np.all(np.isfinite(ref)) or not np.all(np.abs(z_end[:-1] - ref[:-1]) <= DENSE_TOL * scale):
        return None
    return lam, vec, coef, ref[:-1]


def _panels(lam, vec, coef, scale, span, first=2.0, growth=0.5, live_level=1e-17) -> np.ndarray | None:
    """Panel edges (relative to the phase start) so that every mode still present is resolved:
    no longer than ``first`` time constants of a mode, growing by ``growth`` × the time since the
    start once the mode has decayed (a mode is present while above ``live_level`` of the scales).
    """
    sc = np.append(scale, 1.0)
    amp = np.abs(coef) * np.max(np.abs(vec) / sc[:, None], axis=0)
    mag = np.abs(lam)
    edges = [0.0]
    t = 0.0
    while t < span:
        h = span - t
        live = (mag > 0) & (amp * np.exp(lam.real * t) > live_level)
        for k in np.flatnonzero(live):
            h = min(h, max(first, growth * abs(lam[k].real) * t) / mag[k])
        t = span if span - t - h < 1e-12 * span else t + h
        edges.append(t)
        if len(edges) > MAX_PANELS:
            return None
    return np.asarray(edges)


def solve_affine(model: AffineModel, t0: float, y0: np.ndarray, t_end: float, energies: bool):
    """Closed-form solution of ``model`` from ``(t0, y0)`` to ``t_end``, verified against the
    true right-hand side; None when the model does not hold along the way (or cannot be solved
    reliably) — the caller then integrates step by step."""
    c, ie, scale = model.c, model.ie, model.scale
    span = t_end - t0
    dec = _decompose(model.A, model.b, y0[:ie], span, scale)
    if dec is None:
        return None
    lam, vec, coef, x_end = dec
    rel = _panels(lam, vec, coef, scale, span)
    if rel is None:
        return None
    edges = t0 + rel
    # the sampled waveforms (figures by the trapezoidal rule, junction temperatures) need the fast
    # modes finely resolved: steps of 1/50 of a time constant, growing by 5 % once decayed
    fine = _panels(lam, vec, coef, scale, span, first=0.02, growth=0.05, live_level=1e-12)
    steps = edges if fine is None else np.union1d(edges, t0 + fine)
    # and the slow remainder no coarser than the Radau steps it replaces would sample it
    steps = np.union1d(steps, np.linspace(t0, t_end, SAMPLE_SPLITS + 1))
    sol = LinearSolution(t0, np.array(y0, dtype=float), ie, lam, vec, coef, edges, x_end, steps=steps)
    check_t = np.concatenate([edges[:-1, None] + np.diff(edges)[:, None] * _XI01[None, :]]).ravel() \
        if energies else edges
    ys = sol.dynamic(check_t)
    y = np.array(y0, dtype=float)
    rates = np.empty((check_t.size, c.n_states - ie))
    for n, tn in enumerate(check_t):
        y[:ie] = ys[:, n]
        d, f = model.defect(float(tn), y)
        if not d <= 1.0:
            return None
        rates[n] = f[ie:]
    if not energies:
        return sol
    return LinearSolution(t0, sol.y0, ie, lam, vec, coef, edges, x_end, check_t.reshape(-1, GL_NODES),
                          rates.reshape(len(edges) - 1, GL_NODES, -1), steps)


def linear_event(model: AffineModel):
    """Terminal event: the circuit's rates have come within half of what :data:`LIN_TOL` allows
    of ``model`` (half: the event's root is located only approximately)."""
    def g(t, y):
        d = model.defect(t, y)[0]
        return math.log10(max(2.0 * d, 1e-300))
    g.terminal = True
    g.direction = -1
    return g


def run_affine_phase(runner, name: str, t_end: float, scale: np.ndarray, energies: bool = True) -> None:
    """Advance ``runner`` to ``t_end``: step by step while the clamps' laws are still curved, in
    closed form from where the affine model holds (verified), step by step again if it does not."""
    from kickback.engine.detailed import Phase
    from kickback.errors import SolverError

    c = runner.c
    t0 = runner.t
    if c.flux or c.pin is not None or not t_end > t0:
        runner.run(name, t_end, [])
        return
    try:
        model = AffineModel(c, t0, settled_probe(c, t0, runner.y), scale, t_end - t0)
    except (SolverError, ArithmeticError, ValueError):
        runner.run(name, t_end, [])
        return
    if not model.defect(t0, runner.y)[0] <= 1.0:
        runner.run(name, t_end, [linear_event(model)])
        if runner.t >= t_end or c.pin is not None:
            if runner.t < t_end:
                runner.run(name, t_end, [])
            return
    sol = solve_affine(model, runner.t, runner.y, t_end, energies)
    if sol is None:
        runner.run(name, t_end, [])
        return
    runner.phases.append(Phase(name, runner.t, t_end, sol, sol.steps, None, c.conducting, c.t_turnoff))
    runner.y = sol(t_end)
    runner.t = t_end
