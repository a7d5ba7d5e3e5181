"""A cold ``kickback run`` (issue 18): what it imports, and the child that draws its pictures.

The speed itself is measured by ``benchmarks/bench_cold.py`` (a benchmark, not a timed test); these
tests hold what that speed rests on: ``run`` imports only what it needs, and the pictures drawn in
the forked child (:mod:`kickback.outputs.painter`) are byte for byte those drawn in-process, with
the in-process drawing taking over whenever the child cannot deliver.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
import warnings
from pathlib import Path

import pytest

from kickback.outputs import painter as painter_mod

ROOT = Path(__file__).resolve().parent.parent
CASE = ROOT / "cases" / "irrigation_valve.toml"
PWM_CASE = ROOT / "cases" / "valve_pwm_hold.toml"

#: modules a single run never needs: studies, parallel back ends, the schematic, compiled engines
NOT_FOR_RUN = ("dask", "distributed", "numba", "schemdraw", "hypothesis", "kickback.studies",
               "kickback.engine.batch", "kickback.engine.radau5", "matplotlib.pyplot", "scipy.stats",
               "scipy.interpolate", "concurrent.futures.process")

_PROBE = """
import atexit, json, sys
listing = sys.argv.pop()
def _report():
    names = sorted(m for m in sys.modules)
    with open(listing, "w") as fh:
        json.dump(names, fh)
atexit.register(_report)
from kickback.cli import main
main()
"""


def _run_modules(tmp_path, args, painter: str) -> tuple[subprocess.CompletedProcess, set[str]]:
    """Run ``kickback`` in a fresh process; the modules it had imported at exit."""
    listing = tmp_path / "modules.json"
    env = dict(os.environ, PYTHONPATH=str(ROOT), **{painter_mod.ENV: painter})
    proc = subprocess.run([sys.executable, "-c", _PROBE, *args, str(listing)], env=env,
                          capture_output=True, text=True, cwd=tmp_path)
    return proc, set(json.loads(listing.read_text()))


def _imported(modules: set[str], name: str) -> bool:
    return name in modules or any(m.startswith(name + ".") for m in modules)


def test_run_imports_only_what_it_needs(tmp_path):
    # --no-plot: no matplotlib at all; and never a study, a cluster, the compiled engines or pyplot
    proc, mods = _run_modules(tmp_path, ["run", str(CASE), "--out", str(tmp_path / "o"), "--no-plot"], "0")
    assert proc.returncode in (0, 1), proc.stderr
    assert not _imported(mods, "matplotlib")
    assert [m for m in NOT_FOR_RUN if _imported(mods, m)] == []
    assert "scipy.integrate" in mods  # the probe sees the engine's own import (it could fail)


def test_run_draws_in_the_child_when_told(tmp_path):
    # KICKBACK_PAINTER=1: the parent never imports matplotlib, yet the pictures are written
    proc, mods = _run_modules(tmp_path, ["run", str(CASE), "--out", str(tmp_path / "o")], "1")
    assert proc.returncode in (0, 1), proc.stderr
    assert not _imported(mods, "matplotlib")
    assert [m for m in NOT_FOR_RUN if _imported(mods, m)] == []
    assert (tmp_path / "o" / "waveforms.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert b"<svg" in (tmp_path / "o" / "waveforms.svg").read_bytes()[:400]


def test_run_without_the_child_draws_in_process(tmp_path):
    proc, mods = _run_modules(tmp_path, ["run", str(CASE), "--out", str(tmp_path / "o")], "0")
    assert proc.returncode in (0, 1), proc.stderr
    assert "matplotlib.figure" in mods
    assert [m for m in NOT_FOR_RUN if _imported(mods, m)] == []


@pytest.mark.parametrize("case", [CASE, PWM_CASE], ids=("valve", "pwm"))
def test_child_and_in_process_write_the_same_files(tmp_path, case):
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    outs = {}
    for mode in ("1", "0"):
        out = tmp_path / mode
        proc = subprocess.run([sys.executable, "-m", "kickback.cli", "run", str(case), "--out", str(out)],
                              env={**env, painter_mod.ENV: mode}, capture_output=True, text=True)
        assert proc.returncode in (0, 1), proc.stderr
        outs[mode] = {p.name: p.read_bytes() for p in sorted(out.iterdir())}
    assert sorted(outs["1"]) == sorted(outs["0"])
    assert {"waveforms.png", "waveforms.svg"} <= set(outs["1"])
    assert outs["1"] == outs["0"]


def _pictures(result):
    from kickback.cli_run import pictures_of

    return pictures_of(result)


def _boom(arg):
    raise ValueError(f"cannot draw {arg!r}")


def _warns(arg):
    warnings.warn(f"odd value {arg}", RuntimeWarning, stacklevel=1)
    return {"x": bytes([arg])}


@pytest.fixture
def forced(monkeypatch):
    monkeypatch.setenv(painter_mod.ENV, "1")
    yield
    assert painter_mod.CHILDREN == set()  # every child reaped


def test_child_returns_what_the_parent_would_draw(forced):
    from kickback.caseio import load_case
    from kickback.simulation import simulate

    result = simulate(load_case(CASE))
    p = painter_mod.start(_pictures)
    assert p is not None and p.send(result)
    got = p.receive()
    assert p.error is None
    assert got == _pictures(result)


def test_failure_in_the_child_leaves_the_drawing_to_the_parent(forced):
    p = painter_mod.start(_boom)
    assert p.send(7)
    assert p.receive() is None
    assert "ValueError: cannot draw 7" in p.error


def test_unpicklable_job_is_not_sent(forced):
    p = painter_mod.start(_pictures)
    assert not p.send(lambda: None)
    assert p.receive() is None and "pickle" in p.error.lower()


def test_child_warnings_are_raised_again_in_the_parent(forced):
    p = painter_mod.start(_warns)
    assert p.send(5)
    with pytest.warns(RuntimeWarning, match="odd value 5"):
        assert p.receive() == {"x": b"\x05"}


def test_closing_an_unused_child_reaps_it(forced):
    p = painter_mod.start(_pictures)
    pid = p.pid
    p.close()
    p.close()
    with pytest.raises(ChildProcessError):
        os.waitpid(pid, os.WNOHANG)


def test_free_core_follows_the_setting_and_the_load(monkeypatch):
    monkeypatch.setenv(painter_mod.ENV, "0")
    assert not painter_mod.free_core()
    monkeypatch.setenv(painter_mod.ENV, "")
    monkeypatch.setattr(sys, "platform", "linux")
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    monkeypatch.setattr(os, "getloadavg", lambda: (0.9, 0.0, 0.0))
    assert painter_mod.free_core()
    monkeypatch.setattr(os, "getloadavg", lambda: (1.1, 0.0, 0.0))  # no core idle on average
    assert not painter_mod.free_core()
    monkeypatch.setattr(os, "cpu_count", lambda: 1)
    monkeypatch.setattr(os, "getloadavg", lambda: (0.0, 0.0, 0.0))
    assert not painter_mod.free_core()
    monkeypatch.setattr(os, "cpu_count", lambda: 2)
    assert painter_mod.free_core()
    monkeypatch.setattr(sys, "platform", "darwin")
    assert not painter_mod.free_core()
    monkeypatch.setenv(painter_mod.ENV, "1")
    assert painter_mod.free_core()


def _decoded(png: bytes):
    import io

    import numpy as np
    from PIL import Image

    img = Image.open(io.BytesIO(png))
    return img.mode, img.info.get("dpi"), np.asarray(img.convert("RGBA"))


def _matplotlib_png(fig) -> bytes:
    """matplotlib's own PNG of ``fig`` (RGBA), the reference the faster writer must match."""
    import io

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=130)
    return buf.getvalue()


def test_opaque_png_has_matplotlibs_pixels():
    from kickback.caseio import load_case
    from kickback.outputs.plots import figure_bytes
    from kickback.simulation import simulate

    fig, _ = simulate(load_case(CASE)).plot()
    mode, dpi, pixels = _decoded(figure_bytes(fig, "png"))
    ref_mode, ref_dpi, ref_pixels = _decoded(_matplotlib_png(fig))
    assert (mode, ref_mode) == ("RGB", "RGBA")
    assert dpi == pytest.approx(ref_dpi)
    assert pixels.shape == ref_pixels.shape and (pixels == ref_pixels).all()


def test_see_through_figure_keeps_its_alpha():
    from matplotlib.figure import Figure

    from kickback.outputs.plots import figure_bytes

    fig = Figure(figsize=(2, 1), facecolor="none")
    fig.add_subplot().plot([0, 1], [1, 0])
    mode, _, pixels = _decoded(figure_bytes(fig, "png"))
    assert mode == "RGBA" and pixels[..., 3].min() == 0
    assert (pixels == _decoded(_matplotlib_png(fig))[2]).all()


def test_run_collects_no_cycles_while_it_runs_and_restores_the_collector(tmp_path, monkeypatch):
    import gc

    from click.testing import CliRunner

    import kickback.simulation
    from kickback.cli import main

    seen = []
    real = kickback.simulation.simulate

    def watched(*args, **kwargs):
        seen.append(gc.isenabled())
        return real(*args, **kwargs)

    monkeypatch.setattr(kickback.simulation, "simulate", watched)
    assert gc.isenabled()
    result = CliRunner().invoke(main, ["run", str(CASE), "--no-plot", "--out", str(tmp_path / "o")])
    assert result.exit_code in (0, 1), result.output
    assert seen == [False] and gc.isenabled()


def _gone(pid: int) -> bool:
    """Whether process ``pid`` has ended (no longer listed, or a zombie waiting to be reaped)."""
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except (FileNotFoundError, ProcessLookupError):
        return True
    return stat.rsplit(")", 1)[1].split()[0] in ("Z", "X")


@pytest.mark.skipif(not Path("/proc/self/task").exists(), reason="reads /proc (Linux)")
@pytest.mark.parametrize(("sig", "status"), [(signal.SIGINT, 130), (signal.SIGTERM, 143)], ids=("SIGINT", "SIGTERM"))
def test_signal_to_the_parent_stops_the_picture_child(tmp_path, sig, status):
    # the signal goes to the parent alone (not its group): its usual exit status, nothing written,
    # and no child left running (the parent stops it; a child would also end at the end of its pipe)
    env = dict(os.environ, PYTHONPATH=str(ROOT), **{painter_mod.ENV: "1"})
    out = tmp_path / "o"
    proc = subprocess.Popen([sys.executable, "-m", "kickback.cli", "run", str(CASE), "--out", str(out)],
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    children = Path(f"/proc/{proc.pid}/task/{proc.pid}/children")
    end = time.monotonic() + 60
    kids: list[str] = []
    while not kids and time.monotonic() < end and proc.poll() is None:
        kids = children.read_text().split() if children.exists() else []
        time.sleep(0.005)
    assert kids, "the run never forked its picture child"
    os.kill(proc.pid, sig)
    _, stderr = proc.communicate(timeout=60)
    assert proc.returncode == status, stderr
    end = time.monotonic() + 10
    while not _gone(int(kids[0])) and time.monotonic() < end:
        time.sleep(0.05)
    assert _gone(int(kids[0]))
    assert not out.exists()
