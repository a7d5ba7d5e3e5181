"""A long linear ring solved in closed form instead of step by step.

After the coil current's first zero, a lightly damped LC ring (an unclamped coil with its
winding and switch capacitance, an RC snubber) may take thousands of periods to fall below
0.1 % of the stored energy; Radau needs ~10 steps a period. Where every branch law is
piecewise linear and stays on one piece for the whole ring, the state equations are affine,
``dx/dt = A·x + b``, and the solution is the modal sum ``x(t) = x_∞ + Σ a_k e^{λ_k t}``. That
every branch stays on its piece is *proved*, not sampled: each branch voltage departs from its
final value by at most ``Σ |w·a_k|`` (the modes decay), and that interval must lie inside the
piece. The energies carried as states have rates that are quadratic in the state on the pieces;
their integrals are closed form, ``∫ e^{(λ_j+λ_k)t} dt``. The ring's end (the oscillating energy
below its level, then a zero of the coil current) and the 10 %/1 % events are found on a grid
of 1/16 of the fastest period and refined by bisection.

References
----------
C. Moler and C. Van Loan, "Nineteen dubious ways to compute the exponential of a matrix,
twenty-five years later", SIAM Review 45(1), 2003 (the eigenvector method);
C. K. Alexander and M. N. O. Sadiku, Fundamentals of Electric Circuits, ch. 8 (RLC rings).
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import brentq

from kickback.engine.linring_held import (
    CURVED_TOL,
    curved_departure,
    curved_retry,
    held_states,
    monotone_departure,
    shockley,
)
from kickback.engine.linring_samples import GRID, node_peaks, release_times, steps

#: a ring is solved in closed form only when it would last at least this many periods
MIN_PERIODS = 50
CHUNK = 200_000


def _emu(mu: np.ndarray, T: np.ndarray) -> np.ndarray:
    """∫₀^T e^{μ s} ds for complex μ (broadcast), without cancellation at small |μT|."""
    z = mu * T
    small = np.abs(z) < 1e-6
    safe = np.where(small, 1.0, mu)
    return np.where(small, T * (1 + z / 2 + z * z / 6), (np.exp(z) - 1.0) / safe)


class RingSolution:
    """Closed-form state of the ring at times t (callable like scipy's OdeSolution)."""

    def __init__(self, t0, y0, ie, x_inf, lam, amp, r0, grad, quad, ramp=None):
        self.t0, self.y0, self.ie = t0, np.asarray(y0, dtype=float), ie
        #: [unit/s] rate of each held state (a capacitor behind a reverse-biased diode), else 0
        self.ramp = np.zeros(ie) if ramp is None else np.asarray(ramp, dtype=float)
        self.x_inf, self.lam, self.amp = x_inf, lam, amp  # amp: (n_dyn, n_modes) complex
        self.r0, self.grad, self.quad = r0, grad, quad  # energy rates at x_inf, ∇, Hessian/2

    def dynamic(self, t) -> np.ndarray:
        s = np.atleast_1d(np.asarray(t, dtype=float)) - self.t0
        return self.x_inf[:, None] + np.real(self.amp @ np.exp(self.lam[:, None] * s[None, :])) \
            + self.ramp[:, None] * s[None, :]

    def energies(self, t) -> np.ndarray:
        s = np.atleast_1d(np.asarray(t, dtype=float)) - self.t0
        e1 = _emu(self.lam[:, None], s[None, :])  # (modes, n)
        lin = np.real((self.grad @ self.amp) @ e1)  # (rows, n)
        mu = self.lam[:, None] + self.lam[None, :]
        e2 = _emu(mu[:, :, None], s[None, None, :])  # (modes, modes, n)
        qa = np.einsum("mij,ik,jl->mkl", self.quad, self.amp, self.amp)  # (rows, modes, modes)
        quad = np.real(np.einsum("mkl,kln->mn", qa, e2))
        # a held state's ramp enters the rates linearly (its square, I_s² terms, is left out)
        held = (self.grad @ self.ramp)[:, None] * (0.5 * s * s)[None, :]
        return self.y0[self.ie:, None] + self.r0[:, None] * s[None, :] + lin + quad + held

    def __call__(self, t):
        scalar = np.ndim(t) == 0
        ts = np.atleast_1d(np.asarray(t, dtype=float))
        out = np.vstack([self.dynamic(ts), self.energies(ts)])
        return out[:, 0] if scalar else out


def _branch_pieces(c):
    """(voltage functional of the dynamic state, thresholds) of every branch with a kink: the
    switch's off-state law and each active chain (relative to its own voltage)."""
    out = []
    off = c.switch.off_state
    out.append((None, 0.0, [x for x in (off.v_fwd, off.v_rev) if math.isfinite(x)]))
    for k in c.active_chains:
        ch = c.chains[k]
        p = ch.pieces
        if p is None:  # a curved law: checked against its tangent (try_linear_ring)
            continue
        th = [x for x in (p.v_fwd, p.v_rev) if math.isfinite(x)]
        out.append((c.icap.get(k), c.Vs * ch.reference, th))
    return out


def try_linear_ring(runner, t_bound, rest_level, ev_times, v_fin, dyn_caps, ring_end):
    """Advance ``runner`` over the whole ring in closed form when it is affine and long.

    Returns (done, bound_hit, retry): ``done`` False leaves the runner untouched; ``retry`` [s]
    is then how long to integrate step by step before trying again (the ring's amplitude still
    reaches a kink of some law), or None (the ring cannot be solved in closed form).
    """
    from kickback.engine.detailed import HELD_FRACTION, Phase

    c = runner.c
    t0, y0 = runner.t, np.array(runner.y, dtype=float)
    if c.pin is not None or c.flux or c.conducting:
        return False, False, None
    if c._in_fall(t0):  # the current reversed during the fall: step to its end (a hair past), then try again
        return False, False, (c.t_turnoff + c.switch.fall_time - t0) + 1e-9 * c.switch.fall_time
    curved = [k for k in c.active_chains if c.chains[k].pieces is None]
    # a curved chain is either a lone Shockley diode's (its convex law bounds its departure from
    # the tangent exactly), or one with no capacitor whose law is only known to be monotone (a
    # varistor far below its knee: :func:`monotone_departure`)
    if not all(shockley(c.chains[k]) or c.icap.get(k) is None for k in curved):
        return False, False, None
    ie = c.ie
    A = c.jacobian(t0, y0)[:ie, :ie]
    f0 = c.rhs(t0, y0)
    b = f0[:ie] - A @ y0[:ie]
    if not (np.all(np.isfinite(A)) and np.all(np.isfinite(b))):
        return False, False, None
    # a capacitor behind a reverse-biased Shockley diode is held: it drains at the diode's
    # (constant) saturation current, a ramp; the rest rings about it
    held = held_states(c, curved, t0, y0)
    ramp = np.zeros(ie)
    ramp[held] = f0[held]
    A[:, held] = 0.0
    A[held, :] = 0.0
    b[held] = 0.0
    keep = np.setdiff1d(np.arange(ie), held)
    ring_caps = [k for k in dyn_caps if c.icap.get(k) not in held]
    try:
        x_inf = y0[:ie].copy()
        x_inf[keep] = np.linalg.solve(A[np.ix_(keep, keep)], -b[keep])
        lam, vk = np.linalg.eig(A[np.ix_(keep, keep)])
        if np.linalg.cond(vk) > 1e8 or not np.all(lam.real < 0):
            return False, False, _retry(c, curved, t0, y0, lam, ev_times)
        vec = np.zeros((ie, keep.size), dtype=complex)
        vec[keep] = vk
        coef = np.linalg.solve(vk, (y0[keep] - x_inf[keep]).astype(complex))
    except np.linalg.LinAlgError:
        return False, False, None
    amp = vec * coef[None, :]
    w_fast = float(np.max(np.abs(lam.imag)))
    sigma = float(np.min(-lam.real))
    e_now = max(_dyn_energy(c, y0[:ie, None], v_fin, ring_caps)[0], 1e-300)
    if not rest_level > 0:
        return False, False, None
    t_est = math.log(max(e_now / rest_level, 1.0)) / (2 * sigma) if w_fast > 0 else 0.0
    if t_est * w_fast / (2 * math.pi) < MIN_PERIODS and not held:
        return False, False, _retry(c, curved, t0, y0, lam, ev_times)
    # every branch stays on its piece for t0 ≤ t ≤ t0 + H: |u(t) − u_∞| ≤ Σ|w·a_k| plus the held
    # capacitors' ramps over H; H is the span to t_bound, or less where a ramp would carry a
    # diode out of its flat reverse (the ring is then continued from there)
    y_inf = y0.copy()
    y_inf[:ie] = x_inf
    nv_grad, nv_inf = _node_affine(c, t0, y_inf, amp)
    retry = 20 * 2 * math.pi / w_fast if w_fast > 0 else None
    if curved_retry(c, curved) is not None:
        # a Shockley diode conducting at the start slows the linearisation's fastest mode (200 Hz
        # beside a 52 kHz node ring, wide-range case 939): no longer than the node ring's stride
        retry = min(retry or math.inf, curved_retry(c, curved))
    if w_fast <= 0:
        return False, False, _retry(c, curved, t0, y0, lam, ev_times)
    if not _fits(c, curved, t0, y0, x_inf, lam, amp, ramp, nv_grad, nv_inf, 0.0):
        return False, False, retry
    horizon = t_bound - t0
    while not _fits(c, curved, t0, y0, x_inf, lam, amp, ramp, nv_grad, nv_inf, horizon):
        horizon *= 0.5
        if horizon < retry:
            return False, False, retry
    t_lim = t0 + horizon
    # the model must reproduce the true rates (its pieces) at the start and where the ring is
    # centred at the horizon: x_∞ once the real modes have decayed, else short of it (a motor's
    # slow speed: x_∞, reached in seconds, lies on other pieces, wide-range case 5995); the
    # energy rates are expanded there too
    real = lam.imag == 0
    y_c = y_inf.copy()
    y_c[:ie] += np.real(amp[:, real] @ np.exp(lam[real] * horizon))
    size = np.abs(A) @ np.maximum(np.abs(y0[:ie]), np.abs(x_inf)) + np.abs(b) + np.abs(ramp) + 1e-300
    for probe in (y_c, y0):
        d = c.rhs(t0, probe)[:ie] - (A @ probe[:ie] + b + ramp)
        if np.any(np.abs(d) > 1e-9 * size):
            return False, False, None
    r0, grad, quad = _energy_quadratic(c, t0, y_c, np.sum(np.abs(amp), axis=1))
    d = y_c[:ie] - x_inf  # the rates about y_c, re-expanded about x_∞ (exact for a quadratic)
    r0, grad = r0 - grad @ d + np.einsum("mij,i,j->m", quad, d, d), grad - 2.0 * np.einsum("mij,j->mi", quad, d)
    sol = RingSolution(t0, y0, ie, x_inf, lam, amp, r0, grad, quad, ramp)
    # the end: oscillating energy below its level, then a zero of the coil current
    period = 2 * math.pi / w_fast
    dt = period / GRID
    drains = {k: abs(ramp[c.icap[k]]) * c.chains[k].capacitance for k in dyn_caps if c.icap.get(k) in held}
    level = (rest_level, HELD_FRACTION * rest_level, drains)
    t_end, bound_hit = _first_below(c, sol, t0, t_lim, dt, level, v_fin, dyn_caps)
    if not bound_hit:
        i_end = float(sol.dynamic(t_end)[0, 0])
        if abs(i_end) > ring_end * c.i0:
            t_z = _first_zero(sol, t_end, t_lim, dt)
            t_end, bound_hit = (t_z, False) if t_z is not None else (t_lim, True)
    partial = bound_hit and t_lim < t_bound
    for key, frac in (("10%", 0.1), ("1%", 0.01)):
        if ev_times[key] is None:
            ev_times[key] = _first_down(sol, t0, t_end, dt, frac * c.i0)
    # the figures read off the samples are decided where the sparse grid may miss them: the node
    # voltage's maxima, and the last maximum of |i| at or above the release current
    peaks = node_peaks(sol, (nv_grad, nv_inf), t0, t_end, dt)
    rel = c.case.coil.release_current
    marks = release_times(sol, t0, t_end, dt, rel) if rel is not None and rel > 0 else []
    runner.peaks.extend(peaks)
    runner.phases.append(Phase("ring", t0, t_end, sol, steps(t0, t_end, period, marks), None, c.conducting,
                               c.t_turnoff))
    runner.t, runner.y = t_end, sol(t_end)
    if partial:  # on from t_lim: a period step by step, then in closed form again
        return False, False, period
    return True, bound_hit, None


def _retry(c, curved, t0, y0, lam, ev_times):
    """[s] how long to step before trying the closed form again when the model at t0 has no long
    ring, or None (step the rest of the ring).

    A Shockley diode still conducting: :func:`curved_retry`. A piecewise-linear branch still on a
    conducting piece (the ring starts where the coil current's first zero leaves the node at a
    TVS's or Zener's voltage; its current stops within a few of the node's time constants, and the
    ring the model then sees is the long one): twenty of the fastest mode's time constants, or the
    time since the coil current's first zero if longer — so the tries are spaced geometrically and
    cost a few eigenvalue problems, never more than twice the stepping they replace."""
    out = curved_retry(c, curved)
    if _on_conducting_piece(c, t0, y0):
        fast = 20.0 / float(np.max(np.abs(lam))) if lam.size and np.max(np.abs(lam)) > 0 else math.inf
        since = t0 - ev_times["zero"] if ev_times.get("zero") is not None else 0.0
        knee = max(fast, since)
        if math.isfinite(knee) and knee > 0:
            out = knee if out is None else min(out, knee)
    return out


def _on_conducting_piece(c, t0, y0) -> bool:
    """Some branch with a blocking band between two thresholds (the switch's off-state law with a
    breakdown and a body diode, a TVS, a diode + Zener chain) sits beyond its forward or reverse
    threshold at the state ``y0`` (within 1e-9 of the voltage scale)."""
    v = c.node_voltage(t0, y0)
    tol = 1e-9 * c.v_scale
    for icap, ref, th in _branch_pieces(c):
        if len(th) < 2 or max(th) <= min(th):  # no blocking band (a resistor's law): no knee to leave
            continue
        u = v - ref - (float(y0[icap]) if icap is not None else 0.0)
        if u >= max(th) - tol or u <= min(th) + tol:
            return True
    return False


def _fits(c, curved, t0, y0, x_inf, lam, amp, ramp, nv_grad, nv_inf, horizon) -> bool:
    """Every branch stays on its piece, and every Shockley diode flat, over ``horizon`` [s].

    A branch voltage is u(t) = u_∞ + Σ_k c_k e^{λ_k t} + ρ·t: an oscillating mode stays within
    ±|c_k|, a real mode (λ_k < 0) moves monotonically from c_k to c_k e^{λ_k H} — a motor's speed
    or a large snubber capacitor, decaying over seconds, stays near its start over a ring of
    milliseconds and is bounded by where it is, not by ±|c_k| (wide-range case 5800)."""
    real = lam.imag == 0
    decay = np.exp(np.where(real, lam.real, 0.0) * horizon)

    def interval(icap, ref):
        # [lo, hi] of the branch voltage nv − ref (− its capacitor's voltage) over the horizon
        w = nv_grad.copy()
        u_inf = nv_inf - ref
        if icap is not None:
            w[icap] -= 1.0
            u_inf -= x_inf[icap]
        ck = w @ amp
        osc = float(np.sum(np.abs(ck[~real]))) + float(np.sum(np.abs(ck[real].imag)))
        start, end = ck[real].real, ck[real].real * decay[real]
        drift = abs(float(w @ ramp)) * horizon
        return (u_inf - osc - drift + float(np.sum(np.minimum(start, end))),
                u_inf + osc + drift + float(np.sum(np.maximum(start, end))))

    for icap, ref, th in _branch_pieces(c):
        lo, hi = interval(icap, ref)
        tol = (hi - lo) * 1e-6 + 1e-9 * c.v_scale
        if any(lo - tol <= x <= hi + tol for x in th):
            return False
    for k in curved:
        # a Shockley diode's chain: its law is curved everywhere, but far enough in reverse it
        # is flat (−I_s): its departure from the tangent the model took, over the whole interval
        # the chain voltage can reach (a motor's slow speed mode bounded by where it is, as
        # above: wide-range cases 4684, 5700, 5995), must stay below :data:`CURVED_TOL` of the
        # start current
        lo, hi = interval(c.icap.get(k), c.Vs * c.chains[k].reference)
        departure = curved_departure if shockley(c.chains[k]) else monotone_departure
        if not departure(c, k, t0, y0, 0.5 * (lo + hi), 0.5 * (hi - lo)) <= CURVED_TOL * abs(c.i0):
            return False
    return True


def _node_affine(c, t, y_inf, amp):
    """Gradient of the node voltage in the dynamic state, and its value at x_∞."""
    ie = c.ie
    if c.capacitive:
        g = np.zeros(ie)
        g[1] = 1.0
        return g, float(y_inf[1])
    v0 = c.node_voltage(t, y_inf)
    g = np.zeros(ie)
    for j in range(ie):
        h = max(1e-6 * float(np.sum(np.abs(amp[j]))), 1e-12 * max(abs(y_inf[j]), 1.0))
        yp = y_inf.copy()
        yp[j] += h
        g[j] = (c.node_voltage(t, yp) - v0) / h
    return g, v0


def _energy_quadratic(c, t, y_inf, span):
    """Energy rates as r0 + ∇·z + zᵀQz in z = x − x_∞ (exact for quadratics: central
    differences with steps of 1e-3 of each state's ring amplitude)."""
    ie = c.ie
    n = c.n_states - ie
    # a thousandth of the ring's amplitude: the probes (corners included) stay on the pieces the
    # ring was proved to keep to; the rounding this costs is ~1e-10 of the rates
    h = np.where(span > 0, 1e-3 * span, 1e-6 * np.maximum(np.abs(y_inf[:ie]), 1.0))

    def r(z):
        y = y_inf.copy()
        y[:ie] += z
        return c.rhs(t, y)[ie:]

    r0 = r(np.zeros(ie))
    grad = np.zeros((n, ie))
    quad = np.zeros((n, ie, ie))
    e = np.eye(ie) * h[None, :]
    rp = [r(e[j]) for j in range(ie)]
    rm = [r(-e[j]) for j in range(ie)]
    for j in range(ie):
        grad[:, j] = (rp[j] - rm[j]) / (2 * h[j])
        quad[:, j, j] = (rp[j] + rm[j] - 2 * r0) / (2 * h[j] ** 2)
    for j in range(ie):
        for k in range(j + 1, ie):
            mixed = (r(e[j] + e[k]) - r(e[j] - e[k]) - r(-e[j] + e[k]) + r(-e[j] - e[k])) / (4 * h[j] * h[k])
            quad[:, j, k] = quad[:, k, j] = 0.5 * mixed
    return r0, grad, quad


def _dyn_energy(c, x, v_fin, dyn_caps, ts=None, held_level=0.0, drains=None):
    """Oscillating energy (coil plus capacitors about their final voltages) of states x (ie, n).

    With the times ``ts`` [s]: a capacitor draining through a blocking diode at the constant
    current ``drains[k]`` [A] counts only while it is not *held* — while the energy it drains
    over a span as long as the run so far exceeds ``held_level`` [J] (the detailed engine's
    rule, :func:`kickback.engine.detailed.integrate`)."""
    v_fin = c.ring_rest(x, v_fin)
    v = x[1] if c.capacitive else v_fin
    w = 0.5 * c.L * x[0] ** 2 + 0.5 * c.C_node * (v - v_fin) ** 2
    for k in dyn_caps:
        target = v_fin - c.Vs * c.chains[k].reference
        dv = x[c.icap[k]] - target
        term = 0.5 * c.chains[k].capacitance * dv ** 2
        if ts is not None and drains and k in drains:
            term = np.where(drains[k] * np.abs(dv) * ts <= held_level, 0.0, term)
        w = w + term
    return np.atleast_1d(w)


def _first_below(c, sol, t0, t_bound, dt, level, v_fin, dyn_caps):
    """First time the ring's energy is below its level: ``level`` is (rest level [J], held
    level [J], drains, see :func:`_dyn_energy`)."""
    rest, held_level, drains = level

    def e_at(ts):
        return _dyn_energy(c, sol.dynamic(ts), v_fin, dyn_caps, ts, held_level, drains) - rest

    t = t0
    while t < t_bound:
        ts = t + dt * np.arange(1, CHUNK + 1)
        ts = ts[ts <= t_bound] if ts[-1] > t_bound else ts
        if ts.size == 0:
            break
        e = e_at(ts)
        k = np.flatnonzero(e <= 0)
        if k.size:
            k = int(k[0])
            a = ts[k - 1] if k > 0 else t

            def g(s):
                return float(e_at(np.atleast_1d(s))[0])
            return (brentq(g, a, ts[k], xtol=1e-15 * ts[k]) if g(a) > 0 else ts[k]), False
        t = float(ts[-1])
    return t_bound, True


def _first_zero(sol, t_a, t_bound, dt):
    def i_at(s):
        return float(sol.dynamic(s)[0, 0])
    s0 = i_at(t_a)
    t = t_a
    while t < t_bound:
        ts = t + dt * np.arange(1, CHUNK + 1)
        ts = ts[ts <= t_bound]
        if ts.size == 0:
            return None
        i = sol.dynamic(ts)[0]
        k = np.flatnonzero(np.sign(i) != np.sign(s0))
        if k.size:
            k = int(k[0])
            a = ts[k - 1] if k > 0 else t
            return brentq(i_at, a, ts[k], xtol=1e-15 * ts[k])
        t = float(ts[-1])
    return None


def _first_down(sol, t0, t1, dt, level):
    """First downward crossing of the coil current through ``level`` in (t0, t1], or None."""
    ts = np.append(np.arange(t0, t1, dt), t1)
    i = sol.dynamic(ts)[0] - level
    k = np.flatnonzero((i[:-1] > 0) & (i[1:] <= 0))
    if not k.size:
        return None
    k = int(k[0])
    return brentq(lambda s: float(sol.dynamic(s)[0, 0]) - level, ts[k], ts[k + 1], xtol=1e-15 * ts[k + 1])
