"""The one executor (kickback.parallel): the same seed gives the same numbers on any executor and
any number of workers; the local pool is made once and reused; per-chunk seeds follow numpy's
SeedSequence.spawn."""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest
from coil_cases import InProcess, two_band_study

from kickback import load_case, parallel
from kickback.studies.tolerance import DRAW_BLOCK, draw, run_tolerance

TOL = two_band_study("parallel test")



def _numbers(tr) -> dict:
    return {"samples": tr.samples, "passed": tr.passed, "yield_ci": np.array(tr.yield_ci),
            **{f"fig:{k}": v for k, v in tr.figures.items()},
            "worst": np.array([(w["margin"], w["value"]) for w in tr.worst_per_check.values()], float)}


def _same(a: dict, b: dict) -> None:
    assert a.keys() == b.keys()
    for k in a:
        assert np.array_equal(a[k], b[k], equal_nan=True), k  # bit for bit, not approximately


@pytest.mark.parametrize("engine,n", [("batch", 2500), ("detailed", 24)])
def test_same_seed_same_numbers_on_every_executor(engine, n):
    case = load_case(TOL)
    runs = [run_tolerance(case, n, 7, workers=1, engine=engine, search_budget=4, chunk=1000, recheck=0),
            run_tolerance(case, n, 7, workers=2, engine=engine, search_budget=4, chunk=1000, recheck=0)]
    ex = InProcess()
    runs.append(run_tolerance(case, n, 7, workers=1, engine=engine, search_budget=4, chunk=1000, recheck=0,
                              executor=ex))
    assert ex.tasks >= 3  # the chunks did go through the executor passed in
    with ThreadPoolExecutor(3) as threads:
        runs.append(run_tolerance(case, n, 7, engine=engine, search_budget=4, chunk=1000, recheck=0,
                                  executor=threads))
    first = _numbers(runs[0])
    for other in runs[1:]:
        _same(first, _numbers(other))
    # a different seed gives different draws (the check above could fail)
    assert not np.array_equal(draw(case, n, 8), runs[0].samples)


def test_draws_are_spawned_per_block():
    # numpy's SeedSequence.spawn: block j uses child j, so the first block of a longer study is
    # the first block of a shorter one (numpy documentation, "Parallel random number generation")
    case = load_case(TOL)
    long, short = draw(case, DRAW_BLOCK + 5, 3), draw(case, DRAW_BLOCK, 3)
    assert np.array_equal(long[:DRAW_BLOCK], short)
    child = np.random.SeedSequence(3).spawn(2)[1]
    second = np.random.default_rng(child).uniform(size=1)
    # the first toleranced value is uniform over its band: the second block's first draw is the
    # generator of child 1 mapped onto the band (Generator.uniform: low + (high - low) * u)
    tol = case.tolerances[0]
    assert long[DRAW_BLOCK, 0] == pytest.approx(tol.low + (tol.high - tol.low) * second[0], rel=1e-15)


def _pid(_x):
    return os.getpid()


def test_the_local_pool_is_made_once_and_reused():
    parallel.shutdown()
    a = parallel.map_ordered(_pid, range(16), workers=2)
    pool = parallel.local_pool(2)
    b = parallel.map_ordered(_pid, range(16), workers=2)
    assert parallel.local_pool(2) is pool
    assert len(set(a) | set(b)) <= 2 and os.getpid() not in set(a) | set(b)
    # another size replaces it (one pool per process, sized by --workers)
    assert parallel.local_pool(1) is not pool
    parallel.shutdown()


def test_a_task_maps_in_its_own_process():
    # inside a task no pool is nested: the work runs in the worker's process
    out = parallel.map_ordered(_inner, [0, 1], workers=2)
    assert all(len(set(pids)) == 1 and pids[0] != os.getpid() for pids in out)
    parallel.shutdown()


def _inner(_x):
    return parallel.map_ordered(_pid, range(4), workers=2)


def test_a_bad_executor_is_refused():
    from kickback.errors import KickbackError

    with pytest.raises(KickbackError, match="concurrent.futures.Executor"):
        run_tolerance(load_case(TOL), 4, 1, executor=object())


def _child_with_a_pool():
    parallel.map_ordered(_pid, range(8), workers=2, group=1)


def test_a_process_with_a_pool_exits():
    # a process started by multiprocessing joins its children as soon as its target returns,
    # before atexit runs: the pool must be shut down by then, or that join waits forever
    import multiprocessing as mp

    proc = mp.get_context("fork").Process(target=_child_with_a_pool)
    proc.start()
    proc.join(120)
    alive = proc.is_alive()
    if alive:
        proc.kill()
    assert not alive and proc.exitcode == 0


def test_workers_one_runs_the_batch_engine_in_this_process(monkeypatch):
    # 6000 samples: above figures_batch.PARALLEL_MIN, where the batch engine once asked for a pool
    # of its own whatever workers=1 said (a "one process" benchmark ran on two)
    case = load_case(TOL)
    kw = dict(engine="batch", search_budget=4, recheck=0)
    parallel.shutdown()
    real = parallel.local_pool

    def no_pool(workers):
        raise AssertionError(f"a pool of {workers} was asked for with workers=1")

    monkeypatch.setattr(parallel, "local_pool", no_pool)
    one = run_tolerance(case, 6000, 7, workers=1, **kw)
    asked = []
    monkeypatch.setattr(parallel, "local_pool", lambda workers: asked.append(workers) or real(workers))
    # one chunk of the Monte Carlo (6000 < CHUNK) run here still shares its batches among the workers
    two = run_tolerance(case, 6000, 7, workers=2, **kw)
    parallel.shutdown()
    assert asked and set(asked) == {2}
    _same(_numbers(one), _numbers(two))
    assert one.yield_ == one.passed.sum() / 6000  # the per-chunk counts, summed, against the verdicts


class _FakeClient:
    """Stands for a Dask client: ``run(func)`` calls func once per 'worker' (here, in this process)."""

    def run(self, func):
        return {"tcp://a:1": func(), "tcp://b:2": func()}


def test_a_note_when_dask_workers_trim_malloc(monkeypatch):
    # glibc malloc(3): MALLOC_TRIM_THRESHOLD_ set fixes the mmap threshold; Dask's nanny sets it
    import dask

    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    with dask.config.set({"distributed.worker.profile.enabled": False}):
        notes = parallel.worker_notes(_FakeClient())
        assert len(notes) == 1
        assert "2 of 2 Dask worker(s)" in notes[0] and "MALLOC_TRIM_THRESHOLD_=65536" in notes[0]
        assert "null" in notes[0]
        monkeypatch.delenv("MALLOC_TRIM_THRESHOLD_")
        assert parallel.worker_notes(_FakeClient()) == []
    with ThreadPoolExecutor(1) as threads:
        assert parallel.worker_notes(threads) == []  # not a Dask executor: nothing to say


def test_a_note_when_dask_workers_run_the_profiler(monkeypatch):
    # Dask's statistical profiler is on by default (distributed.worker.profile.enabled, Dask's
    # configuration reference); its records grow with the time a task runs (README, measured)
    import dask

    monkeypatch.delenv("MALLOC_TRIM_THRESHOLD_", raising=False)
    with dask.config.set({"distributed.worker.profile.enabled": True}):
        notes = parallel.worker_notes(_FakeClient())
    assert len(notes) == 1 and "2 of 2 Dask worker(s)" in notes[0] and "profiler" in notes[0]
    assert "distributed.worker.profile.enabled" in notes[0]


def test_a_map_lets_each_future_go_once_read():
    # a Dask worker holds a task's result while a client holds its future: map_ordered must drop
    # each future after reading it, or the workers' memory grows with the study (weakref: the
    # Python documentation, an object without references is freed at once)
    import gc
    import weakref

    class Recording(InProcess):
        def __init__(self):
            super().__init__()
            self.refs = []

        def submit(self, fn, /, *args, **kwargs):
            fut = super().submit(fn, *args, **kwargs)
            self.refs.append(weakref.ref(fut))
            return fut

    ex = Recording()
    alive = []

    def progress(done):
        gc.collect()
        alive.append(sum(r() is not None for r in ex.refs[:done - 1]))

    with parallel.using(ex):
        assert parallel.map_ordered(abs, [-1, -2, -3, -4, -5], group=1, progress=progress) == [1, 2, 3, 4, 5]
    assert ex.tasks == 5 and alive == [0, 0, 0, 0, 0]
