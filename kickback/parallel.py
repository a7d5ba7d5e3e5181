"""The one parallel seam: every study maps its work through one ``concurrent.futures.Executor``.

Which executor runs a map, in this order:

1. the executor made current by :func:`using` (a study's ``executor=`` argument, e.g. the
   ``get_executor()`` of a Dask ``distributed.Client``, or any ``concurrent.futures.Executor``);
2. otherwise, when more than one worker is asked for, one persistent local process pool
   (:func:`local_pool`): created at the first parallel map of the process, reused by every later
   one of the same size, shut down at exit (and its processes stopped by
   :mod:`kickback.cliguard` on Ctrl-C, as any child process of a command);
3. otherwise this process, in order.

Work that already runs on a worker (a task of any executor) maps in its own process: a study
never nests pools, so the split of the work is decided once, by the caller.

Random draws: :func:`chunk_seeds` gives one ``numpy.random.SeedSequence`` child per fixed-size
block of draws, so the same seed gives the same numbers whatever the worker count or executor.

References
----------
Python documentation, ``concurrent.futures`` (the Executor interface); Dask distributed
documentation, "Client.get_executor" (a concurrent.futures-compatible executor).
"""

from __future__ import annotations

import atexit
import contextlib
import contextvars
import os
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import Executor

import numpy as np

__all__ = ["chunk_seeds", "cluster_executor", "current", "groups", "imap_ordered", "local_pool", "map_ordered",
           "shutdown", "submit", "using", "worker_notes"]

_EXECUTOR: contextvars.ContextVar = contextvars.ContextVar("kickback_executor", default=None)
_INSIDE: contextvars.ContextVar = contextvars.ContextVar("kickback_inside_worker", default=False)
_POOL: dict = {"pool": None, "size": 0, "pid": None}

#: groups per worker a map is cut into (load balance against per-task overhead)
GROUPS_PER_WORKER = 4


def default_workers() -> int:
    """The worker processes used when none is asked for: the machine's cores, at most 8."""
    return min(os.cpu_count() or 1, 8)


def local_pool(workers: int) -> Executor:
    """The persistent process pool of ``workers`` processes (made once, reused; remade only when
    another size is asked for or a worker died)."""
    from concurrent.futures import ProcessPoolExecutor

    pool = _POOL["pool"]
    broken = pool is not None and getattr(pool, "_broken", False)
    if pool is None or broken or _POOL["size"] != workers or _POOL["pid"] != os.getpid():
        if pool is not None and _POOL["pid"] == os.getpid():
            pool.shutdown(wait=not broken, cancel_futures=True)
        _POOL.update(pool=ProcessPoolExecutor(max_workers=workers), size=workers, pid=os.getpid())
    return _POOL["pool"]


def shutdown() -> None:
    """Shut the persistent pool down (at exit; harmless when there is none)."""
    pool = _POOL["pool"]
    if pool is not None and _POOL["pid"] == os.getpid():
        pool.shutdown(wait=True, cancel_futures=True)
    _POOL.update(pool=None, size=0, pid=None)


atexit.register(shutdown)


def current() -> Executor | None:
    """The executor made current by :func:`using`, or None."""
    return _EXECUTOR.get()


def inside_worker() -> bool:
    """True in a task run by a parallel map (it then maps in its own process)."""
    return _INSIDE.get()


def _pool_allowed() -> bool:
    """No local pool in a task, nor in a process started by multiprocessing: such a process joins
    its children as soon as its target returns, before ``atexit`` could shut a pool down, and
    would wait forever. (An executor passed in is still used there.)"""
    import multiprocessing

    return not _INSIDE.get() and multiprocessing.parent_process() is None


@contextlib.contextmanager
def using(executor: Executor | None) -> Iterator[Executor | None]:
    """Run the maps of the ``with`` body on ``executor`` (None: leave the choice as it is)."""
    if executor is None:
        yield current()
        return
    if not isinstance(executor, Executor) and hasattr(executor, "get_executor"):
        executor = executor.get_executor()  # a Dask distributed.Client
    if not hasattr(executor, "submit"):
        from kickback.errors import KickbackError

        raise KickbackError(f"executor: {type(executor).__name__} has no submit() (expected a "
                            "concurrent.futures.Executor, e.g. a Dask client's get_executor())")
    token = _EXECUTOR.set(executor)
    try:
        yield executor
    finally:
        _EXECUTOR.reset(token)


def groups(n: int, size: int) -> list[slice]:
    """``range(n)`` cut into consecutive slices of ``size`` (the last one shorter)."""
    size = max(1, int(size))
    return [slice(s, min(n, s + size)) for s in range(0, n, size)]


def _run_group(func: Callable, items: Sequence) -> list:
    """A task: ``[func(x) for x in items]`` marked as running on a worker (no nested pools)."""
    token = _INSIDE.set(True)
    try:
        return [func(x) for x in items]
    finally:
        _INSIDE.reset(token)


def map_ordered(func: Callable, items: Sequence, *, workers: int = 1, progress=None,
                group: int | None = None) -> list:
    """``[func(x) for x in items]`` on the chosen executor (see the module docstring), in order.

    Parameters
    ----------
    func : picklable callable of one argument (a module-level function)
    items : sequence of picklable arguments
    workers : int — local processes when no executor is current (1: this process)
    progress : callable(n_done) or None — called as results arrive, in order
    group : int or None — items per task (None: about :data:`GROUPS_PER_WORKER` tasks per worker)
    """
    return list(imap_ordered(func, items, workers=workers, progress=progress, group=group))


def imap_ordered(func: Callable, items: Sequence, *, workers: int = 1, progress=None,
                 group: int | None = None, ahead: int | None = None) -> Iterator:
    """:func:`map_ordered` as a generator: each result is yielded as soon as it and every earlier
    one are in, so the caller can merge it and let it go; at most ``ahead`` tasks (None: four per
    worker) are submitted beyond the one being read, so results waiting to be read stay bounded
    in memory, here and on a Dask worker."""
    items = list(items)
    executor = None if inside_worker() else current()
    if executor is None and workers > 1 and len(items) > 1 and _pool_allowed():
        executor = local_pool(workers)
    if executor is None or len(items) < 2:
        for k, x in enumerate(items):
            yield func(x)
            if progress:
                progress(k + 1)
        return
    width = max(workers, _width(executor))
    size = group or max(1, -(-len(items) // (GROUPS_PER_WORKER * width)))
    cuts = groups(len(items), size)
    ahead = max(1, ahead or GROUPS_PER_WORKER * width)
    futures: list = []
    done = 0
    try:
        for k in range(len(cuts)):
            while len(futures) < min(len(cuts), k + 1 + ahead):
                futures.append(executor.submit(_run_group, func, items[cuts[len(futures)]]))
            part = futures[k].result()
            # let the future go once read: a Dask worker keeps a task's result in its memory as
            # long as a client holds its future (Dask distributed, "Managing Memory")
            futures[k] = None
            for x in part:
                done += 1
                yield x
            del part
            if progress:
                progress(done)
    except BaseException:
        for fut in futures:
            if fut is not None:
                fut.cancel()
        raise


def submit(func: Callable, arg, *, workers: int = 1):
    """A future of ``func(arg)`` on the chosen executor, started now; None when the work would run
    in this process (call ``func(arg)`` then, when its result is wanted)."""
    if inside_worker():
        return None
    executor = current()
    if executor is None and workers > 1 and _pool_allowed():
        executor = local_pool(workers)
    if executor is None:
        return None
    return _First(executor.submit(_run_group, func, [arg]))


class _First:
    """The one result of a one-item group future."""

    def __init__(self, fut):
        self.fut = fut

    def result(self, timeout=None):
        return self.fut.result(timeout)[0]

    def cancel(self) -> bool:
        return self.fut.cancel()


def _width(executor) -> int:
    """Workers behind ``executor`` as far as it says (1 when it does not)."""
    n = getattr(executor, "_max_workers", None)
    if n:
        return int(n)
    client = getattr(executor, "_client", None)
    if client is not None:
        with contextlib.suppress(Exception):
            return max(1, sum(client.nthreads().values()))
    return 1


def chunk_seeds(seed: int, n: int, block: int) -> list[np.random.SeedSequence]:
    """One ``SeedSequence`` child per block of ``block`` draws out of ``n`` (children of
    ``SeedSequence(seed).spawn``: the k-th child is the same whatever ``n`` is)."""
    return np.random.SeedSequence(seed).spawn(max(1, -(-n // max(1, block))))


def cluster_executor(address: str) -> Executor:
    """A ``concurrent.futures`` executor on the Dask distributed scheduler at ``address``.

    Raises
    ------
    ClusterError — Dask distributed is not installed (the ``cluster`` extra), or the scheduler
        cannot be reached.
    """
    from kickback.errors import KickbackError

    try:
        from distributed import Client
    except ImportError:
        raise KickbackError(f"--scheduler {address}: Dask distributed is not installed (expected "
                            "pip install 'kickback[cluster]')") from None
    try:
        client = Client(address, timeout="10s")
    except (OSError, TimeoutError) as err:
        raise KickbackError(f"--scheduler {address}: no Dask scheduler answered ({err}; expected "
                            "an address such as tcp://HOST:8786 of a running 'dask scheduler')") from None
    atexit.register(client.close)
    return client.get_executor()


#: the environment variable Dask's nanny sets on its workers by default (65536): glibc then keeps
#: a fixed mmap threshold, so every large numpy temporary is a fresh mmap and its pages fault in
#: again (glibc malloc(3), mallopt M_TRIM_THRESHOLD and M_MMAP_THRESHOLD; Dask distributed,
#: "Worker Memory Management", automatically trim memory). Measured on kickback's batch engine:
#: 13x the page faults and 1.6-1.7x the CPU time per sample (benchmarks/bench_check.py).
MALLOC_TRIM = "MALLOC_TRIM_THRESHOLD_"


def _worker_setup() -> tuple:
    """What a worker runs with: its :data:`MALLOC_TRIM` value (None: unset) and whether Dask's
    statistical profiler is on (``distributed.worker.profile.enabled``, Dask's default True)."""
    try:
        import dask

        profiling = bool(dask.config.get("distributed.worker.profile.enabled", True))
    except ImportError:
        profiling = False
    return os.environ.get(MALLOC_TRIM), profiling


def worker_notes(executor) -> list[str]:
    """Sentences about how the Dask workers behind ``executor`` are set up, when it costs the
    studies: :data:`MALLOC_TRIM` set (Dask's nanny's default: the batch engine about 1.6x
    slower) and the statistical profiler on (Dask's default: a worker running long studies
    keeps growing). Empty when neither, or when the workers cannot be asked (not a Dask
    executor)."""
    client = getattr(executor, "_client", executor)
    try:
        found = client.run(_worker_setup)
    except Exception:  # noqa: BLE001 - not a Dask client, or the workers do not answer: nothing to say
        return []
    n = len(found)
    trims = [m for m, _ in found.values() if m is not None]
    profiled = sum(1 for _, p in found.values() if p)
    out = []
    if trims:
        out.append(f"note: {len(trims)} of {n} Dask worker(s) run with {MALLOC_TRIM}={', '.join(sorted(set(trims)))} "
                   "(set by Dask's nanny by default), which makes the batch engine about 1.6x slower; start them "
                   "with distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_ set to null in a Dask config "
                   "file (see the README, \"On a cluster\")")
    if profiled:
        out.append(f"note: {profiled} of {n} Dask worker(s) run Dask's statistical profiler, whose records grow "
                   "with the time a task runs (a worker running long studies keeps growing); set "
                   "distributed.worker.profile.enabled to false in a Dask config file (see the README, "
                   "\"On a cluster\")")
    return out
