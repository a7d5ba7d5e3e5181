"""A Dask worker's memory over repeated tolerance studies (issue 19): resident memory after each
study, and after ``malloc_trim(0)`` in the worker (glibc: hands freed heap back to the system), so
that memory held by live objects shows apart from freed memory glibc keeps.

Run from the repository top (needs the ``cluster`` extra):
    PYTHONPATH=$PWD python benchmarks/bench_workermem.py 10000 10000 10000 --chunk=2500
    PYTHONPATH=$PWD python benchmarks/bench_workermem.py 10000 10000 10000 --chunk=2500 --no-profile

One local Dask worker process (one thread, started without Dask's MALLOC_TRIM_THRESHOLD_, see
:data:`kickback.parallel.MALLOC_TRIM`); examples/board/ch1 (demo data), batch engine, no recheck,
statistics merged from per-chunk summaries (``gather=0``). ``--no-profile`` starts the worker
with Dask's statistical profiler off (``distributed.worker.profile.enabled``).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

BOARD = Path(__file__).resolve().parents[1] / "examples" / "board"


def _rss() -> tuple[float, float]:
    """(resident, peak resident) memory of this process [MiB] (Linux)."""
    import resource

    with open("/proc/self/status") as fh:
        cur = [int(line.split()[1]) for line in fh if line.startswith("VmRSS")][0]
    return cur / 1024, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _trim() -> int:
    import ctypes

    return ctypes.CDLL("libc.so.6").malloc_trim(0)


def main() -> None:
    import dask
    from distributed import Client, LocalCluster

    from kickback import load_case
    from kickback.studies.tolerance import run_tolerance

    sizes = [int(a) for a in sys.argv[1:] if not a.startswith("--")]
    chunk = int(dict(a.split("=") for a in sys.argv if a.startswith("--chunk=")).get("--chunk", 10_000))
    dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None})
    if "--no-profile" in sys.argv:
        dask.config.set({"distributed.worker.profile.enabled": False})
    case = load_case(BOARD / "ch1_irrigation_valve.toml")
    kw = dict(recheck=0, engine="batch", search_budget=2, chunk=chunk, gather=0)
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address=":0") as cl, \
            Client(cl) as client:
        run_tolerance(case, 200, 1, executor=client, **kw)  # imports and the first run
        print("after the warm-up: worker (resident, peak) MiB", list(client.run(_rss).values()), flush=True)
        for k, n in enumerate(sizes):
            t = time.perf_counter()
            run_tolerance(case, n, 1, executor=client, **kw)
            print(f"study {k + 1} of {n} samples ({time.perf_counter() - t:.0f} s): worker (resident, peak) MiB "
                  f"{list(client.run(_rss).values())}, this process {_rss()}", flush=True)
            client.run(_trim)
            print(f"  after malloc_trim(0) in the worker: {list(client.run(_rss).values())}", flush=True)


if __name__ == "__main__":
    main()
