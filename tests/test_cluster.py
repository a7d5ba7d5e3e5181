"""A Dask distributed cluster as the executor (kickback.parallel): the same numbers, number for
number, as a local run; without Dask, --scheduler says what to install."""

from __future__ import annotations

import json
import sys

import numpy as np
import pytest
from click.testing import CliRunner
from coil_cases import MOSFET, TEMPERATURE, ZENER_1V, diode_zener_case, tolerance

from kickback import load_case
from kickback.cli import main
from kickback.studies.sweep import Axis, run_sweep
from kickback.studies.tolerance import run_tolerance

distributed = pytest.importorskip("distributed")

CASE = (diode_zener_case("cluster test", 45, switch=MOSFET)
        + tolerance("coil.inductance", band="10 %", distribution="normal") + ZENER_1V + TEMPERATURE)


def test_scheduler_without_dask_says_what_to_install(tmp_path, monkeypatch):
    p = tmp_path / "c.toml"
    p.write_text(CASE, encoding="utf-8")
    # a None entry in sys.modules makes "import distributed" raise ImportError, as on a machine
    # without it (Python reference, "The module cache"); this test runs before the cluster starts
    monkeypatch.setitem(sys.modules, "distributed", None)
    for cmd in (["tolerance", str(p), "--samples", "20"], ["check", str(p)], ["choose", str(p)],
                ["sweep", str(p), "--vary", "supply.voltage=20V:28V:3"]):
        res = CliRunner().invoke(main, [*cmd, "--scheduler", "tcp://127.0.0.1:8786"])
        assert res.exit_code == 2, (cmd, res.output)
        lines = res.stderr.strip().splitlines()
        assert len(lines) == 1 and "pip install 'kickback[cluster]'" in lines[0], lines


@pytest.fixture(scope="module")
def client():
    # threads in this process: no worker processes to start on a loaded test machine; the
    # scheduler's HTTP server on a free port (":0"): with None it still tries 8787 and warns when
    # another run holds that port (no dashboard either way: bokeh is not installed)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0") \
            as cluster, distributed.Client(cluster) as c:
        yield c


def _equal(a, b):
    assert np.array_equal(np.asarray(a, float), np.asarray(b, float), equal_nan=True)


@pytest.mark.parametrize("engine", ["batch", "detailed"])
def test_tolerance_on_a_cluster_is_number_for_number_local(client, engine):
    case = load_case(CASE)
    n = 1200 if engine == "batch" else 16
    local = run_tolerance(case, n, 5, workers=1, engine=engine, chunk=300, search_budget=4, recheck=0)
    remote = run_tolerance(case, n, 5, engine=engine, chunk=300, search_budget=4, recheck=0, executor=client)
    _equal(local.samples, remote.samples)
    _equal(local.passed, remote.passed)
    assert local.yield_ci == remote.yield_ci
    for f in local.figures:
        _equal(local.figures[f], remote.figures[f])
    assert local.worst_per_check == remote.worst_per_check
    assert 0 < local.yield_ < 1  # some samples fail: the verdicts were compared, not only passes


def test_merged_tolerance_statistics_on_a_cluster_are_number_for_number_local(client):
    # above the gather limit (here 0) only per-chunk summaries come back: the percentiles, their
    # brackets, the histograms' counts and the worst samples are merged the same on the cluster
    case = load_case(CASE)
    kw = dict(engine="batch", chunk=300, search_budget=4, recheck=2, gather=0)
    local = run_tolerance(case, 1200, 5, workers=1, **kw)
    remote = run_tolerance(case, 1200, 5, executor=client, **kw)
    assert local.samples is None and remote.samples is None and local.brackets
    assert local.to_dict() == remote.to_dict()
    for f, s in local.summaries.items():
        assert np.array_equal(s.keys, remote.summaries[f].keys) and np.array_equal(s.counts, remote.summaries[f].counts)
    # and the same as the study that gathers every sample, but for the percentiles
    gathered = run_tolerance(case, 1200, 5, workers=1, **(kw | {"gather": 10**5})).to_dict()
    assert {k: v for k, v in gathered.items() if not k.startswith("percentile")} == \
        {k: v for k, v in local.to_dict().items() if not k.startswith("percentile")}


@pytest.mark.parametrize("engine", ["batch", "detailed"])
def test_sweep_on_a_cluster_is_number_for_number_local(client, engine):
    case = load_case(CASE)
    axes = (Axis("clamp[0].element[1].voltage", np.linspace(12, 30, 12), "V"),)
    local = run_sweep(case, axes, workers=1, engine=engine)
    remote = run_sweep(case, axes, engine=engine, executor=client.get_executor())
    assert local.to_dict() == remote.to_dict()


def test_check_on_a_cluster(client, tmp_path):
    from kickback.studies.check import check_cases

    paths = []
    for k, limit in enumerate((47, 44)):
        p = tmp_path / f"c{k}.toml"
        p.write_text(CASE.replace('"45 V"', f'"{limit} V"'), encoding="utf-8")
        paths.append(str(p))
    local = check_cases(paths, tolerance=30)
    remote = check_cases(paths, tolerance=30, executor=client)
    assert [c.status for c in remote] == ["pass", "fail"]
    strip = [{k: v for k, v in c.to_dict().items() if k != "seconds"} for c in local]
    assert strip == [{k: v for k, v in c.to_dict().items() if k != "seconds"} for c in remote]


def test_the_notes_ask_the_dask_workers(client, monkeypatch):
    # the in-process workers share this process's environment and Dask configuration; Dask's
    # nanny would set the malloc variable, Dask's default turns the profiler on
    import dask

    from kickback import parallel

    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    with dask.config.set({"distributed.worker.profile.enabled": True}):
        notes = parallel.worker_notes(client.get_executor())
    assert len(notes) == 2 and all("2 of 2 Dask worker(s)" in n for n in notes)
    monkeypatch.delenv("MALLOC_TRIM_THRESHOLD_")
    with dask.config.set({"distributed.worker.profile.enabled": False}):
        assert parallel.worker_notes(client.get_executor()) == []


def test_the_scheduler_option_on_the_command_line(client, tmp_path, monkeypatch):
    # --scheduler ADDRESS connects a client of its own to the running scheduler: the same JSON,
    # number for number, as a local run; a note names the workers' malloc setting
    p = tmp_path / "c.toml"
    p.write_text(CASE, encoding="utf-8")
    args = ["tolerance", str(p), "--samples", "40", "--seed", "3", "--json"]
    local = CliRunner().invoke(main, [*args, "--workers", "1"])
    monkeypatch.setenv("MALLOC_TRIM_THRESHOLD_", "65536")
    from kickback import parallel

    opened, real = [], parallel.cluster_executor
    monkeypatch.setattr(parallel, "cluster_executor", lambda address: opened.append(real(address)) or opened[-1])
    try:
        remote = CliRunner().invoke(main, [*args, "--scheduler", client.scheduler.address])
    finally:  # the command's own client, closed before the cluster is (not left to atexit)
        for executor in opened:
            executor._client.close()
    assert len(opened) == 1
    # exit 1: some samples fail the 45 V limit (yield below 1), on both
    assert local.exit_code == remote.exit_code == 1, (local.output, remote.output)
    assert json.loads(local.stdout) == json.loads(remote.stdout)
    notes = [line for line in remote.stderr.splitlines() if "MALLOC_TRIM_THRESHOLD_" in line]
    assert len(notes) == 1 and "MALLOC_TRIM_THRESHOLD_=65536" in notes[0] and "Traceback" not in remote.output
