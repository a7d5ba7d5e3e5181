"""Scale of the design check and of a tolerance study (issue 19), measured in one run.

Run from the repository top:
    PYTHONPATH=$PWD python benchmarks/bench_check.py [--cases 200] [--samples 1000000] [--workers 2]

1. ``--cases`` demo-like cases (the channels of examples/board, demo data, with the coil's
   inductance and resistance and the supply varied at random, seeded) written to a temporary
   folder and checked in one call of :func:`kickback.studies.check.check_cases`, in one process
   and over ``--workers`` local processes (the persistent pool).
2. A tolerance study of ``--samples`` samples of examples/board/ch1 (batch engine, no detailed
   recheck) in one process, against the same study on a local Dask cluster of ``--workers``
   worker processes (one thread each). Both run in fresh processes so that their peak memory
   (ru_maxrss, Linux: KiB) is theirs; the numbers of the two runs are compared, bit for bit.

Prints times, the speed-up and the peak memory per process. Needs the ``cluster`` extra.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
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


def _tolerance_local(n, q):
    from kickback import load_case
    from kickback.studies.tolerance import run_tolerance

    case = load_case(BOARD / "ch1_irrigation_valve.toml")
    t = time.perf_counter()
    tr = run_tolerance(case, n, 1, workers=1, recheck=0, engine="batch")
    q.put((time.perf_counter() - t, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, tr.yield_,
           tr.figures["peak_voltage_V"]))


def _max_rss():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss


def _tolerance_cluster(n, workers, q):
    from distributed import Client, LocalCluster

    from kickback import load_case
    from kickback.studies.tolerance import run_tolerance

    case = load_case(BOARD / "ch1_irrigation_valve.toml")
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=None) as cl, \
            Client(cl) as client:
        client.run(lambda: __import__("kickback.studies.tolerance"))  # imports outside the timing
        t = time.perf_counter()
        tr = run_tolerance(case, n, 1, recheck=0, engine="batch", executor=client)
        dt = time.perf_counter() - t
        rss = sorted(client.run(_max_rss).values())
    q.put((dt, rss, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, tr.yield_, tr.figures["peak_voltage_V"]))


def bench_tolerance(n: int, workers: int) -> None:
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=_tolerance_local, args=(n, q))
    p.start()
    t_one, rss_one, y_one, peak_one = q.get()
    p.join()
    p = ctx.Process(target=_tolerance_cluster, args=(n, workers, q))
    p.start()
    t_cl, rss_workers, rss_client, y_cl, peak_cl = q.get()
    p.join()
    print(f"tolerance study of {n} samples (examples/board/ch1, batch engine, no recheck):")
    print(f"  one process          {t_one:8.1f} s  peak memory {rss_one / 1024:.0f} MiB")
    print(f"  Dask, {workers} workers      {t_cl:8.1f} s  speed-up {t_one / t_cl:.2f}×  peak memory per worker "
          + ", ".join(f"{r / 1024:.0f} MiB" for r in rss_workers) + f"; client {rss_client / 1024:.0f} MiB")
    print(f"  yield {y_one:.6f} / {y_cl:.6f}; peak voltages identical: {np.array_equal(peak_one, peak_cl)}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=200)
    ap.add_argument("--samples", type=int, default=1_000_000)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--skip-check", action="store_true")
    args = ap.parse_args()
    if not args.skip_check:
        bench_check(args.cases, args.workers)
    bench_tolerance(args.samples, args.workers)


if __name__ == "__main__":
    main()
