"""Benchmark of the studies on the batch engine against the detailed engine, on the same work and
in the same run (the ratios are what counts; the machine is shared, so absolute times are noisy).

``python benchmarks/bench_studies.py`` or ``--quick``:

* ``choose`` on three demo cases (cases/irrigation_valve.toml, cases/relay_board.toml,
  cases/unclamped_mosfet.toml; about 240 candidates in all), end to end with the batch engine
  (families as batches, near-limit candidates and the top three confirmed by the detailed engine)
  beside ``choose --engine detailed`` (every candidate on the detailed engine, worker processes);
  with ``--quick`` the detailed path runs on the first case only and is extrapolated per
  candidate (said in the output).
* A 1000-point sweep of the Zener voltage of cases/irrigation_valve.toml (Shockley diode as a
  fit, 220 pF node: two states) and of the single-state tolerance case below, with the batch
  engine, beside the detailed engine on an evenly spaced subset of the points, extrapolated per
  point; the largest difference between the engines on that subset is printed.
* A tolerance study of 10⁵ samples (10⁴ with ``--quick``) of a diode + Zener clamp with no
  node capacitance (one state; invented demo values), end to end — Monte Carlo in chunks,
  corners, worst-case search, sensitivity, 16 samples checked against the detailed engine — and
  its peak traced memory (tracemalloc, a second run), beside the detailed engine's time per
  sample measured here on 24 of the same samples.
"""

from __future__ import annotations

import argparse
import os
import time
import tracemalloc
from pathlib import Path

import numpy as np

CASES = Path(__file__).resolve().parent.parent / "cases"
CHOOSE_CASES = ("irrigation_valve", "relay_board", "unclamped_mosfet")

#: the single-state tolerance case (invented demo values): MOSFET with a 1 µs current fall, diode +
#: Zener across the coil, no node capacitance
TOLERANCE_CASE = '''title = "Valve driver, diode + Zener, no node capacitance (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "80 mH"
resistance = "30 Ω"
release_current = "0.1 A"
release_delay = "2 ms"
[switch]
type = "mosfet"
on_resistance = "0.1 Ω"
fall_time = "1 µs"
rated_voltage = "60 V"
[[clamp]]
name = "D+Z"
across = "coil"
[[clamp.element]]
type = "diode"
name = "D1"
model = "constant-drop"
forward_voltage = "0.7 V"
rated_reverse_voltage = "100 V"
rated_surge_current = "5 A"
[[clamp.element]]
type = "zener"
name = "Z1"
voltage = "22 V"
dynamic_resistance = "1.5 Ω"
rated_pulse_energy = "40 mJ"
[checks]
max_release_time = "7 ms"
[tolerance."coil.inductance"]
band = "10 %"
distribution = "normal"
[tolerance."supply.voltage"]
min = "21.6 V"
max = "26.4 V"
[tolerance."clamp[0].element[1].voltage"]
band = "5 %"
[tolerance."switch.fall_time"]
min = "0.5 µs"
max = "2 µs"
[tolerance.coil_temperature]
min = "-20 °C"
max = "85 °C"
'''


def _timed(func):
    t = time.perf_counter()
    out = func()
    return time.perf_counter() - t, out


def bench_choose(quick: bool, workers: int) -> None:
    from kickback import load_case
    from kickback.studies.choose import choose

    print(f"choose (workers {workers}): batch engine beside the detailed engine on every candidate")
    print(f"{'case':20s} {'candidates':>10s} {'batch [s]':>10s} {'detailed [s]':>13s} {'ratio':>7s}  "
          "confirmed / top 3 by the detailed engine")
    tb = td = 0.0
    total = 0
    per_candidate = None  # the detailed engine's time per candidate on the first case
    for name in CHOOSE_CASES:
        case = load_case(CASES / f"{name}.toml")
        t1, ch = _timed(lambda case=case: choose(case, workers=workers))
        n = len(ch.ranked) + len(ch.rejected)
        total += n
        tb += t1
        if quick and per_candidate is not None:
            t2, note = per_candidate * n, "extrapolated"
        else:
            t2, _ = _timed(lambda case=case: choose(case, workers=workers, engine="detailed"))
            note = "measured"
            per_candidate = t2 / n
        td += t2
        print(f"{name:20s} {n:10d} {t1:10.2f} {t2:13.2f} {t2 / t1:7.1f}  {len(ch.confirmed)} / {len(ch.top)} "
              f"({ch.engine}; detailed {note})")
    print(f"{'all':20s} {total:10d} {tb:10.2f} {td:13.2f} {td / tb:7.1f}  "
          f"target: ~200 candidates <= 2 s -> {total} in {tb:.2f} s ({tb / total * 200:.2f} s per 200)")
    print()


def bench_sweep(quick: bool, workers: int) -> None:
    from kickback import load_case
    from kickback.studies.sweep import Axis, run_sweep

    print(f"sweep of 1000 points (workers {workers} for the detailed engine)")
    print(f"{'case':44s} {'batch [s]':>10s} {'detailed [s]':>13s} {'ratio':>7s}  largest difference on the subset")
    sub_n = 10 if quick else 25
    for label, case, path, lo, hi in (
            ("irrigation valve, Zener 5-40 V (fit, 2 states)", load_case(CASES / "irrigation_valve.toml"),
             "clamp[0].element[1].voltage", 5.0, 40.0),
            ("D+Z no node capacitance, Zener 6-48 V", load_case(TOLERANCE_CASE),
             "clamp[0].element[1].voltage", 6.0, 48.0)):
        ax = Axis(path, np.linspace(lo, hi, 1000), "V")
        t1, sw = _timed(lambda case=case, ax=ax: run_sweep(case, (ax,), engine="batch"))
        pick = np.linspace(0, 999, sub_n).round().astype(int)
        sub = Axis(path, ax.values[pick], "V")
        t2, sd = _timed(lambda case=case, sub=sub: run_sweep(case, (sub,), engine="detailed", workers=workers))
        t2 *= 1000 / sub_n
        worst = []
        for col in ("peak_voltage_V", "to_zero_s", "release_s", "clamp_energy_J"):
            a = np.array([np.nan if x is None else x for x in np.array(sw.figures[col], dtype=object)[pick]], float)
            b = np.array([np.nan if x is None else x for x in sd.figures[col]], float)
            ok = np.isfinite(a) & np.isfinite(b) & (b != 0)
            if ok.any():
                worst.append(f"{col} {np.max(np.abs(a[ok] - b[ok]) / np.abs(b[ok])):.1e}")
        print(f"{label:44s} {t1:10.2f} {t2:13.2f} {t2 / t1:7.0f}  {', '.join(worst)} "
              f"(detailed on {sub_n} points, extrapolated)")
    print("target: 1000 points <= 2 s with the batch engine")
    print()


def bench_tolerance(quick: bool, workers: int) -> None:
    from kickback import load_case
    from kickback.studies.tolerance import evaluate, run_tolerance, sample

    n = 10_000 if quick else 100_000
    case = load_case(TOLERANCE_CASE)
    print(f"tolerance study, {n} samples, diode + Zener with no node capacitance (one state)")
    t1, tr = _timed(lambda: run_tolerance(case, n, seed=1, workers=workers))
    tracemalloc.start()
    run_tolerance(case, n, seed=1, workers=workers)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    m = 24
    x = sample(case, m, np.random.default_rng(2))
    evaluate(case, x[:1], engine="detailed")
    t2, _ = _timed(lambda: evaluate(case, x, engine="detailed", workers=1))
    per = t2 / m
    rc = tr.recheck
    worst = max(((e["max_rel"] or 0.0, f) for f, e in rc["figures"].items()), default=(0.0, "-"))
    print(f"  batch engine, end to end: {t1:.2f} s ({t1 / n * 1e6:.0f} µs per sample), yield "
          f"{100 * tr.yield_:.2f} %, peak traced memory {peak / 2**20:.0f} MiB "
          f"({peak / n:.0f} B per sample; chunks of 10000)")
    print(f"  detailed engine: {per * 1e3:.1f} ms per sample (24 samples, 1 process) -> {per * n:.0f} s for {n}; "
          f"ratio {per * n / t1:.0f}")
    print(f"  {rc['samples']} samples checked against the detailed engine: largest relative difference "
          f"{worst[0]:.1e} ({worst[1]}), verdicts that differ {rc['verdicts_differ']}")
    print(f"target: 10^5 samples <= 10 s end to end{' (this quick run: 10^4)' if quick else ''}")
    print()


def main(argv=None) -> None:
    p = argparse.ArgumentParser(prog="python benchmarks/bench_studies.py", description=__doc__.splitlines()[0])
    p.add_argument("--quick", action="store_true", help="fewer samples; the detailed choose on one case only")
    p.add_argument("--workers", type=int, default=min(os.cpu_count() or 1, 8),
                   help="worker processes (both engines, as the CLI's default)")
    a = p.parse_args(argv)
    from kickback import load_case
    from kickback.simulation import simulate

    simulate(load_case(CASES / "irrigation_valve.toml"), engine="batch")  # imports and first calls
    print(f"kickback studies benchmark ({'quick' if a.quick else 'full'}), {os.cpu_count()} cores\n")
    bench_choose(a.quick, a.workers)
    bench_sweep(a.quick, a.workers)
    bench_tolerance(a.quick, a.workers)


if __name__ == "__main__":  # pragma: no cover
    main()
