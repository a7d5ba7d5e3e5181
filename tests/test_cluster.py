"""A Dask distributed cluster as the executor (kickback.parallel): the same numbers, number for
number, as a local run; without Dask, --scheduler says what to install."""

from __future__ import annotations

import sys

import numpy as np
import pytest
from click.testing import CliRunner

from kickback import load_case
from kickback.cli import main
from kickback.studies.sweep import Axis, run_sweep
from kickback.studies.tolerance import run_tolerance

distributed = pytest.importorskip("distributed")

CASE = '''title = "cluster test (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "100 mH"
resistance = "30 Ω"
[switch]
type = "mosfet"
on_resistance = "0.1 Ω"
breakdown_voltage = "60 V"
[[clamp]]
across = "coil"
[[clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "0.7 V"
[[clamp.element]]
type = "zener"
voltage = "20 V"
[checks]
max_peak_voltage = "45 V"
[tolerance."coil.inductance"]
band = "10 %"
distribution = "normal"
[tolerance."clamp[0].element[1].voltage"]
band = "±1 V"
[tolerance.coil_temperature]
min = "-20 °C"
max = "85 °C"
'''


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
    # threads in this process: no worker processes to start on a loaded test machine; the Dask
    # dashboard is not started (it would need bokeh and a port)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None) \
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
