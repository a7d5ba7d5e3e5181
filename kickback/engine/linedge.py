"""The switch's turn-off edge of a switching cycle in closed form, where its laws are affine.

Over the fall time the channel current is the on-state law under a ceiling falling linearly
from the current at turn-off to zero (:meth:`kickback.models.switch.SwitchLaw.channel_current`).
Once the node has risen off the on-state law, the channel carries the ceiling itself: a ramp
input. With every other law on a straight piece (no clamp conducting, a motor's linear
mechanics) the state equations over the edge are ``dx/dt = A·x + b + g·s`` (``s`` the time
since the edge's start), and a long fall (many periods of the coil's ring with the node
capacitance) is solved in closed form instead of thousands of steps: in the eigenbasis of ``A``
each mode is

    z_k(s) = c_k·e^{λ_k s} + β_k·s·φ₁(λ_k s) + γ_k·s²·φ₂(λ_k s),

``φ₁(z) = (e^z − 1)/z``, ``φ₂(z) = (e^z − 1 − z)/z²`` (series near 0: a motor's slow mechanical
mode, whose equilibrium under a ramp would cancel to no digits at all). The end state is checked
against the exponential of the twice-augmented matrix ``[[A, g·span, b], [0, 0, 1/span], [0, 0, 0]]``
(the time carried as the state τ = s/span) in extended precision, and the model is verified along
the path against the circuit's own rates as every closed-form phase is
(:mod:`kickback.engine.linphase`); where either fails the edge is stepped as before.

References
----------
C. Moler and C. Van Loan, "Nineteen dubious ways to compute the exponential of a matrix,
twenty-five years later", SIAM Review 45(1), 2003 (the augmented matrix of an affine input);
M. Hochbruck and A. Ostermann, "Exponential integrators", Acta Numerica 19, 2010 (the φ functions).
"""

from __future__ import annotations

import numpy as np

from kickback.engine.linmodes import DENSE_TOL, expm_extended
from kickback.engine.linphase import _XI01, GL_NODES, SAMPLE_SPLITS, AffineModel, LinearSolution, _panels

#: the most steps offered to the sampler over a closed-form edge: its fast modes are resolved to
#: 1/50 of a time constant up to this many steps (else this many uniform steps)
EDGE_SAMPLES = 20_000
#: panels of the verification and the energy quadrature allowed over an edge
EDGE_PANELS = 40_000
#: largest condition number of the eigenvectors of ``A`` accepted
MAX_COND = 1e8


def phi12(z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``φ₁(z) = (e^z − 1)/z`` and ``φ₂(z) = (e^z − 1 − z)/z²`` of complex ``z`` (Taylor series
    ``Σ z^k/(k+1)!``, ``Σ z^k/(k+2)!`` for |z| < 1/2, where the quotients cancel)."""
    z = np.asarray(z, dtype=complex)
    small = np.abs(z) < 0.5
    zs = np.where(small, z, 0.0)
    p1, p2 = np.zeros_like(z), np.zeros_like(z)
    term = np.ones_like(z)  # z^k / k!
    for k in range(20):  # |z| < 1/2: the remainder is below 2⁻²⁰/20!
        p1 += term / (k + 1)
        p2 += term / ((k + 1) * (k + 2))
        term = term * zs / (k + 1)
    zb = np.where(small, 1.0, z)
    with np.errstate(over="ignore", invalid="ignore"):
        e = np.exp(zb)
        p1 = np.where(small, p1, (e - 1.0) / zb)
        p2 = np.where(small, p2, (e - 1.0 - zb) / (zb * zb))
    return p1, p2


class RampSolution(LinearSolution):
    """Dense closed-form solution of an affine phase with a ramp input (modes by φ functions)."""

    def __init__(self, t0, y0, ie, lam, V, c0, beta, gamma, edges, x_end, nodes=None, rates=None, steps=None):
        super().__init__(t0, y0, ie, lam, None, None, edges, x_end, nodes, rates, steps)
        self.V, self.c0, self.beta, self.gamma = V, c0, beta, gamma

    def dynamic(self, t) -> np.ndarray:
        s = np.maximum(np.atleast_1d(np.asarray(t, dtype=float)) - self.t0, 0.0)
        z = self.lam[:, None] * s[None, :]
        p1, p2 = phi12(z)
        modes = self.c0[:, None] * np.exp(z) + s * (self.beta[:, None] * p1 + s * (self.gamma[:, None] * p2))
        x = np.real(self.V @ modes)
        x[:, s >= self.edges[-1] - self.t0] = self.x_end[:, None]
        return x


def solve_ramp(model: AffineModel, t0: float, y0: np.ndarray, t_end: float, energies: bool):
    """Closed-form solution of ``model`` (with its ramp ``g``) from ``(t0, y0)`` to ``t_end``,
    verified against the circuit's rates; None where it cannot be solved reliably or the model
    does not hold along the way."""
    from kickback.engine.linrates import rates as vector_rates

    c, ie, scale = model.c, model.ie, model.scale
    span = t_end - t0
    A, g = model.A, model.g
    b = model.b + g * (t0 - model.t_ref)
    x0 = np.asarray(y0[:ie], dtype=float)
    lam, V = np.linalg.eig(A)
    lam, V = lam.astype(complex), V.astype(complex)
    if not (np.all(np.isfinite(lam)) and np.linalg.cond(V) < MAX_COND and np.max(lam.real) * span <= 50.0):
        return None
    c0, beta, gamma = (np.linalg.solve(V, w.astype(complex)) for w in (x0, b, g))
    # the end state, checked against the exponential of the twice-augmented matrix
    M = np.zeros((ie + 2, ie + 2))
    M[:ie, :ie], M[:ie, ie], M[:ie, ie + 1], M[ie, ie + 1] = A, g * span, b, 1.0 / span
    ref = np.asarray(expm_extended(M, span) @ np.concatenate([x0, [0.0, 1.0]]).astype(np.longdouble),
                     dtype=float)[:ie]
    sol = RampSolution(t0, np.array(y0, dtype=float), ie, lam, V, c0, beta, gamma, np.array([t0, t_end]), ref)
    x_end = sol.dynamic(np.array([t0 + span * (1 - 1e-15)]))[:, 0]
    if not (np.all(np.isfinite(ref)) and np.all(np.abs(x_end - ref) <= DENSE_TOL * scale)):
        return None
    # panels graded to the modes (each mode's forced part is smooth: its size is taken as that of
    # its free part, an upper bound)
    with np.errstate(divide="ignore", invalid="ignore"):
        amp = np.abs(c0) + np.where(lam != 0, np.abs(beta / lam) + np.abs(gamma / lam ** 2), 0.0)
    vec = np.vstack([V, np.zeros((1, lam.size))])
    rel = _panels(lam, vec, amp, scale, span, max_panels=EDGE_PANELS)
    if rel is None:
        return None
    edges = t0 + rel
    # (the fine grid is for the sampler, which takes only cycles solved with their energies; a
    # ring too long for it is sampled uniformly at EDGE_SAMPLES points, no coarser)
    fine = _panels(lam, vec, amp, scale, span, first=0.02, growth=0.05, live_level=1e-12,
                   max_panels=EDGE_SAMPLES) if energies else None
    if fine is None and energies:
        fine = np.linspace(0.0, span, EDGE_SAMPLES + 1)
    steps = edges if fine is None else np.union1d(edges, np.minimum(t0 + fine, t_end))
    steps = np.union1d(steps, np.linspace(t0, t_end, SAMPLE_SPLITS + 1))
    check_t = (edges[:-1, None] + np.diff(edges)[:, None] * _XI01[None, :]).ravel() if energies else edges
    sol = RampSolution(t0, sol.y0, ie, lam, V, c0, beta, gamma, edges, ref, steps=steps)
    Y = np.empty((c.n_states, check_t.size))
    Y[:ie], Y[ie:] = sol.dynamic(check_t), sol.y0[ie:, None]
    F = vector_rates(c, check_t, Y)
    if F is None:
        return None
    bad = np.flatnonzero(~(model.defects(Y, F, check_t) <= 1.0))
    if bad.size:
        model.left_at = float(check_t[bad[0]])
        return None
    if not energies:
        return sol
    return RampSolution(t0, sol.y0, ie, lam, V, c0, beta, gamma, edges, ref, check_t.reshape(-1, GL_NODES),
                        F[ie:].T.reshape(len(edges) - 1, GL_NODES, -1), steps)


def run_edge_phase(runner, t_end: float, scale: np.ndarray, energies: bool = True, **kw) -> bool:
    """Advance ``runner`` over the switch's edge to ``t_end``: in closed form when the affine
    model with the ramp input holds from the edge's start to its end (verified), else step by
    step (``kw`` goes to that run). True when solved in closed form."""
    from kickback.engine.detailed import Phase
    from kickback.errors import SolverError

    c = runner.c
    t0 = runner.t
    if c.flux or c.pin is not None or not c.capacitive or not t_end > t0 or c.conducting:
        runner.run("edge", t_end, [], **kw)
        return False
    sol = None
    try:
        model = AffineModel(c, t0, runner.y, scale, t_end - t0, ramp=True)
        if np.all(np.isfinite(model.A)) and np.all(np.isfinite(model.g)) and model.defect(t0, runner.y)[0] <= 1.0:
            sol = solve_ramp(model, t0, runner.y, t_end, energies)
    except (SolverError, ArithmeticError, ValueError, np.linalg.LinAlgError):
        sol = None
    if sol is None:
        runner.run("edge", t_end, [], **kw)
        return False
    runner.phases.append(Phase("edge", t0, t_end, sol, sol.steps, None, c.conducting, c.t_turnoff))
    runner.y = sol(t_end)
    runner.t = t_end
    return True
