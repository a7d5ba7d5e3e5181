"""A phase of :class:`kickback.engine.detailed.PhaseRunner` stepped by kickback's own Radau IIA.

The detailed engine steps each phase with scipy's Radau (``PhaseRunner._solve``). Here the same
phase is stepped by :func:`kickback.engine.radau5.solve` — the same method (3-stage Radau IIA,
order 5), its loop compiled — on the circuit's equations in compiled form
(``kickback.engine.kcircuit``: ``pack``, ``set_mode``, ``RHS``, ``JAC``, ``NODE_BALANCE``,
``PIN_RELEASE``, ``supported``), or, for testing the plumbing, on plain-Python stand-ins that wrap
``Circuit.rhs`` and ``PhaseRunner.jac`` (the loop then runs as plain Python).

Events as data: every event function the runner builds or receives carries a ``spec`` (a
tuple), which :func:`event_table` turns into rows of the parameter array's tail; one event
function (:func:`make_events`) evaluates every row:

* ``("level", i, x)``: ``y[i] - x`` (a fraction of the coil current, the zero, a knee, a
  vertical law's entry level);
* ``("balance",)``: coil current less the branch currents at the node voltage (the node's
  peak, ``PhaseRunner.ev_peak``);
* ``("release",)``: the current of the vertical law the node is pinned at (its release);
* ``("ring_energy", v_fin, level)``: ½·L·i² + ½·C·(v − v_fin)² − level (the ring's end when
  no snubber capacitor rings and the coil is linear).

A phase with an event without a spec, keyword arguments other than ``first_step`` and
``max_step``, or a circuit the kernel does not support returns None: the caller steps it with
scipy. The opt-in (this wave): ``KICKBACK_KERNEL=1`` (the compiled kernel),
``KICKBACK_KERNEL=standin`` (the stand-ins), or the runner's ``kernel`` attribute
(``"compiled"``/``"standin"``; ``"off"`` overrides the environment).

References
----------
E. Hairer and G. Wanner, Solving Ordinary Differential Equations II, 2nd ed., Springer 1996,
§IV.8; scipy.integrate.solve_ivp (the result's fields this returns, and its event rule).
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from kickback.circuit import FLOAT
from kickback.engine.radau5_jit import jit
from kickback.errors import SolverError

#: columns of one event row in the parameter array: kind, state index, a, b, c
ROW = 5
LEVEL, BALANCE, RELEASE, RING_ENERGY, DEFECT = 0, 1, 2, 3, 4
_KINDS = {"level": LEVEL, "balance": BALANCE, "release": RELEASE, "ring_energy": RING_ENERGY, "defect": DEFECT}
ENV = "KICKBACK_KERNEL"


@dataclass
class PhaseSolution:
    """What ``solve_ivp`` returns, as far as the engine reads it (t, y, status, message,
    t_events, sol), plus the integrator's counts."""

    t: np.ndarray
    y: np.ndarray
    status: int
    message: str
    t_events: list
    sol: object
    counts: dict


#: values of ``KICKBACK_KERNEL`` that keep every phase on scipy (the periodic steady state too)
OFF = ("0", "off", "scipy")


def mode(runner) -> str | None:
    """``"compiled"``, ``"standin"`` or None (scipy) for this runner."""
    m = getattr(runner, "kernel", None)
    if m is None:
        env = os.environ.get(ENV, "")
        m = {"1": "compiled", "compiled": "compiled", "standin": "standin"}.get(env)
    return m if m in ("compiled", "standin") else None


def cycle_mode() -> str:
    """The mode of the periodic steady state's cycles (``periodic.one_cycle``): compiled unless
    ``KICKBACK_KERNEL`` says ``0``/``off``/``scipy`` (or ``standin``). The cycles are where the
    stepping costs most (10³–10⁵ steps a cycle, tens of cycles); a single turn-off stays on scipy
    unless opted in, so that a plain ``kickback run`` imports no numba."""
    env = os.environ.get(ENV, "")
    return "off" if env in OFF else "standin" if env == "standin" else "compiled"


_WARM = {"done": False}


def _cache_is_cold() -> bool:
    """Whether the compiled integrator's loop has no cache index next to its module yet."""
    from pathlib import Path

    folder = Path(__file__).parent / "__pycache__"
    return not any(folder.glob("radau5_core.integrate_loop-*.nbi"))


def warm_up() -> None:
    """Load (or, on first use, compile) the compiled circuit, the integrator's loop and the event
    function once per process; on first use say on stderr what it does and how long it took
    (issue 18: no first-run surprise)."""
    if _WARM["done"]:
        return
    import sys
    import time

    cold = _cache_is_cold()
    if cold:
        print("kickback: compiling the stepping engine for this machine (first use; it is cached for "
              "later runs)…", file=sys.stderr, flush=True)
    t0 = time.perf_counter()
    from kickback.engine import kcircuit, radau5

    radau5._compiled()
    _compiled_events(kcircuit)
    took = time.perf_counter() - t0
    _WARM["done"] = True
    if cold or took > 5.0:
        from kickback.engine.radau5_jit import CACHE_UNAVAILABLE

        where = ("no writable cache folder: compiled again in each process" if CACHE_UNAVAILABLE
                 else "cached")
        print(f"kickback: the stepping engine was ready in {took:.1f} s ({where})", file=sys.stderr, flush=True)


def make_events(node_balance, pin_release, rates):
    """The event function ``events(t, y, p)`` of the rows :func:`event_table` appended to ``p``
    (plain Python; :class:`Kernel` compiles it with the kernel's ``node_balance``,
    ``pin_release`` and right-hand side ``rates``)."""

    def events(t, y, p):
        m = int(p[p.size - 1])
        base = p.size - 1 - ROW * m
        out = np.empty(m)
        for e in range(m):
            r = base + ROW * e
            kind = int(p[r])
            if kind == LEVEL:
                out[e] = y[int(p[r + 1])] - p[r + 2]
            elif kind == BALANCE:
                out[e] = node_balance(t, y, p)
            elif kind == RELEASE:
                out[e] = pin_release(t, y, p)
            elif kind == RING_ENERGY:  # a·y0² + b·(y1 − c)² − level (the level in the index slot)
                dv = y[1] - p[r + 4]
                out[e] = p[r + 2] * y[0] * y[0] + p[r + 3] * dv * dv - p[r + 1]
            else:  # DEFECT: its data p[r+1] from the array's end, ie states, level, t_ref
                out[e] = _defect(t, y, p, rates(t, y, p), p.size - int(p[r + 1]), int(p[r + 2]), p[r + 3], p[r + 4])
        return out

    return events


@jit
def _defect(t, y, p, f, o, ie, level, t_ref):
    """``linphase.linear_event``'s value: log10(2·d/level), d the largest departure of the rates
    ``f`` from the affine model ẋ = A·x + b + g·(t − t_ref) relative to what it allows
    (``AffineModel.defect``); data at ``p[o:]``: A (ie × ie), b, g, the allowance's constant
    part LIN_TOL·scale/span (ie each), the rounding factor."""
    a0, b0, g0, w0 = o, o + ie * ie, o + ie * ie + ie, o + ie * ie + 2 * ie
    rounding = p[w0 + ie]
    dt = t - t_ref
    worst = 0.0
    for i in range(ie):
        ax = 0.0
        terms = 0.0
        for j in range(ie):
            ax += p[a0 + i * ie + j] * y[j]
            terms += abs(p[a0 + i * ie + j]) * abs(y[j])
        ramp = p[g0 + i] * dt
        d = abs(f[i] - ax - p[b0 + i] - ramp)
        if d == 0.0:
            continue
        allow = p[w0 + i] + rounding * (terms + abs(p[b0 + i]) + abs(ramp))
        ratio = d / allow if allow > 0.0 else np.inf
        worst = max(worst, ratio)
    return np.log10(max(2.0 * worst / level, 1e-300))


def event_table(c, specs) -> np.ndarray | None:
    """The specs' data blocks, then one row of :data:`ROW` numbers each, then their number;
    None when one is missing or not evaluable here (a ring energy of a saturating coil, a motor,
    no node capacitance)."""
    rows, data = [], []
    for s in specs:
        kind = _KINDS.get(s[0]) if s else None
        if kind is None:
            return None
        if kind == LEVEL:
            rows.append([LEVEL, float(s[1]), float(s[2]), 0.0, 0.0])
        elif kind == RING_ENERGY:
            if c.flux or c.mech or not c.capacitive:
                return None
            _, v_fin, level = s
            rows.append([RING_ENERGY, float(level), 0.5 * c.L, 0.5 * c.C_node, float(v_fin)])
        elif kind == DEFECT:
            _, A, b, g, allow, rounding, t_ref, level = s
            ie = len(b)
            rows.append([DEFECT, float(sum(len(x) for x in data)), float(ie), float(level), float(t_ref)])
            data.append(np.concatenate([np.ravel(A), b, np.zeros(ie) if g is None else g,
                                         np.broadcast_to(np.asarray(allow, dtype=float), (ie,)), [rounding]]))
        else:
            rows.append([kind, 0.0, 0.0, 0.0, 0.0])
    size = sum(len(x) for x in data) + ROW * len(rows) + 1
    for r in rows:
        if r[0] == DEFECT:
            r[1] = float(size - r[1])  # counted from the array's end (the kernel's constants come first)
    return np.concatenate(data + [np.asarray(rows, dtype=float).ravel(), [float(len(rows))]])


class Kernel:
    """The equations of one circuit for :func:`kickback.engine.radau5.solve`: compiled
    (``kcircuit``) or plain-Python stand-ins around ``runner``."""

    def __init__(self, runner, which: str):
        c = runner.c
        self.which = which
        self.why_not = None
        if which == "compiled":
            try:
                from kickback.engine import kcircuit
            except ImportError as exc:
                self.why_not = f"no compiled kernel ({exc})"
                return
            self.why_not = kcircuit.supported(c)
            if self.why_not is not None:
                return
            warm_up()
            self.kc = kcircuit
            self.p = np.asarray(kcircuit.pack(c, runner.scale), dtype=float)
            self.rhs, self.jac = kcircuit.RHS, kcircuit.JAC
            self.events = _compiled_events(kcircuit)
            return
        if not c.capacitive:
            self.why_not = "no node capacitance (algebraic node)"
            return
        self.kc = None
        self.p = np.zeros(0)

        def rhs(t, y, p):
            return np.asarray(runner.rhs(t, y), dtype=float)

        def jac(t, y, p):
            return np.ascontiguousarray(runner.jac(t, y), dtype=float)

        def node_balance(t, y, p):
            return float(runner.ev_peak(t, y))

        def pin_release(t, y, p):
            pin = c.pin
            vals = c.currents_at(t, pin[0], y)
            vals[pin[1]] = 0.0
            return pin[2] * (float(c.coil_current(y[0])) - sum(vals))

        self.rhs, self.jac = rhs, jac
        def rates(t, y, p):
            return np.asarray(c.rhs(t, y), dtype=float)

        self.events = make_events(node_balance, pin_release, rates)

    def set_mode(self, c) -> None:
        if self.kc is not None:
            self.kc.set_mode(self.p, c)


_EVENTS = {}


def _compiled_events(kcircuit):
    """:func:`make_events` compiled with the kernel's NODE_BALANCE and PIN_RELEASE (once per
    process: not cached on disk, so a changed kernel is never read from a stale cache)."""
    key = id(kcircuit)
    if key not in _EVENTS:
        import numba

        from kickback.engine.radau5 import EVENTS_SIGNATURE

        _EVENTS[key] = numba.njit(EVENTS_SIGNATURE)(make_events(kcircuit.NODE_BALANCE, kcircuit.PIN_RELEASE,
                                                                      kcircuit.RHS))
    return _EVENTS[key]


def kernel(runner, which: str) -> Kernel:
    k = getattr(runner, "_kstep_kernel", None)
    if k is None or k.which != which:
        k = Kernel(runner, which)
        runner._kstep_kernel = k
    return k


def newton_tol(rtol: float) -> float:
    """scipy Radau's Newton tolerance for its (scalar) rtol (solve_ivp's Radau.__init__)."""
    return max(10 * np.finfo(float).eps / rtol, min(0.03, rtol ** 0.5))


def _integrate(runner, k: Kernel, t0, t1, y0, p, ev, dirs, terms, kw, max_calls):
    from kickback.engine.radau5 import solve

    rtol = runner.rtol_vector if runner.rtol_vector is not None else runner.rtol
    # every step takes ≥ 4 evaluations (3 stages, the next start's slope): the runner's
    # evaluation budget bounds the steps
    max_steps = max(1, int(max_calls / (4 * share(k))))
    return solve(k.rhs, k.jac, (t0, t1), y0, p, rtol=rtol, atol=runner.atol, first_step=kw.get("first_step"),
                 max_step=kw.get("max_step", np.inf), max_steps=max_steps, events=ev,
                 directions=dirs, terminal=terms, newton_tol=newton_tol(runner.rtol),
                 compiled=k.which == "compiled")


#: share of the runner's evaluation budget (``detailed.MAX_RHS_CALLS``, a bound on the CPU a case
#: may take) one compiled evaluation uses: a compiled rate costs 0.2-5 µs against 5-130 µs for
#: ``Circuit.rhs`` and a step ~1 µs of loop against ~200 µs of scipy's (benchmarks/bench_kcircuit.py,
#: issue 18), so ten compiled evaluations still cost less than one in Python. A motor's LC ring
#: stepped over a whole off phase (tests/test_periodic_slow.py, 48 000 steps with a fresh Jacobian
#: each) overran the Python budget at full weight, in 0.3 s
COMPILED_SHARE = 0.1


def share(k: Kernel) -> float:
    """The budget share of one evaluation of ``k`` (:data:`COMPILED_SHARE` compiled, 1 plain)."""
    return COMPILED_SHARE if k.which == "compiled" else 1.0


def _count(runner, k: Kernel, r) -> None:
    """Add a compiled run's evaluations to the runner's count, as scipy's would count them
    (each Jacobian one evaluation per dynamic state and one at its point, PhaseRunner.jac), at
    :data:`COMPILED_SHARE` of their number."""
    if k.which == "compiled":
        n = r.counts["nfev"] + r.counts["njev"] * (runner.c.ie + 1)
        runner.calls += int(np.ceil(n * COMPILED_SHARE))


def solve_phase(runner, name: str, t_end: float, evs: list, kw: dict, max_calls: int) -> PhaseSolution | None:
    """Step the runner's present phase to ``t_end`` or a terminal event of ``evs``; None when it
    is not opted in or cannot be done here (the caller then steps it with scipy). ``max_calls``:
    the runner's limit on its evaluations (``detailed.MAX_RHS_CALLS``).

    Same contract as ``PhaseRunner._solve``'s solve: the runner's tolerances, the events'
    ``direction`` and ``terminal``, a terminal event inside a step of a pinned node integrated
    again to it (``PhaseRunner._step_to_event``), failures as :class:`SolverError`.
    """
    which = mode(runner)
    c = runner.c
    if which is None or c.pin is FLOAT or not t_end > runner.t or set(kw) - {"first_step", "max_step"}:
        return None
    k = kernel(runner, which)
    if k.why_not is not None:
        return None
    table = event_table(c, [getattr(g, "spec", None) for g in evs])
    if table is None:
        return None
    k.set_mode(c)
    p = np.concatenate([k.p, table])
    dirs = [float(getattr(g, "direction", 0.0)) for g in evs]
    terms = [bool(getattr(g, "terminal", False)) for g in evs]
    ev = k.events if evs else None
    left = max_calls - runner.calls
    try:
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            r = _integrate(runner, k, runner.t, t_end, runner.y, p, ev, np.sign(dirs) if evs else None,
                           terms if evs else None, kw, left)
    except SolverError:
        raise
    except (ValueError, ArithmeticError, FloatingPointError) as exc:
        raise SolverError(f"the solver failed in the {name} phase at t ≈ {runner.t:.3g} s: {exc}") from exc
    _count(runner, k, r)
    if r.status == -1 or runner.calls > max_calls:
        raise SolverError(f"the solver did not finish within {max_calls} evaluations "
                          f"(reached t = {r.t[-1]:.3g} s); the case is too stiff or ill-posed")
    if r.status < 0:
        raise SolverError(f"the solver failed in the {name} phase at t = {r.t[-1]:.3g} s: {r.message}")
    dense = r.dense_output()
    y = r.y.copy()
    if r.status == 1 and r.t.size > 1 and c.pin is not None:
        dense = _step_to_event(runner, k, r, dense, y, kw, max_calls)
    if not np.all(np.isfinite(y)):
        raise SolverError(f"the solution became non-finite in the {name} phase")
    return PhaseSolution(r.t, y, r.status, r.message, [np.asarray(x) for x in r.t_events], dense, r.counts)


def _step_to_event(runner, k: Kernel, r, dense, y, kw, max_calls):
    """``PhaseRunner._step_to_event``: the last stretch, from the last step's start to the
    terminal event, integrated again in the same mode, so that the event's state is a step's
    end (not the step's continuous output, fitted to stages past the event where a law held at
    its voltage carries its current on through zero)."""
    t_a, t_b = float(r.t[-2]), float(r.t[-1])
    if not t_b > t_a:
        return dense
    p = np.concatenate([k.p, event_table(runner.c, [])])
    kw2 = {"first_step": t_b - t_a, **{x: v for x, v in kw.items() if x == "max_step"}}
    try:
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            re = _integrate(runner, k, t_a, t_b, r.y[:, -2], p, None, None, None, kw2,
                            max(1, max_calls - runner.calls))
    except (ValueError, ArithmeticError, FloatingPointError, SolverError):
        return dense  # the continuous output stands
    _count(runner, k, re)
    if re.status != 0 or not np.all(np.isfinite(re.y)):
        return dense
    y[:, -1] = re.y[:, -1]
    return dense.replace_tail(dense.n_steps - 1, re.dense_output())
