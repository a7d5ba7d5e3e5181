"""Scale of the design check and of a tolerance study (issue 19), measured in one run.

Run from the repository top:
    PYTHONPATH=$PWD python benchmarks/bench_check.py [--cases 200] [--samples 1000000] [--workers 2]

1. ``--cases`` demo-like cases (the channels of examples/board, demo data, with the coil's
   inductance and resistance and the supply varied at random, seeded) written to a temporary
   folder and checked in one call of :func:`kickback.studies.check.check_cases`, in one process
   and over ``--workers`` local processes (the persistent pool).
2. A tolerance study of ``--samples`` samples of examples/board/ch1 (batch engine, no detailed
   recheck) in one process (``workers=1``: no child process), against the same study on a
   local Dask cluster of ``--workers`` worker processes (one thread each; the workers started
   without Dask's ``MALLOC_TRIM_THRESHOLD_``, see :data:`kickback.parallel.MALLOC_TRIM`, unless
   ``--dask-malloc``). Both run in fresh processes so that their peak memory (ru_maxrss, Linux:
   KiB) is theirs; imports and the engine's first run happen before the timing, in every
   worker too. The numbers of the two runs are compared, bit for bit.

Prints wall times, the speed-up, CPU seconds and the peak memory per process, and the load
average (on a shared machine the wall-time speed-up depends on it; the CPU seconds do not).
Needs the ``cluster`` extra.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import os
import re
import resource
import tempfile
import time
from pathlib import Path

import numpy as np

BOARD = Path(__file__).resolve().parent.parent / "examples" / "board"


def _scale(text: str, key: str, factor: float) -> str:
    """The first ``key = "X unit"`` line of ``text`` with X multiplied by ``factor``."""
    pat = re.compile(rf'^({key} = ")([0-9.]+) ([^"]+)"', re.M)
    return pat.sub(lambda m: f'{m.group(1)}{float(m.group(2)) * factor:.4g} {m.group(3)}"', text, count=1)


def write_cases(folder: Path, n: int, seed: int = 1) -> list[str]:
    rng = np.random.default_rng(seed)
    sources = sorted(p for p in BOARD.glob("ch*.toml"))
    paths = []
    for k in range(n):
        text = sources[k % len(sources)].read_text(encoding="utf-8")
        for key in ("inductance", "resistance", "voltage"):  # the coil's L and R, the supply voltage
            text = _scale(text, key, float(rng.uniform(0.8, 1.2)))
        p = folder / f"case{k:03d}.toml"
        p.write_text(text, encoding="utf-8")
        paths.append(str(p))
    return paths


def bench_check(n: int, workers: int) -> None:
    from kickback import parallel
    from kickback.studies.check import check_cases

    with tempfile.TemporaryDirectory() as tmp:
        paths = write_cases(Path(tmp), n)
        check_cases(paths[:4], workers=1)  # imports and compiled code loaded outside the timing
        t0 = time.perf_counter()
        one = check_cases(paths, workers=1)
        t1 = time.perf_counter()
        parallel.local_pool(workers)  # started outside the timing, as a command's first map would
        t2 = time.perf_counter()
        many = check_cases(paths, workers=workers)
        t3 = time.perf_counter()
        parallel.shutdown()
    statuses = {s: sum(c.status == s for c in one) for s in ("pass", "fail", "invalid", "unsolved", "audit")}
    same = [a.to_dict() | {"seconds": 0} for a in one] == [b.to_dict() | {"seconds": 0} for b in many]
    print(f"check of {n} cases: {statuses}")
    print(f"  one process  {t1 - t0:8.2f} s  ({(t1 - t0) / n * 1e3:.1f} ms per case)")
    print(f"  {workers} processes  {t3 - t2:8.2f} s  speed-up {(t1 - t0) / (t3 - t2):.2f}×  same results: {same}")


def _usage() -> tuple[float, int]:
    """(CPU seconds, peak resident memory in KiB) of this process so far (Linux: ru_maxrss is KiB)."""
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime, r.ru_maxrss


def _warm() -> None:
    """Imports and the batch engine's first run, outside the timing (in each worker)."""
    from kickback import load_case
    from kickback.studies.tolerance import evaluate, nominal

    case = load_case(BOARD / "ch1_irrigation_valve.toml")
    evaluate(case, np.tile(nominal(case), (200, 1)), engine="batch")


def _tolerance_local(n, q):
    from kickback import load_case
    from kickback.studies.tolerance import run_tolerance

    case = load_case(BOARD / "ch1_irrigation_valve.toml")
    run_tolerance(case, 200, 1, workers=1, recheck=0, engine="batch")  # warm, outside the timing
    cpu0, _ = _usage()
    t = time.perf_counter()
    tr = run_tolerance(case, n, 1, workers=1, recheck=0, engine="batch")  # workers=1: all in this process
    dt = time.perf_counter() - t
    cpu1, rss = _usage()
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    q.put((dt, cpu1 - cpu0, rss, children.ru_utime + children.ru_stime, tr.yield_, tr.yield_ci, tr.to_dict()))


def _tolerance_cluster(n, workers, dask_malloc, q):
    import dask
    from distributed import Client, LocalCluster

    from kickback import load_case
    from kickback.studies.tolerance import run_tolerance

    if not dask_malloc:
        # Dask's nanny starts its workers with MALLOC_TRIM_THRESHOLD_=65536; glibc then maps and
        # faults in every large numpy temporary afresh (see kickback.parallel.MALLOC_TRIM)
        dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None})
    # Dask's statistical profiler samples each running task every 10 ms and keeps the trees for
    # distributed.admin.low-level-log-length one-second cycles: a worker's memory grew with the
    # study (about 14 MiB per 10^4 samples measured, flat with it off; distributed/profile.py)
    dask.config.set({"distributed.worker.profile.enabled": False})
    case = load_case(BOARD / "ch1_irrigation_valve.toml")
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0") as cl, \
            Client(cl) as client:
        client.run(_warm)  # imports and the engine's first run in every worker, outside the timing
        run_tolerance(case, 200, 1, recheck=0, engine="batch", executor=client)
        before = client.run(_usage)
        cpu0, _ = _usage()
        t = time.perf_counter()
        tr = run_tolerance(case, n, 1, recheck=0, engine="batch", executor=client)
        dt = time.perf_counter() - t
        cpu1, rss = _usage()
        after = client.run(_usage)
        per_worker = [(after[w][0] - before[w][0], after[w][1]) for w in sorted(after)]
        malloc = sorted({str(v) for v in client.run(lambda: __import__("os").environ.get("MALLOC_TRIM_THRESHOLD_"))
                         .values()})
    q.put((dt, per_worker, cpu1 - cpu0, rss, malloc, tr.yield_, tr.yield_ci, tr.to_dict()))


def bench_tolerance(n: int, workers: int, dask_malloc: bool, cluster_only: bool = False) -> None:
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    load0 = os.getloadavg()
    t_one, cpu_one, rss_one, cpu_children, y_one, ci_one, json_one = np.nan, np.nan, np.nan, np.nan, np.nan, \
        (np.nan, np.nan), None
    if not cluster_only:
        p = ctx.Process(target=_tolerance_local, args=(n, q))
        p.start()
        t_one, cpu_one, rss_one, cpu_children, y_one, ci_one, json_one = q.get()
        p.join()
    load1 = os.getloadavg()
    p = ctx.Process(target=_tolerance_cluster, args=(n, workers, dask_malloc, q))
    p.start()
    t_cl, per_worker, cpu_client, rss_client, malloc, y_cl, ci_cl, json_cl = q.get()
    p.join()
    load2 = os.getloadavg()
    cpu_cl = sum(c for c, _ in per_worker)
    print(f"tolerance study of {n} samples (examples/board/ch1, batch engine, no recheck):")
    print(f"  one process      {t_one:8.1f} s  CPU {cpu_one:7.1f} s ({cpu_one / n * 1e6:.0f} µs per sample; "
          f"child processes {cpu_children:.1f} s)  peak memory {rss_one / 1024:.0f} MiB")
    print(f"  Dask, {workers} workers  {t_cl:8.1f} s  CPU {cpu_cl:7.1f} s ({cpu_cl / n * 1e6:.0f} µs per sample) "
          f"speed-up {t_one / t_cl:.2f}×")
    for k, (c, r) in enumerate(per_worker):
        print(f"    worker {k}: CPU {c:7.1f} s  peak memory {r / 1024:.0f} MiB")
    print(f"    client (and scheduler): CPU {cpu_client:.1f} s  peak memory {rss_client / 1024:.0f} MiB")
    print(f"    workers' MALLOC_TRIM_THRESHOLD_: {', '.join(malloc)}")
    print(f"  yield {y_one:.6f} [{ci_one[0]:.6f}, {ci_one[1]:.6f}] / {y_cl:.6f} [{ci_cl[0]:.6f}, {ci_cl[1]:.6f}]; "
          f"JSON identical (percentiles, brackets, worst samples, ...): "
          f"{'(no local run)' if json_one is None else json_one == json_cl}")
    print("  load average (1 min) before, between, after: " + ", ".join(f"{x[0]:.1f}" for x in (load0, load1, load2))
          + f" on {os.cpu_count()} cores")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=200)
    ap.add_argument("--samples", type=int, default=1_000_000)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--skip-check", action="store_true")
    ap.add_argument("--cluster-only", action="store_true", help="the tolerance study on the cluster only")
    ap.add_argument("--dask-malloc", action="store_true",
                    help="keep Dask's MALLOC_TRIM_THRESHOLD_=65536 on the workers (its default), for comparison")
    args = ap.parse_args()
    if not args.skip_check:
        bench_check(args.cases, args.workers)
    bench_tolerance(args.samples, args.workers, args.dask_malloc, args.cluster_only)


if __name__ == "__main__":
    main()
