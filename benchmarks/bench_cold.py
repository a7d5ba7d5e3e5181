"""A cold ``kickback run`` (issue 18): wall time of fresh processes, measured as ratios in one run.

Run from the repository top:
    python benchmarks/bench_cold.py [--n 15] [--case cases/irrigation_valve.toml] [--baseline DIR]
    python benchmarks/bench_cold.py --phases [--n 7]

Each round starts, one after the other and in a rotating order, a fresh Python process for

* ``python -c pass`` (the interpreter alone: the floor of any command),
* ``kickback run CASE --out TMP`` with this checkout's code (``PYTHONPATH`` = the repository top),
  the plots included, as the ``kickback`` console script runs it,
* the same command with the code of ``--baseline DIR`` (another checkout, e.g. one made with
  ``git archive <commit> | tar -x -C DIR``), when given,
* with ``--painter``: this code twice, its pictures drawn by a forked child (``KICKBACK_PAINTER=1``,
  whatever the load; see ``kickback/outputs/painter.py``) and in-process (``KICKBACK_PAINTER=0``).
  Otherwise ``KICKBACK_PAINTER`` is as in the environment (unset: the child draws when the load
  average is below the core count). The CPU time of a run includes its child's.

and prints each one's median, quartiles and minimum over ``--n`` rounds of the wall time and of the
CPU time (user + system, from ``wait4``), the median of the per-round ratios (this code / baseline)
and differences (this code − the interpreter alone), and the load average before and after. On a
shared machine the wall times move with the load; the CPU time and a ratio measured within a round
move much less (on an idle machine a run's wall time is about its CPU time). A run's exit status
must be 0 or 1 (a verdict), else the benchmark stops.

``--phases`` instead runs ``--n`` fresh processes that time, in order, each step of the same run
inside the process (imports, case loading, the simulation, the JSON, CSV and table, the picture
and each file format) and prints the median wall and CPU time of each step.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
#: what the ``kickback`` console script does
ENTRY = "import sys; from kickback.cli import main; sys.exit(main())"

PHASES = r'''
import sys, time
marks = [("interpreter", time.perf_counter(), time.process_time())]
def mark(name):
    marks.append((name, time.perf_counter(), time.process_time()))
import kickback.cli; mark("import kickback.cli (click)")
from kickback.cli_common import load_or_exit
case = load_or_exit(sys.argv[1]); mark("load the case")
from kickback.simulation import simulate; mark("import the engine (numpy, scipy)")
result = simulate(case, rtol=1e-5); mark("simulate")
from kickback.outputs.csvout import waveforms_csv
from kickback.outputs.jsonout import to_json
from kickback.outputs.table import result_table
to_json(result.to_dict()); waveforms_csv(result); result_table(result); mark("JSON, CSV, table")
from kickback.outputs.plots import figure_bytes
import matplotlib.figure; mark("import matplotlib")
fig, _ = result.plot(); mark("draw the figure (plot_result)")
figure_bytes(fig, "png"); mark("PNG")
figure_bytes(fig, "svg"); mark("SVG")
import json
print(json.dumps({name: [b - a, d - c] for (_, a, c), (name, b, d) in zip(marks, marks[1:])}))
'''


def _env(path: Path | None) -> dict[str, str]:
    env = dict(os.environ)
    env.pop("PYTHONPATH", None)
    if path is not None:
        env["PYTHONPATH"] = str(path)
    return env


def _time(cmd: list[str], env: dict[str, str], ok=(0,), cwd: Path = ROOT) -> tuple[float, float]:
    """Wall time and CPU time (user + system, the process and its children) of one run [s]."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, cwd=cwd)
    err = proc.stderr.read()
    _, status, usage = os.wait4(proc.pid, 0)
    dt = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    proc.stderr.close()
    if proc.returncode not in ok:
        sys.exit(f"bench_cold: {' '.join(cmd)} exited {proc.returncode}: {err.decode()[-400:]}")
    return dt, usage.ru_utime + usage.ru_stime


def _quartiles(xs: list[float]) -> tuple[float, float, float]:
    q = statistics.quantiles(xs, n=4) if len(xs) > 1 else [xs[0]] * 3
    return q[0], statistics.median(xs), q[2]


def bench(n: int, case: str, baseline: Path | None, plot: bool, painter: bool) -> None:
    # run from a folder of its own: ``python -c`` puts the working folder first on sys.path, so
    # from the repository top every variant would import this checkout's code
    work = Path(tempfile.mkdtemp(prefix="kickback-cold-"))
    out = work / "out"
    case = str((ROOT / case).resolve())
    run = [sys.executable, "-c", ENTRY, "run", case, "--out", str(out)] + ([] if plot else ["--no-plot"])
    variants = {"python -c pass": ([sys.executable, "-c", "pass"], _env(None), (0,)),
                "kickback run (this code)": (run, _env(ROOT), (0, 1))}
    if baseline is not None:
        variants["kickback run (baseline)"] = (run, _env(baseline.resolve()), (0, 1))
    if painter:  # this code with the pictures drawn in a forked child, and in-process
        variants["kickback run (this code)"] = (run, {**_env(ROOT), "KICKBACK_PAINTER": "1"}, (0, 1))
        variants["this code, in-process"] = (run, {**_env(ROOT), "KICKBACK_PAINTER": "0"}, (0, 1))
    for cmd, env, ok in variants.values():  # warm the file cache and the bytecode caches once
        _time(cmd, env, ok, work)
    print(f"run {Path(case).relative_to(ROOT)} --out DIR{'' if plot else ' --no-plot'}, {n} rounds, "
          f"load average before: {os.getloadavg()}")
    for k, (_cmd, env, _ok) in variants.items():  # which code each variant runs
        where = subprocess.run([sys.executable, "-c", "import kickback; print(kickback.__file__)"], env=env,
                               cwd=work, capture_output=True, text=True, check=True).stdout.strip()
        print(f"  {k}: {where}")
    times: dict[str, list[tuple[float, float]]] = {k: [] for k in variants}
    names = list(variants)
    for r in range(n):
        for k in names[r % len(names):] + names[:r % len(names)]:
            cmd, env, ok = variants[k]
            times[k].append(_time(cmd, env, ok, work))
    print(f"load average after: {os.getloadavg()}")
    for j, what in enumerate(("wall time", "CPU time (user + system)")):
        print(f"{what + ' [s]':28s} {'median':>8s} {'q1':>8s} {'q3':>8s} {'min':>8s}")
        for k, xs in times.items():
            q1, med, q3 = _quartiles([x[j] for x in xs])
            print(f"{k:28s} {med:8.3f} {q1:8.3f} {q3:8.3f} {min(x[j] for x in xs):8.3f}")
        new = [x[j] for x in times["kickback run (this code)"]]
        floor = [x[j] for x in times["python -c pass"]]
        print(f"  this code - interpreter alone, median of rounds: "
              f"{statistics.median(a - b for a, b in zip(new, floor, strict=True)):.3f} s")
        if baseline is not None:
            old = [x[j] for x in times["kickback run (baseline)"]]
            q1, med, q3 = _quartiles([a / b for a, b in zip(new, old, strict=True)])
            print(f"  this code / baseline, per round: median {med:.3f} (quartiles {q1:.3f}–{q3:.3f})")
        if painter:
            alone = [x[j] for x in times["this code, in-process"]]
            q1, med, q3 = _quartiles([a / b for a, b in zip(new, alone, strict=True)])
            print(f"  child draws / in-process, per round: median {med:.3f} (quartiles {q1:.3f}–{q3:.3f})")


def phases(n: int, case: str) -> None:
    rows: dict[str, list[list[float]]] = {}
    totals = []
    cmd = [sys.executable, "-c", PHASES, case]
    _time(cmd, _env(ROOT))
    print(f"phases of one cold run of {case} in this code, {n} processes, load average {os.getloadavg()}")
    for _ in range(n):
        t0 = time.perf_counter()
        proc = subprocess.run(cmd, env=_env(ROOT), capture_output=True, text=True, cwd=ROOT, check=True)
        totals.append(time.perf_counter() - t0)
        for name, value in json.loads(proc.stdout.strip().splitlines()[-1]).items():
            rows.setdefault(name, []).append(value)
    print(f"{'median of each step':40s} {'wall':>7s} {'CPU':>7s}")
    for name, xs in rows.items():
        print(f"{name:40s} {1000 * statistics.median(x[0] for x in xs):7.0f} "
              f"{1000 * statistics.median(x[1] for x in xs):7.0f} ms")
    print(f"{'process wall time':40s} {1000 * statistics.median(totals):7.0f} ms")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=15, help="rounds (default 15)")
    ap.add_argument("--case", default="cases/irrigation_valve.toml")
    ap.add_argument("--baseline", type=Path, default=None, help="another checkout's top folder")
    ap.add_argument("--no-plot", action="store_true", help="time `run --no-plot` instead")
    ap.add_argument("--painter", action="store_true",
                    help="time this code twice: pictures drawn by a forked child and in-process")
    ap.add_argument("--phases", action="store_true", help="time each step inside the process instead")
    args = ap.parse_args()
    if args.phases:
        phases(args.n, args.case)
    else:
        bench(args.n, args.case, args.baseline, not args.no_plot, args.painter)


if __name__ == "__main__":
    main()
