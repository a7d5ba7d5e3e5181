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
(integrated over the phase, relative to each state's scale) the caller integrates as before —
unless the departure is small enough to be corrected to first order with a bounded error
(:mod:`kickback.engine.linpert`: a ring with a varistor far below its knee).
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

from kickback.circuit import Circuit
from kickback.engine.linmodes import (
    decompose_held,
    expm_extended,  # noqa: F401  (former home)
)
from kickback.engine.linpert import PERT_RATIO, correct, next_try, with_extrema
from kickback.engine.linsolution import _XI01, GL_NODES, LinearSolution
from kickback.nodebalance import solve_monotone

#: allowed departure of the true right-hand side from the affine model, integrated over the
#: phase and relative to each dynamic state's scale
LIN_TOL = 1e-12
MAX_PANELS = 400
#: panels allowed when the rates along the path are evaluated all at once (:mod:`linrates`): a
#: phase ringing for thousands of LC periods
MAX_PANELS_VECTOR = 40_000
#: the sampling grid of a closed-form phase has at least this many steps
SAMPLE_SPLITS = 64
#: rounding allowance of a rate, relative to the sum of the magnitudes of its terms
ROUNDING = 64 * np.finfo(float).eps


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
    """``dx/dt = A·x + b (+ g·(t − t_ref))`` of the dynamic states, linearised at a probe state;
    its defect.

    ``ramp``: the rates also depend linearly on time (the channel current falling over the
    switch's fall time); ``g`` is their change at the probe state from ``t`` to the middle of
    the span, per second (else None).
    """

    def __init__(self, c: Circuit, t: float, y_probe: np.ndarray, scale: np.ndarray, span: float,
                 ramp: bool = False):
        ie = c.ie
        self.c, self.ie, self.scale, self.span, self.t_ref = c, ie, scale, span, t
        self.A = c.jacobian(t, y_probe)[:ie, :ie]
        f = c.rhs(t, y_probe)[:ie]
        self.b = f - self.A @ y_probe[:ie]
        self.g = (c.rhs(t + 0.5 * span, y_probe)[:ie] - f) / (0.5 * span) if ramp else None
        self._abs_a = np.abs(self.A)
        #: [s] where the last closed-form path checked left the model (None: not known)
        self.left_at = None
        #: the last closed-form path tried departed from the model, and its correction was refused:
        #: by how much its error bound was exceeded (inf: the correction could not be formed)
        self.pert_failed, self.pert_excess = False, None

    def defect(self, t: float, y: np.ndarray) -> tuple[float, np.ndarray]:
        """(Departure of the true dynamic rates from the model, relative to what :data:`LIN_TOL`
        allows — ≤ 1 where the model holds —, the true rates).

        Allowed: ``LIN_TOL·scale/span`` (its effect integrated over the phase) plus the rounding
        of the rates themselves (a few ulps of the terms they sum).
        """
        f = self.c.rhs(t, y)
        x = y[: self.ie]
        ramp = 0.0 if self.g is None else self.g * (t - self.t_ref)
        d = np.abs(f[: self.ie] - self.A @ x - self.b - ramp)
        allow = LIN_TOL * self.scale / self.span + ROUNDING * (self._abs_a @ np.abs(x) + np.abs(self.b) + np.abs(ramp))
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(d == 0.0, 0.0, d / allow)  # nothing allowed: any departure is infinite
        return float(np.max(ratio)), f

    def defects(self, Y: np.ndarray, F: np.ndarray, t: np.ndarray) -> np.ndarray:
        """:meth:`defect` at many states ``Y`` (n_states × N) at times ``t`` with their rates ``F``."""
        X = Y[: self.ie]
        ramp = 0.0 if self.g is None else self.g[:, None] * (t - self.t_ref)[None, :]
        # (einsum: BLAS threads spin on a small matrix times many columns)
        d = np.abs(F[: self.ie] - np.einsum("ij,jn->in", self.A, X) - self.b[:, None] - ramp)
        terms = np.einsum("ij,jn->in", self._abs_a, np.abs(X)) + np.abs(self.b)[:, None] + np.abs(ramp)
        allow = (LIN_TOL * self.scale / self.span)[:, None] + ROUNDING * terms
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(d == 0.0, 0.0, d / allow)
        return np.max(ratio, axis=0)


def _panels(lam, vec, coef, scale, span, first=2.0, growth=0.5, live_level=1e-17,
            max_panels=MAX_PANELS) -> np.ndarray | None:
    """Panel edges (relative to the phase start) so that every mode still present is resolved:
    no longer than ``first`` time constants of a mode, growing by ``growth`` × the time since the
    start once the mode has decayed (a mode is present while above ``live_level`` of the scales).
    """
    sc = np.append(scale, 1.0)
    amp = np.abs(coef) * np.max(np.abs(vec) / sc[:, None], axis=0)
    mag = np.abs(lam)
    decay = np.abs(lam.real)
    with np.errstate(divide="ignore"):
        # a mode is present until amp·exp(Re λ·t) falls to live_level
        dead = np.where(lam.real < 0, np.log(np.maximum(amp, 1e-300) / live_level) / np.maximum(decay, 1e-300),
                        np.inf)
        # and its panels are first/|λ| long until growth·|Re λ|·t exceeds first
        flat_end = np.where(decay > 0, first / (growth * np.maximum(decay, 1e-300)), np.inf)
    chunks = [np.zeros(1)]
    count = 1
    t = 0.0
    while t < span:
        h = span - t
        live = (mag > 0) & (amp * np.exp(lam.real * t) > live_level)
        k_min = -1
        for k in np.flatnonzero(live):
            hk = max(first, growth * decay[k] * t) / mag[k]
            if hk < h:
                h, k_min = hk, k
        if k_min >= 0 and t < flat_end[k_min]:
            # mode k_min sets a constant panel length while it is present and not yet decayed:
            # the other modes' lengths only grow, so the whole stretch is uniform
            stop = min(flat_end[k_min], dead[k_min], span)
            n = max(1, int((stop - t) / h))
            if count + n > max_panels:
                return None
            ts = t + h * np.arange(1, n + 1)
            ts[ts >= span * (1 - 1e-12)] = span
            chunks.append(ts)
            count += n
            t = float(ts[-1])
            continue
        t = span if span - t - h < 1e-12 * span else t + h
        chunks.append(np.array([t]))
        count += 1
        if count > max_panels:
            return None
    return np.unique(np.concatenate(chunks))


def solve_affine(model: AffineModel, t0: float, y0: np.ndarray, t_end: float, energies: bool,
                 perturb: bool = False):
    """Closed-form solution of ``model`` from ``(t0, y0)`` to ``t_end``, verified against the
    true right-hand side; None when the model does not hold along the way (or cannot be solved
    reliably) — the caller then integrates step by step.

    ``perturb``: where the rates depart from the model by more than :data:`LIN_TOL` allows but
    by less than ``linpert.PERT_RATIO`` times that, the path is corrected to first order and
    accepted if the correction's error bound holds (:func:`linpert.correct`); ``model.pert_failed``
    tells the caller when it did not."""
    c, ie, scale = model.c, model.ie, model.scale
    span = t_end - t0
    dec = decompose_held(model.A, model.b, y0[:ie], span, scale, LIN_TOL)
    if dec is None:
        return None
    lam, vec, coef, x_end, held = dec
    from kickback.engine.linrates import rates as vector_rates

    vectorised = c.capacitive and c.pin is None and not c.flux
    rel = _panels(lam, vec, coef, scale, span, max_panels=MAX_PANELS_VECTOR if vectorised else MAX_PANELS)
    if rel is None:
        return None
    edges = t0 + rel
    # the sampled waveforms (figures by the trapezoidal rule, junction temperatures) need the fast
    # modes finely resolved: steps of 1/50 of a time constant, growing by 5 % once decayed
    fine = _panels(lam, vec, coef, scale, span, first=0.02, growth=0.05, live_level=1e-12)
    steps = edges if fine is None else np.union1d(edges, t0 + fine)
    # and the slow remainder no coarser than the Radau steps it replaces would sample it
    steps = np.union1d(steps, np.linspace(t0, t_end, SAMPLE_SPLITS + 1))
    # t0 + the fine grid may round an ulp past the phase's end: a sample there lies in no phase
    steps = np.unique(np.clip(steps, t0, t_end))
    sol = LinearSolution(t0, np.array(y0, dtype=float), ie, lam, vec, coef, edges, x_end, steps=steps, held=held)
    check_t = np.concatenate([edges[:-1, None] + np.diff(edges)[:, None] * _XI01[None, :]]).ravel() \
        if energies else edges
    ys = sol.dynamic(check_t)
    Y = np.empty((c.n_states, check_t.size))
    Y[:ie], Y[ie:] = ys, np.asarray(y0, dtype=float)[ie:, None]
    F = vector_rates(c, check_t, Y) if vectorised else None
    if F is not None:
        ratio = model.defects(Y, F, check_t)
        bad = np.flatnonzero(~(ratio <= 1.0))
        if bad.size and perturb and held is None and model.g is None:
            far = np.flatnonzero(~(ratio <= PERT_RATIO))
            if far.size:
                model.left_at = float(check_t[far[0]])
                return None
            # past the last node departing beyond LIN_TOL (and the panel holding it) the path
            # holds the affine model as it is: the correction only rides on its modes there
            k = int(np.searchsorted(edges, check_t[bad[-1]], side="right"))
            until = float(edges[min(k + 1, edges.size - 1)])
            got = correct(model, sol.dynamic, t0, y0, edges, vector_rates, until)
            if got is None:
                model.pert_failed = True
                if not math.isfinite(model.pert_excess):
                    model.pert_failed, model.left_at = False, float(check_t[bad[0]])
                return None
            corr, edges_c, t_c, F_c = got
            out = LinearSolution(t0, sol.y0, ie, lam, vec, coef, edges_c, x_end + corr.end,
                                 t_c.reshape(-1, GL_NODES), F_c[ie:].T.reshape(len(edges_c) - 1, GL_NODES, -1),
                                 steps, held, corr)
            out.steps = with_extrema(steps, out.dynamic, model)
            return out
        if bad.size:
            model.left_at = float(check_t[bad[0]])
            return None
        rates = F[ie:].T
    else:
        if len(edges) > MAX_PANELS + 1:
            return None
        y = np.array(y0, dtype=float)
        rates = np.empty((check_t.size, c.n_states - ie))
        for n, tn in enumerate(check_t):
            y[:ie] = ys[:, n]
            d, f = model.defect(float(tn), y)
            if not d <= 1.0:
                model.left_at = float(tn)
                return None
            rates[n] = f[ie:]
    sol.steps = with_extrema(steps, sol.dynamic, model)
    if not energies:
        return sol
    return LinearSolution(t0, sol.y0, ie, lam, vec, coef, edges, x_end, check_t.reshape(-1, GL_NODES),
                          rates.reshape(len(edges) - 1, GL_NODES, -1), sol.steps, held)


def linear_event(model: AffineModel, level: float = 1.0):
    """Terminal event: the circuit's rates have come within half of ``level`` × what
    :data:`LIN_TOL` allows of ``model`` (half: the event's root is located only approximately)."""
    def g(t, y):
        d = model.defect(t, y)[0]
        return math.log10(max(2.0 * d / level, 1e-300))
    g.terminal = True
    g.direction = -1
    # the same event as data, for kickback/engine/kstep.py
    g.spec = ("defect", model.A, model.b, model.g, LIN_TOL * model.scale / model.span, ROUNDING, model.t_ref, level)
    return g


def rest_probe(c: Circuit, t: float, y: np.ndarray) -> np.ndarray:
    """State ``y`` moved to where the switched-off circuit comes to rest: no coil current, the
    node at its final voltage (snubber capacitors and the motor's speed kept). Every law
    sits on its blocking piece there, so the circuit's linearisation there is the affine model
    of an off-phase tail once the clamps have stopped conducting."""
    yq = np.array(y, dtype=float)
    yq[0] = c.coil_state(0.0)
    # snubber capacitors keep their voltages: behind a diode a capacitor holds its charge, and
    # the diode then blocks (at the final voltage of a plain RC the probe would sit on its knee)
    v_fin, _ = c.final_capacitor_voltages()
    if not c.capacitive:
        return yq
    # with no coil current the coil holds the node at the supply (less a motor's back-EMF): the
    # level an LC ring decays to, inside every clamp's blocking band (a node balance alone would
    # leave it anywhere in the band, a clamp's knee included)
    # (a hair above it: a law's slope is one-sided exactly at zero current — a resistor's
    # conductance there reads as its blocking band's zero)
    yq[1] = v_fin + 1e-7 * c.v_scale
    return yq


#: closed-form attempts per phase: a path that leaves the affine region again (a clamp that
#: conducts on a later swing) is integrated on and tried again where it has come back, each
#: stretch twice as long as the one before (an attempt costs far less than the steps a longer
#: stretch overshoots by: a ring through a diode's knee, wide_range cases 39 and 172)
MAX_ATTEMPTS = 20
#: the first stretch stepped before an off-phase tail is tried again, relative to the phase (each
#: further stretch four times as long)
FIRST_STRIDE = 1e-4


def run_affine_phase(runner, name: str, t_end: float, scale: np.ndarray, energies: bool = True,
                     rest: bool = False, **kw) -> None:
    """Advance ``runner`` to ``t_end``: step by step while the clamps' laws are still curved, in
    closed form from where the affine model holds (verified), step by step again if it does not.

    ``rest``: the affine model is the circuit's linearisation at rest (:func:`rest_probe`; an
    off phase, whose clamps conduct first), else at the node settled at the phase start (an on
    phase). ``kw`` goes to the step-by-step runs (``first_step``).
    """
    from kickback.engine.detailed import Phase
    from kickback.errors import SolverError

    c = runner.c
    t0 = runner.t
    if c.flux or not t_end > t0 or not (c.pin is None or _run_pinned(runner, name, t_end, kw)):
        runner.run(name, t_end, [], **kw)
        return
    try:
        probe = rest_probe(c, t0, runner.y) if rest else settled_probe(c, t0, runner.y)
        model = AffineModel(c, t0, probe, scale, t_end - t0)
    except (SolverError, ArithmeticError, ValueError):
        runner.run(name, t_end, [], **kw)
        return
    stride = FIRST_STRIDE * (t_end - t0)
    leave = 0.0
    # the model is taken again after each stretch stepped: in an off phase with snubber
    # capacitors (a capacitor behind a diode holds the charge the clamp left, and the diode blocks
    # only at that voltage), and in an on phase (a probe settled on a law's kink — the node at
    # 0 V with no coil current, where an ideal channel's law bends — linearises the wrong side)
    again = c.cap_chains if rest else True
    # a path departing from the model by little is tried with its first-order correction
    perturb = True
    tries = []  # (time, excess of the bound) of each corrected closed form refused
    for _ in range(MAX_ATTEMPTS):
        if again and runner.t > t0:
            probe = rest_probe(c, runner.t, runner.y) if rest else settled_probe(c, runner.t, runner.y)
            try:
                model = AffineModel(c, runner.t, probe, scale, t_end - t0)
            except (SolverError, ArithmeticError, ValueError):
                break
        if not model.defect(runner.t, runner.y)[0] <= 1.0:
            t_stop = min(t_end, runner.t + stride) if again else t_end
            stride *= 4.0
            runner.run(name, t_stop, [linear_event(model)], **kw)
            kw.pop("first_step", None)
            if runner.t < t_end and c.pin is None and not model.defect(runner.t, runner.y)[0] <= 1.0:
                # the event was located on a kink of a law (a clamp's current reaching zero at
                # its knee), on the near side of it: step just past
                runner.run(name, min(t_end, runner.t + 1e-6 * (t_end - t0)), [])
            if not _run_pinned(runner, name, t_end, kw):
                return
            if not model.defect(runner.t, runner.y)[0] <= 1.0:
                continue
        t_try = runner.t
        model.left_at, model.pert_failed = None, False
        sol = solve_affine(model, t_try, runner.y, t_end, energies, perturb=perturb)
        if sol is not None:
            runner.phases.append(Phase(name, runner.t, t_end, sol, sol.steps, None, c.conducting, c.t_turnoff))
            runner.y = sol(t_end)
            runner.t = t_end
            return
        if model.pert_excess is not None and not math.isfinite(model.pert_excess):
            perturb = False  # the correction cannot be formed here: the model must hold as it is
        if model.pert_failed:
            # the correction's error bound is not met yet (a ring still too large): step on for
            # about the time its envelope takes to bring it down, and try again
            tries.append((t_try, model.pert_excess))
            runner.run(name, t_try + next_try(model, t_end - t_try, tries), [], **kw)
            kw.pop("first_step", None)
            if not _run_pinned(runner, name, t_end, kw):
                return
        elif model.left_at is not None and model.left_at > t_try:
            # holds here but the path leaves the model at left_at (a ring swinging out of a
            # clamp's blocking band): step on past it, each time twice as far, and try again
            leave = max(2.0 * (model.left_at - t_try), 2.0 * leave)
            runner.run(name, min(t_end, t_try + leave), [], **kw)
            kw.pop("first_step", None)
            if not _run_pinned(runner, name, t_end, kw):
                return
        else:
            break
    runner.run(name, t_end, [], **kw)


def _run_pinned(runner, name: str, t_end: float, kw: dict) -> bool:
    """Step on while the node is pinned at a vertical law (a clamp at its breakdown: not affine),
    to where it leaves the law; False when the phase is over (``t_end`` reached), True when
    the node is free again before it, so that the rest may still be solved in closed form."""
    c = runner.c
    if runner.t < t_end and c.pin is not None:
        # a node with no capacitance floats and lands on its own: stepped to the end as before
        runner.run(name, t_end, [], until_free=c.capacitive, **kw)
        kw.pop("first_step", None)
    return runner.t < t_end and c.pin is None
