"""Repetitive switching: one switching cycle of the circuit, and its periodic steady state by
shooting (Newton's method on the one-cycle map).

A cycle starts at turn-on (the switch conducts by its on-state law for ``D·T``), then the
switch turns off (the channel current falls over the fall time) and stays off to ``T``. The
dynamic states at the start of the cycle — coil current (or flux), node and snubber-capacitor
voltages, motor speed — are the unknowns of the fixed point ``x = Φ(x)``.

Speed (``python benchmarks/bench_pwm.py``): the on-phase, once the clamps have stopped conducting,
is affine and solved in closed form (:mod:`kickback.engine.linphase`, verified along the way);
Newton starts from the averaged model (:mod:`kickback.engine.averaged`), takes one
finite-difference Jacobian and then Broyden's update; the cycle that meets the tolerance is the
one reported (waveforms, energies, residual). On a piecewise-linear circuit the cycle map is
affine, so the first Newton step lands on ``x* = (I − A)⁻¹·b`` and the next cycle verifies it.

References
----------
T. J. Aprille and T. N. Trick, "Steady-state analysis of nonlinear circuits with periodic
inputs", Proc. IEEE 60(1), 1972 (shooting on the one-period map);
C. G. Broyden, "A class of methods for solving nonlinear simultaneous equations", Math. Comp.
19, 1965 (the rank-one Jacobian update).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kickback.circuit import Circuit
from kickback.engine.detailed import DEFAULT_RTOL, EDGE_STEPS, Phase, PhaseRunner, Waveforms
from kickback.engine.linedge import run_edge_phase
from kickback.engine.linphase import run_affine_phase
from kickback.engine.periodic_bracket import (
    FORGOTTEN,  # noqa: F401  (its former home)
    bracketed_root,
    held_root,
    held_state,
    topup_root,
    topup_state,
)
from kickback.engine.periodic_bracket import forgotten as _forgotten
from kickback.engine.periodic_bracket import merit as _merit
from kickback.engine.periodic_bracket import one_kept_flips as _one_kept_flips
from kickback.engine.periodic_settle import accepted, full_at_noise, slow_root, slow_state
from kickback.errors import SolverError

STEADY_TOL = 1e-9  # relative change of the cycle-start state at the fixed point
MAX_NEWTON = 40
CYCLE_RTOL = 1e-8
#: chord iterations on a slow speed at most (periodic_settle.slow_root; a second from the first's best)
SLOW_TRIES = 2
#: residual below which the next cycle is solved in full (energies, kept for the figures): it is
#: then expected to be the verifying one
FINAL_FROM = 1e-6


@dataclass(frozen=True)
class SteadyState:
    """The periodic steady state at one duty.

    Attributes
    ----------
    x : ndarray — dynamic states at the start of the cycle (turn-on)
    waveforms : Waveforms — one steady-state cycle, t from 0 (turn-on) to the period
    energies_on / energies_off : ndarray — energy integrals [J] over the on and off parts
    cycle_solves : int — one-cycle integrations the shooting needed
    contraction : float — largest |eigenvalue| of the one-cycle map at the fixed point
    brute_force_cycles : int or None — cycles plain repetition from zero current would need to
        come within the same tolerance (from the contraction; None when it does not contract)
    residual : float — relative fixed-point residual reached (``|Φ(x) − x|`` of the reported
        cycle, relative to each state's scale)
    x_turnoff : ndarray or None — dynamic states at the turn-off instant ``t = D·T`` of the
        reported cycle (coil current or flux, node and snubber-capacitor voltages, motor speed)
    switch_current_turnoff : float or None — [A] the channel current the turn-off starts from
    """

    duty: float
    frequency: float
    x: np.ndarray
    waveforms: Waveforms
    energies_on: np.ndarray
    energies_off: np.ndarray
    cycle_solves: int
    contraction: float
    brute_force_cycles: int | None
    residual: float
    x_turnoff: np.ndarray | None = None
    switch_current_turnoff: float | None = None


def scales(c: Circuit) -> np.ndarray:
    """Scale of each dynamic state: the on-state current (or flux), the voltage scale, the speed."""
    s = np.empty(c.ie)
    s[0] = abs(c.coil_state(c.i0))
    s[1:] = c.v_scale
    if c.mech:
        s[c.iw] = max(abs(c.on_speed()), 1.0)
    return s


_scales = scales  # former private name


def one_cycle(c: Circuit, x0: np.ndarray, duty: float, frequency: float, rtol: float, keep: bool = False,
              fast: bool = True, energies: bool = True):
    """Integrate one cycle from the dynamic state ``x0``; returns (x1, E_on, E_off, runner).

    ``fast``: solve the affine part of the on-phase in closed form where it is verified to hold.
    ``energies=False`` (fast only): skip the on-phase energy quadrature; E_on and E_off are None.
    """
    period = 1.0 / frequency
    t_on = duty * period
    y = np.zeros(c.n_states)
    y[: c.ie] = x0
    c.conducting, c.t_turnoff = True, t_on
    try:
        runner = PhaseRunner(c, rtol, y, 0.0)
        from kickback.engine.kstep import cycle_mode

        # the cycles stepped by the compiled Radau IIA on the compiled circuit (kstep.py; the
        # phases it cannot take stay on scipy): 4-20x faster on the slow drives of issue 14
        runner.kernel = _CYCLE_MODE[0] or cycle_mode()
        if fast and not energies:
            # the energies are not wanted: keep them out of the step-size control
            runner.atol = runner.atol.copy()
            runner.atol[c.ie:] = 1e300
        if fast:
            run_affine_phase(runner, "on", t_on, scales(c), energies)
        else:
            runner.run("on", t_on, [])
        e_on = runner.y[c.ie:].copy()
        # turn-off: the channel current falls from what it carries now
        v = float(runner.y[1]) if c.capacitive else c.node_voltage(t_on, runner.y)
        c.i_on = c.split_currents(t_on, v, runner.y)[0] - c.g_leak * v
        # the state at the turn-off instant, for a final turn-off from the periodic state
        runner.x_turnoff, runner.i_turnoff = runner.y[: c.ie].copy(), float(c.i_on)
        c.conducting = False
        # the turn-off is integrated in its own clock (τ = t − D·T): time steps far below the
        # spacing of doubles near D·T (a node swinging through a stiff clamp knee in 1e-19 s)
        # stay representable; its phases are shifted back to the cycle's clock afterwards
        n_on, n_peaks = len(runner.phases), len(runner.peaks)
        runner.t, c.t_turnoff = 0.0, 0.0
        t_off = period - t_on
        tf = c.switch.fall_time
        if tf > 0 and fast:
            # a long fall rings the coil with the node capacitance: closed form where it is affine
            run_edge_phase(runner, min(tf, t_off), scales(c), energies, first_step=tf / 1000,
                           max_step=tf / EDGE_STEPS)
        elif tf > 0:
            runner.run("edge", min(tf, t_off), [], first_step=tf / 1000, max_step=tf / EDGE_STEPS)
        if runner.t < t_off:
            first = max(tf, period * 1e-9) / 1000
            if fast:
                # once the clamps have stopped conducting the rest of the off phase is affine
                # (an LC ring, a decay): closed form from there, verified along the way
                run_affine_phase(runner, "off", t_off, scales(c), energies, rest=True, first_step=first)
            else:
                runner.run("off", t_off, [], first_step=first)
        runner.phases[n_on:] = [shifted(ph, t_on) for ph in runner.phases[n_on:]]
        runner.peaks[n_peaks:] = [t + t_on for t in runner.peaks[n_peaks:]]
        runner.t = period
        e_off = runner.y[c.ie:] - e_on
        if fast and not energies:
            e_on = e_off = None
        return runner.y[: c.ie].copy(), e_on, e_off, (runner if keep else None)
    finally:
        c.conducting, c.t_turnoff, c.pin = False, 0.0, None


class ShiftedSolution:
    """A dense solution integrated in a phase's own clock, called in the cycle's clock."""

    def __init__(self, sol, offset: float):
        self.sol, self.offset = sol, offset

    def __call__(self, t):
        return self.sol(np.asarray(t, dtype=float) - self.offset)


def shifted(ph: Phase, offset: float) -> Phase:
    """Phase ``ph`` (integrated with the turn-off at τ = 0) in the cycle's clock, the turn-off at
    ``offset`` [s]."""
    return Phase(ph.name, ph.t0 + offset, ph.t1 + offset, ShiftedSolution(ph.sol, offset),
                 np.asarray(ph.t_steps, dtype=float) + offset, ph.pin, ph.conducting, offset)


#: the cycles' stepping in this process, None: :func:`kickback.engine.kstep.cycle_mode`
_CYCLE_MODE: list[str | None] = [None]


def steady_state(c: Circuit, duty: float, frequency: float, *, rtol: float | None = None,
                 x_guess: np.ndarray | None = None) -> SteadyState:
    """Periodic steady state by Newton's method on the one-cycle map: one finite-difference
    Jacobian, Broyden updates, the averaged model as the first guess.

    The cycles are stepped by the compiled integrator (``kstep``) where it takes them; where
    that iteration fails, it is solved again with every cycle on scipy's Radau, and only that
    failure is reported (the two cycle maps agree to ~1e-7 of the states' scales, but Newton's
    path through them can differ: wide-range case 4711 converged on scipy only).

    Raises
    ------
    SolverError — Newton did not converge; the message gives the residual reached.
    """
    from kickback.engine.kstep import cycle_mode

    if _CYCLE_MODE[0] is not None or cycle_mode() != "compiled":
        return _steady_state(c, duty, frequency, rtol=rtol, x_guess=x_guess)
    try:
        return _steady_state(c, duty, frequency, rtol=rtol, x_guess=x_guess)
    except SolverError:
        _CYCLE_MODE[0] = "off"
        try:
            return _steady_state(c, duty, frequency, rtol=rtol, x_guess=x_guess)
        finally:
            _CYCLE_MODE[0] = None


def _steady_state(c: Circuit, duty: float, frequency: float, *, rtol: float | None = None,
                  x_guess: np.ndarray | None = None) -> SteadyState:
    """:func:`steady_state` with the cycles stepped as :func:`one_cycle` says."""
    # cycles tighter than a single turn-off: the fixed point is wanted to 1e-9 and the Jacobian
    # differences two cycle solves
    rtol = min(DEFAULT_RTOL if rtol is None else rtol, CYCLE_RTOL)
    scale = scales(c)
    n = c.ie
    solves = 0
    known = None  # Φ(x_guess), where the first guess already solved that cycle
    if x_guess is None:
        x_guess, solves, known = _first_guess(c, duty, frequency, rtol, scale)
    x = np.array(x_guess, dtype=float)
    resid = step = math.inf
    jm = None  # Jacobian of the cycle map Φ
    jm_fd = None  # the last one by finite differences (Broyden's updates leave nil columns nil only roughly)
    f_prev = x_prev = dx_prev = None
    resid_prev = math.inf
    lam = 1.0  # fraction of the Newton step taken
    full = False  # solve the cycle in full (energies, kept): once it is expected to be the last
    history = []  # (x, Φ(x) − x) of every cycle the iteration solved
    slow_tries = 0  # chord iterations on a slow speed tried (at most SLOW_TRIES)
    rho_slow = None  # the contraction, where the slow speed's chord iteration found the fixed point
    cheap = None  # (x, Φ(x)) of a cheap cycle that met the tolerance, its full cycle next
    for _ in range(MAX_NEWTON):
        if known is not None and not full:
            x1, e_on, e_off, runner = known, None, None, None
        else:
            x1, e_on, e_off, runner = one_cycle(c, x, duty, frequency, rtol, keep=full, energies=full)
            solves += 1
        known = None
        f = x1 - x
        history.append((x, f))
        resid = float(np.max(np.abs(f) / scale))
        if full and cheap is not None and cheap[0] is x and resid > STEADY_TOL \
                and full_at_noise(x, x1, cheap[1], scale, jm, jm_fd, rtol, STEADY_TOL):
            break  # the cheap cycle from this state met the tolerance, the full one at the noise
        merit = _merit(f, scale, jm_fd)
        if resid > STEADY_TOL and topup_state(history, scale) is not None:
            # one state left, Newton creeping up an exponential top-up: bracket and secant in its log
            got = topup_root(c, duty, frequency, rtol, scale, history, one_cycle, STEADY_TOL, FINAL_FROM)
            if got is not None:
                x, e_on, e_off, runner, resid, more = got
                solves += more
                break
        if x_prev is not None and resid > STEADY_TOL and merit > 0.1 * resid_prev \
                and _one_kept_flips(jm_fd, scale, f, f_prev):
            # one state carries the map, and a step that took off little of its residual
            # crossed its fixed point: bracketed, Brent's method beats Newton jumping across
            got = held_root(c, duty, frequency, rtol, scale, jm_fd, history, one_cycle, STEADY_TOL) \
                or _bracketed_root(c, duty, frequency, rtol, scale, jm_fd, history)
            if got is not None:
                x, e_on, e_off, runner, resid, more = got
                solves += more
                break
        if x_prev is not None and resid > STEADY_TOL and not merit < (1.0 - 1e-4 * lam) * resid_prev \
                and held_state(jm_fd, scale) is not None:
            # a held state (nil slope where the Jacobian was taken) and a step that did not
            # help: bracket it (periodic_bracket.held_root) rather than back off along the step
            got = held_root(c, duty, frequency, rtol, scale, jm_fd, history, one_cycle, STEADY_TOL)
            if got is not None:
                x, e_on, e_off, runner, resid, more = got
                solves += more
                break
        if x_prev is not None and slow_tries < SLOW_TRIES and resid > 10.0 * float(np.max(np.abs(f_prev) / scale)) \
                and slow_state(c, jm_fd) is not None:
            # a wild step (the residual up tenfold) with a slow motor speed: the Jacobian, taken
            # where the fast states are far from settled, says nothing of the speed's fixed point;
            # a chord iteration on the speed's drift per cycle, the fast states plain-iterated
            got = slow_root(c, duty, frequency, rtol, scale, slow_state(c, jm_fd), x_prev, one_cycle, STEADY_TOL,
                            x_prev + f_prev, best := [])
            slow_tries += 1
            if got is not None:
                x, e_on, e_off, runner, resid, more, rho_slow = got
                solves += more
                break
            solves += best[2] if best else 0
            if best and best[0] < float(np.max(np.abs(f_prev) / scale)):
                # not settled, nearer than the shooting was: on from its best plain iterate, not the far step
                x, resid_prev, lam, jm, full = best[1], math.inf, 1.0, None, False
                x_prev = f_prev = dx_prev = None
                continue
        if x_prev is not None and resid > STEADY_TOL and not merit < (1.0 - 1e-4 * lam) * resid_prev:
            # the step did not reduce the residual: the map has a kink between (the coil current
            # reaching zero in the off phase or not, a clamp conducting or not) and its slope on
            # the far side is not the one the step was taken with. Back off along the step; after
            # three cuts take the plain iterate Φ(x_prev) and a fresh Jacobian there.
            if lam > 1.0 / 64:
                lam /= 4.0
                x = x_prev + lam * dx_prev
            else:
                x = x_prev + f_prev
                x_prev = f_prev = dx_prev = None
                resid_prev, lam, jm = math.inf, 1.0, None
            full = False
            continue
        if jm is None and resid > STEADY_TOL:
            jm = np.empty((n, n))
            for j in range(n):
                h = 1e-6 * scale[j]
                xp = x.copy()
                xp[j] += h
                jm[:, j] = (one_cycle(c, xp, duty, frequency, rtol, energies=False)[0] - x1) / h
                solves += 1
            jm_fd = jm.copy()
            # a state the map forgets (its column below the difference noise) gets a nil column:
            # Newton takes the plain iterate there, not a step off by the noise
            jm[:, _forgotten(jm, scale)] = 0.0
        elif jm is not None and x_prev is not None:
            # Broyden's rank-one update of F(x) = Φ(x) − x along the last step (scaled states)
            dx = (x - x_prev) / scale
            df = (f - f_prev) / scale
            bs = (jm - np.eye(n)) * scale[None, :] / scale[:, None]
            bs += np.outer(df - bs @ dx, dx) / float(dx @ dx)
            jm = bs * scale[:, None] / scale[None, :] + np.eye(n)
        dx_next = -np.linalg.solve(jm - np.eye(n), f) if jm is not None else np.zeros(n)
        # distance to the fixed point: the Newton step (the residual alone understates it by
        # 1/(1 − ρ) when the map contracts slowly)
        step = float(np.max(np.abs(dx_next) / scale))
        # met: the residual of the states the map depends on within the tolerance, the distance
        # to the fixed point within it or within the cycle integration's own accuracy; a state
        # the map forgets within that accuracy (periodic_settle.accepted)
        if accepted(f, dx_next, x, scale, jm_fd, rtol, STEADY_TOL):
            if full:
                break
            full = True  # met: solve this cycle again in full, to report it
            cheap = (x, x1)
            continue
        cheap = None
        x_prev, f_prev, dx_prev, resid_prev, lam = x, f, dx_next, _merit(f, scale, jm_fd), 1.0
        x = x + dx_next
        # every cycle after an accepted step is solved in full: on an affine map the first
        # Newton step lands on the fixed point, and that cycle is the one reported
        full = True
    else:
        got = _bracketed_root(c, duty, frequency, rtol, scale, jm_fd, history) \
            or held_root(c, duty, frequency, rtol, scale, jm_fd, history, one_cycle, STEADY_TOL)
        if got is None:
            raise SolverError(f"the periodic steady state did not converge at duty {duty:g} "
                              f"(relative residual {resid:.1e}, Newton step {step:.1e} after {MAX_NEWTON} "
                              f"Newton steps)")
        x, e_on, e_off, runner, resid, more = got
        solves += more
    if rho_slow is not None:
        rho, brute = brute_force_estimate(c, x, None, rho_slow)
    elif jm is None:  # converged at the first guess: estimate the map's Jacobian for the contraction
        jm = np.empty((n, n))
        for j in range(n):
            xp = x.copy()
            xp[j] += 1e-6 * scale[j]
            jm[:, j] = (one_cycle(c, xp, duty, frequency, rtol, energies=False)[0] - x) / (1e-6 * scale[j])
            solves += 1
    if rho_slow is None:
        rho, brute = brute_force_estimate(c, x, jm_fd if jm_fd is not None else jm)
    w = steady_waveforms(c, runner, rtol, "detailed, periodic steady state")
    return SteadyState(duty, frequency, x, w, e_on, e_off, solves, rho, brute, resid, runner.x_turnoff,
                       runner.i_turnoff)


def _bracketed_root(c: Circuit, duty: float, frequency: float, rtol: float, scale: np.ndarray, jm, history):
    """:func:`kickback.engine.periodic_bracket.bracketed_root` with this module's cycle map."""
    return bracketed_root(c, duty, frequency, rtol, scale, jm, history, one_cycle, STEADY_TOL)


def _first_guess(c: Circuit, duty: float, frequency: float, rtol: float, scale: np.ndarray):
    """(First guess of the cycle-start state, cycle solves spent on it, Φ there or None).

    The averaged model where it has a solution. Where it has none — the coil current reaches
    zero every cycle (discontinuous conduction), or nothing conducts with the switch off — the
    better of two starts by the residual of one cycle: the on-state scaled by the duty, and the
    circuit at rest (no coil current, capacitors at their final voltages), which is where a
    discontinuous cycle starts.
    """
    from kickback.engine.averaged import averaged_guess
    from kickback.engine.linphase import rest_probe

    x, ok = averaged_guess(c, duty, frequency, report=True)
    if ok:
        return x, 0, None
    y = np.zeros(c.n_states)
    y[: c.ie] = x
    rest = rest_probe(c, 0.0, y)[: c.ie]
    best, solves = None, 0
    for cand in (x, rest):
        try:
            x1 = one_cycle(c, cand, duty, frequency, rtol, energies=False)[0]
        except SolverError:
            continue
        solves += 1
        r = float(np.max(np.abs(x1 - cand) / scale))
        if best is None or r < best[0]:
            best = (r, cand, x1)
    return (x, solves, None) if best is None else (best[1], solves, best[2])


def brute_force_estimate(c: Circuit, x: np.ndarray, jm: np.ndarray | None,
                         rho: float | None = None) -> tuple[float, int | None]:
    """(Contraction ρ = largest |eigenvalue| of the map's Jacobian — or ``rho`` where given —,
    cycles plain repetition from zero current and discharged capacitors needs to come within
    :data:`STEADY_TOL`)."""
    if rho is None:
        rho = float(np.max(np.abs(np.linalg.eigvals(jm))))
    start_err = float(np.max(np.abs(x) / scales(c)))
    brute = None
    if 0 < rho < 1 and start_err > STEADY_TOL:
        brute = int(math.ceil(math.log(STEADY_TOL / start_err) / math.log(rho)))
    return rho, brute


def steady_waveforms(c: Circuit, runner: PhaseRunner, rtol: float, engine: str) -> Waveforms:
    """Sampled waveforms of a kept cycle."""
    from kickback.engine.sampling import sample_run

    w = sample_run(c, runner.phases, {"10%": None, "1%": None, "zero": None}, runner.peaks, False, rtol,
                   runner.calls, 6)
    w.engine = engine
    return w
