"""Run drawn cases (:mod:`wide_range`) through both engines and judge what comes back.

Shared by ``tests/test_wide_range.py`` and ``benchmarks/reliability.py``:

* :func:`solve` — one case on one engine: status ("ok", "stated" — a KickbackError that says
  why, "no answer" — a case error of :data:`NO_ANSWER_KEYS`: the physics has no answer, said
  with the reason, "crash" — any other exception, "not covered" — the batch engine does not take
  the case, "timeout" — set by :func:`run_pool`), seconds, the audit's findings, the verdict, the headline
  figures and the checks;
* :func:`compare` — the two engines on one case: disagreements per headline figure and a
  verdict flip (figures within :data:`EXACT_TOL` relative where both engines use the same
  piecewise-linear laws, :data:`FIT_TOL` where the batch engine uses its stated piecewise-linear
  fit of a Shockley diode or a varistor);
* :func:`run_pool` — many (seed, engine) tasks in worker processes with a hard limit per task on
  its CPU time (a task over the limit is killed and counted, never waited for).

Times are CPU seconds of the worker process (``time.process_time``; the limit reads the worker's
``/proc/PID/stat``): on a loaded machine a case's wall time measures the load, its CPU time the
work, and on an idle machine the two are about equal. The wall time is kept beside it.
"""

from __future__ import annotations

import math
import multiprocessing as mp
import os
import time
import traceback
import warnings
from multiprocessing.connection import wait

from wide_range import draw

#: relative agreement where both engines solve the same piecewise-linear laws (issue 14)
EXACT_TOL = 1e-4
#: agreement where the batch engine uses its stated fit (kickback/engine/batch_laws.py: current within
#: max(1 %, 1e-4·i0) of the exact law; energies within 3 % or 5e-4 of the energy put in)
FIT_TOL = 0.05
#: headline figures compared between the engines
TIMES = ("to_10_percent_s", "to_1_percent_s", "release_s")
ENERGIES = ("resistance_energy_J", "avalanche_energy_J", "crossover_energy_J", "clamp_energy_J")


#: case errors whose reason is that the physics has no answer for the case as drawn (a valid
#: design, but nothing to report): each checked against an independent solve in the test named
NO_ANSWER_KEYS = {
    # the periodic steady state's coil current at the turn-off instant is not positive: the switch
    # carries nothing to turn off (tests/test_drive_no_current.py, wide-range case 2538)
    "drive.final_turn_off": "no current for a final turn-off",
}


def no_answer(err) -> bool:
    """Whether ``err`` is a case error of :data:`NO_ANSWER_KEYS` (its key and its reason)."""
    from kickback.errors import CaseError

    why = NO_ANSWER_KEYS.get(getattr(err, "key", None)) if isinstance(err, CaseError) else None
    return why is not None and why in str(err)


def _detailed(case):
    from kickback.simulation import simulate

    r = simulate(case)
    f = r.figures
    figs = {"peak_voltage_V": f.peak_voltage_V, "to_10_percent_s": f.to_10_percent_s,
            "to_1_percent_s": f.to_1_percent_s, "release_s": f.release_s,
            "resistance_energy_J": f.resistance_energy_J, "avalanche_energy_J": f.avalanche_energy_J,
            "crossover_energy_J": f.crossover_energy_J, "clamp_energy_J": sum(c.energy_J for c in f.clamps),
            "energy_in_J": f.stored_energy_J + f.initial_capacitor_energy_J + max(f.supply_energy_J, 0.0),
            "energy_balance_error": f.energy_balance_error}
    checks = {f"{c.part}: {c.quantity}": (c.value, c.limit, c.margin, c.passed) for c in r.checks}
    return r.audit.findings, r.passed, figs, checks


def _batch(case):
    from kickback.audit import audit_many
    from kickback.errors import SolverError
    from kickback.studies.many import simulate_many

    m = simulate_many(case, workers=1)
    if m.status[0] == "failed":  # not simulated ("audit failed" is judged below)
        raise SolverError(f"batch engine: {m.message[0]}")
    c = m.figures

    def g(name):
        x = float(c[name][0])
        return None if math.isnan(x) else x

    clamp = sum(float(c[f"clamps[{k}].energy_J"][0]) for k in range(len(case.clamps)))
    figs = {"peak_voltage_V": g("switch.peak_voltage_V"), "to_10_percent_s": g("coil.decay_s.to_10_percent"),
            "to_1_percent_s": g("coil.decay_s.to_1_percent"), "release_s": g("coil.release_s"),
            "resistance_energy_J": g("coil.resistance_energy_J"), "avalanche_energy_J": g("switch.avalanche_energy_J"),
            "crossover_energy_J": g("switch.crossover_energy_J"), "clamp_energy_J": clamp,
            "energy_in_J": g("coil.stored_energy_J") + g("initial_capacitor_energy_J") + max(g("supply.energy_J"), 0),
            "energy_balance_error": g("energy_balance_error")}
    findings = audit_many(m)[0]
    checks = {}
    for name, col in m.checks.items():
        if col.applies[0]:
            checks[name] = tuple(None if (isinstance(x, float) and math.isnan(x)) else x
                                 for x in (float(col.value[0]), float(col.limit[0]), float(col.margin[0]))) \
                + (bool(col.passed[0]),)
    return findings, (None if findings else bool(m.passed[0])), figs, checks


def solve(seed: int, engine: str, *, extras: bool = True) -> dict:
    """Case ``seed`` on ``engine`` ("detailed" or "batch"): a plain record (picklable, JSON-able)."""
    from kickback.caseio import load_case
    from kickback.errors import KickbackError
    from kickback.studies.many import batch_unsupported

    d = draw(seed, extras=extras)
    rec = {"seed": seed, "engine": engine, "label": d.label, "fitted": d.fitted, "status": "ok", "seconds": 0.0,
           "wall_seconds": 0.0, "audit": [], "passed": None, "figures": {}, "checks": {}, "message": "", "warnings": []}
    case = load_case(d.text, source=f"wide-range case {seed}")
    if engine == "batch":
        why = batch_unsupported(case)
        if why is not None:
            rec.update(status="not covered", message=why)
            return rec
    t0, c0 = time.perf_counter(), time.process_time()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            findings, passed, figs, checks = (_batch if engine == "batch" else _detailed)(case)
            rec.update(audit=list(findings), passed=passed, figures=figs,
                       checks={k: list(v) for k, v in checks.items()})
        except KickbackError as err:
            rec.update(status="no answer" if no_answer(err) else "stated", message=str(err)[:300])
        except Exception as err:  # noqa: BLE001 - a bare exception is what this run counts
            tb = traceback.extract_tb(err.__traceback__)[-1]
            rec.update(status="crash", message=f"{type(err).__name__}: {err} ({tb.filename}:{tb.lineno})"[:400])
    rec["seconds"] = time.process_time() - c0
    rec["wall_seconds"] = time.perf_counter() - t0
    rec["warnings"] = sorted({f"{w.category.__name__}: {w.message}"[:160] for w in caught})
    return rec


def _rel(a, b, floor=0.0):
    den = max(abs(a), abs(b), floor)
    return abs(a - b) / den if den > 0 else 0.0


def compare(d: dict, b: dict) -> dict:
    """The engines' disagreement on one case (both records "ok" with passing audits).

    Returns
    -------
    dict — "figures": name → relative difference (inf where a time occurs on one engine only),
    "tol": the tolerance that applies, "worse": names over it, "flip": the verdicts differ on a
    check whose margin is beyond the tolerance on both engines
    """
    tol = FIT_TOL if d["fitted"] else EXACT_TOL
    fd, fb = d["figures"], b["figures"]
    e_in = max(fd["energy_in_J"], fb["energy_in_J"])
    diffs = {"peak_voltage_V": _rel(fd["peak_voltage_V"], fb["peak_voltage_V"])}
    for name in TIMES:
        x, y = fd[name], fb[name]
        if x is None and y is None:
            continue
        diffs[name] = math.inf if (x is None) != (y is None) else _rel(x, y)
    # energies relative to the larger of the two, floored at a share of the energy put in: 1e-3
    # where both are exact; with a fit, 1e-2 (a varistor's fit is coarse far below its knee, where
    # it passes a few nJ of a mJ transient)
    floor = 1e-2 if d["fitted"] else 1e-3
    for name in ENERGIES:
        diffs[name] = _rel(fd[name], fb[name], floor * e_in)
    worse = sorted(k for k, v in diffs.items() if not v <= tol)
    flip = False
    if d["passed"] is not None and b["passed"] is not None and d["passed"] != b["passed"]:
        names = set(d["checks"]) | set(b["checks"])
        for name in names:
            cd, cb = d["checks"].get(name), b["checks"].get(name)
            if cd is None or cb is None:
                flip = True  # a check one engine has and the other not
                continue
            if cd[3] != cb[3]:
                near = any(c[2] is not None and abs(c[2]) <= tol for c in (cd, cb))
                flip = flip or not near
    return {"figures": diffs, "tol": tol, "worse": worse, "flip": flip}


def _used(slot) -> tuple[float, float]:
    """CPU and wall seconds the slot's worker has spent on its task (CPU: the wall time where
    ``/proc`` cannot be read)."""
    wall = time.perf_counter() - slot[3]
    now = cpu_seconds(slot[0].pid)
    return (wall if now is None or slot[4] is None else now - slot[4]), wall


def _worker(conn):
    while True:
        task = conn.recv()
        if task is None:
            return
        seed, engine, extras = task
        try:
            conn.send(solve(seed, engine, extras=extras))
        except Exception as err:  # noqa: BLE001 - reported as the task's crash
            conn.send({"seed": seed, "engine": engine, "status": "crash", "message": repr(err)[:300],
                       "seconds": 0.0, "wall_seconds": 0.0, "audit": [], "passed": None, "figures": {}, "checks": {},
                       "warnings": [], "label": "", "fitted": False})


#: a task is also killed after this many times its CPU limit in wall time (a worker that waits)
WALL_FACTOR = 20.0
_TICK = os.sysconf("SC_CLK_TCK") if hasattr(os, "sysconf") else 100


def cpu_seconds(pid: int) -> float | None:
    """CPU time (user + system) of process ``pid`` so far [s], from ``/proc/PID/stat`` (proc(5):
    fields 14 and 15, utime and stime in clock ticks); None where it cannot be read."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii") as f:
            fields = f.read().rsplit(")", 1)[1].split()
    except (OSError, IndexError):
        return None
    return (int(fields[11]) + int(fields[12])) / _TICK


def run_pool(tasks, *, workers: int = 2, limit: float = 60.0, on_record=None) -> list[dict]:
    """Run (seed, engine, extras) tasks in ``workers`` processes; a task whose worker spends
    over ``limit`` CPU seconds on it (or :data:`WALL_FACTOR` × ``limit`` wall seconds; wall
    time alone where ``/proc`` cannot be read) is killed, its worker replaced, and it is
    recorded with status "timeout"."""
    import kickback.audit  # noqa: F401 - imported once here, inherited by every forked worker
    import kickback.simulation  # noqa: F401
    import kickback.studies.many  # noqa: F401
    from kickback.engine import kstep

    if kstep.cycle_mode() == "compiled":
        # the compiled stepping of the [drive] cycles, loaded once here (~1 s) and inherited by
        # every forked worker, not charged to the first [drive] case of each
        kstep.warm_up()
    ctx = mp.get_context("fork")
    todo = list(tasks)[::-1]
    out: list[dict] = []
    slots = []  # [process, connection, task, started]

    def start():
        a, b = ctx.Pipe()
        p = ctx.Process(target=_worker, args=(b,), daemon=True)
        p.start()
        return [p, a, None, 0.0, 0.0]

    slots = [start() for _ in range(max(1, workers))]
    try:
        while todo or any(s[2] is not None for s in slots):
            for s in slots:
                if s[2] is None and todo:
                    s[2] = todo.pop()
                    s[3] = time.perf_counter()
                    s[4] = cpu_seconds(s[0].pid)
                    s[1].send(s[2])
            busy = [s[1] for s in slots if s[2] is not None]
            for conn in wait(busy, timeout=0.2):
                s = next(x for x in slots if x[1] is conn)
                try:
                    rec = conn.recv()
                except EOFError:  # the worker died (e.g. out of memory)
                    seed, engine, _ = s[2]
                    cpu, wall = _used(s)
                    rec = {"seed": seed, "engine": engine, "status": "crash", "message": "worker process died",
                           "seconds": cpu, "wall_seconds": wall, "audit": [], "passed": None, "figures": {},
                           "checks": {}, "warnings": [], "label": "", "fitted": False}
                    s[:] = start()
                else:
                    s[2] = None
                out.append(rec)
                if on_record:
                    on_record(rec)
            for k, s in enumerate(slots):
                if s[2] is None:
                    continue
                cpu, wall = _used(s)
                if cpu > limit or wall > WALL_FACTOR * limit:
                    seed, engine, extras = s[2]
                    s[0].kill()
                    s[0].join()
                    d = draw(seed, extras=extras)
                    why = f"killed after {cpu:.3g} s of CPU" if cpu > limit else f"killed after {wall:.3g} s wall"
                    rec = {"seed": seed, "engine": engine, "status": "timeout", "message": why,
                           "seconds": cpu, "wall_seconds": wall, "audit": [], "passed": None, "figures": {},
                           "checks": {}, "warnings": [], "label": d.label, "fitted": d.fitted}
                    out.append(rec)
                    if on_record:
                        on_record(rec)
                    slots[k] = start()
    finally:
        for s in slots:
            try:
                s[1].send(None)
            except (BrokenPipeError, OSError):
                pass
            s[0].join(timeout=1.0)
            if s[0].is_alive():
                s[0].kill()
    return out
