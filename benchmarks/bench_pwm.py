"""Benchmark of the periodic steady state (``[drive]``): the fast shooting against the reference
shooting, both timed in this one run.

``python benchmarks/bench_pwm.py`` (the demo cases with a [drive] section, every duty),
``--repeat N`` (best of N timings per method, default 2), ``--brute`` (also plain brute-force
cycling of the valve case at its first duty until the cycle-start state changes by less than
1e-12 relative — a few hundred cycles, ~10 s).

Per duty: wall time of :func:`kickback.engine.periodic.steady_state` (closed-form affine
on-phase, averaged-model guess, one finite-difference Jacobian then Broyden) and of
:func:`periodic_reference.reference_steady_state` (tests/periodic_reference.py) (Newton with a fresh
finite-difference Jacobian every step, every phase by Radau), their ratio, the cycle solves,
the fixed-point residual each reached, how far apart their fixed points and figures are, and the
brute-force cycles the contraction implies. Timings are noisy on a shared machine; the ratio is
what to read.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

CASES = Path(__file__).resolve().parent.parent / "cases"
DEMO = ("valve_pwm_hold.toml", "fan_motor_pwm.toml")
TARGET_S = 0.2


def _timed(fn, args, repeat: int):
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn(*args)
        best = min(best, time.perf_counter() - t0)
    return best, out


def _figure_gap(a, b) -> float:
    """Largest relative difference of the main PWM figures of two steady states."""
    keys = ("mean_current_A", "rms_current_A", "min_current_A", "max_current_A", "conduction_loss_W",
            "crossover_energy_J", "supply_power_W")
    gaps = [abs(getattr(a, k) - getattr(b, k)) / max(abs(getattr(b, k)), 1e-300) for k in keys]
    return max(gaps)


def _brute(c, duty, frequency, scale, n_max=5000):
    from kickback.engine.periodic import CYCLE_RTOL, one_cycle

    x = np.zeros(c.ie)  # zero current, capacitors discharged, rotor at rest
    t0 = time.perf_counter()
    for n in range(1, n_max + 1):
        x1 = one_cycle(c, x, duty, frequency, CYCLE_RTOL, fast=False)[0]
        change = float(np.max(np.abs(x1 - x) / scale))
        x = x1
        if change < 1e-12:
            return n, time.perf_counter() - t0, x
    return n_max, time.perf_counter() - t0, x


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(prog="python benchmarks/bench_pwm.py", description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=2, help="timings per method and duty (best is shown)")
    ap.add_argument("--brute", action="store_true", help="also brute-force cycling of the valve case")
    args = ap.parse_args(argv)

    from kickback import load_case
    from kickback.circuit import Circuit
    from kickback.engine.periodic import scales, steady_state
    sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))  # the reference shooting
    from periodic_reference import reference_steady_state

    from kickback.pwmfigures import pwm_figures

    print("periodic steady state per duty: fast shooting vs the reference shooting, same run")
    print(f"{'case':<22}{'duty':>6}{'fast s':>9}{'solves':>7}{'resid':>10}{'ref s':>9}{'solves':>7}"
          f"{'resid':>10}{'ratio':>7}{'|dx*|':>10}{'figs':>10}{'brute':>8}")
    worst = 0.0
    ratios = []
    for name in DEMO:
        case = load_case(CASES / name)
        c = Circuit(case)
        f = case.drive.frequency
        steady_state(c, case.drive.duties[0], f)  # warm-up (imports, caches)
        for duty in case.drive.duties:
            t_fast, fast = _timed(steady_state, (c, duty, f), args.repeat)
            t_ref, ref = _timed(reference_steady_state, (c, duty, f), args.repeat)
            dx = float(np.max(np.abs(fast.x - ref.x) / scales(c)))
            gap = _figure_gap(pwm_figures(fast), pwm_figures(ref))
            worst = max(worst, t_fast)
            ratios.append(t_ref / t_fast)
            print(f"{name.removesuffix('.toml'):<22}{duty:>6g}{t_fast:>9.3f}{fast.cycle_solves:>7d}"
                  f"{fast.residual:>10.1e}{t_ref:>9.3f}{ref.cycle_solves:>7d}{ref.residual:>10.1e}"
                  f"{t_ref / t_fast:>7.1f}{dx:>10.1e}{gap:>10.1e}{fast.brute_force_cycles or 0:>8d}")
    print(f"slowest fast steady state {worst:.3f} s per duty (target ≤ {TARGET_S} s); "
          f"speed-up over the reference {min(ratios):.1f}–{max(ratios):.1f}×")
    print("|dx*|: largest scaled difference of the two fixed points; figs: largest relative difference "
          "of mean/RMS/min/max current, conduction loss, crossover energy, supply power")
    if args.brute:
        case = load_case(CASES / DEMO[0])
        c = Circuit(case)
        duty, f = case.drive.duties[0], case.drive.frequency
        t_fast, fast = _timed(steady_state, (c, duty, f), 1)
        n, t_b, x = _brute(c, duty, f, scales(c))
        dx = float(np.max(np.abs(fast.x - x) / scales(c)))
        print(f"brute-force cycling {DEMO[0]} duty {duty:g}: {n} cycles in {t_b:.1f} s "
              f"(contraction estimate {fast.brute_force_cycles}), fixed points {dx:.1e} apart, "
              f"{t_b / t_fast:.0f}× the fast steady state")


if __name__ == "__main__":
    main()
