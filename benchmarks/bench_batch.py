"""Benchmark of the batch engine: throughput, speed-up over the detailed engine and over bare numpy,
memory of a chunked run — every ratio measured in this one run.

``python benchmarks/bench_batch.py`` (10⁵ variants per family), ``--quick`` (10⁴), ``--full`` (also a
10⁶-variant run with its peak resident memory). Families (invented demo values, variants drawn
from a seeded generator over inductance, resistance, clamp voltage):

* single state (no node capacitance): plain diode, diode + Zener, TVS to ground, switch
  avalanche — instant and with a linear current fall;
* node capacitance (switch output capacitance, 2 states);
* RC snubber across the coil (2 states, ringing).

Per family: variants per second, the largest energy-balance residual, and the detailed engine's
median time per variant over a few dozen of the same variants (default rtol) as a speed-up.
For the constant-clamp family (ideal switch, diode + Zener, no capacitance) also the time of
bare numpy evaluating the first-order closed form for the same variants (Alexander & Sadiku,
Fundamentals of Electric Circuits, ch. 7) — the floor any engine is measured against.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time

import numpy as np

from kickback.case import Case, Clamp, Coil, Element, Supply, Switch


def _dz(r=0.0):
    return (Clamp("D+Z", "coil", (Element("diode", model="constant-drop", forward_voltage=0.7),
                                  Element("zener", voltage=24.0, dynamic_resistance=r))),)


FAMILIES = {
    "diode, instant": (Case("diode (demo)", Supply(24.0), Coil(0.08, 30.0), Switch("ideal"),
                            (Clamp("D", "coil", (Element("diode", model="constant-drop", forward_voltage=0.8),)),)),
                       "clamp[0].element[0].forward_voltage", (0.5, 1.0)),
    "diode + Zener, instant": (Case("D+Z (demo)", Supply(24.0), Coil(0.08, 30.0), Switch("ideal"), _dz()),
                               "clamp[0].element[1].voltage", (6.0, 60.0)),
    "diode + Zener, 1 µs fall": (Case("D+Z fall (demo)", Supply(24.0), Coil(0.08, 30.0),
                                      Switch("mosfet", on_resistance=0.1, fall_time=1e-6), _dz(1.5)),
                                 "clamp[0].element[1].voltage", (6.0, 60.0)),
    "TVS to ground, 200 ns fall": (Case("TVS (demo)", Supply(24.0), Coil(0.08, 30.0),
                                        Switch("mosfet", on_resistance=0.1, fall_time=200e-9),
                                        (Clamp("TVS", "switch", (Element("tvs", voltage=36.0,
                                                                         dynamic_resistance=0.5),)),)),
                                   "clamp[0].element[0].voltage", (30.0, 80.0)),
    "avalanche, instant": (Case("avalanche (demo)", Supply(24.0), Coil(0.08, 30.0),
                                Switch("ideal", breakdown_voltage=60.0)), "switch.breakdown_voltage", (30.0, 90.0)),
    "D+Z with 300 pF node": (Case("D+Z C (demo)", Supply(24.0), Coil(0.08, 30.0),
                                  Switch("mosfet", on_resistance=0.1, fall_time=200e-9, capacitance=300e-12,
                                         breakdown_voltage=90.0), _dz(1.5)),
                             "clamp[0].element[1].voltage", (6.0, 60.0)),
    "RC snubber": (Case("RC (demo)", Supply(24.0), Coil(0.08, 30.0), Switch("ideal"),
                        (Clamp("RC", "coil", (Element("resistor", resistance=47.0),
                                              Element("capacitor", capacitance=1e-6))),)),
                   "clamp[0].element[0].resistance", (20.0, 200.0)),
}


def _variations(path, span, n, seed):
    rng = np.random.default_rng(seed)
    return {"coil.inductance": rng.uniform(0.02, 0.2, n), "coil.resistance": rng.uniform(15.0, 60.0, n),
            path: rng.uniform(span[0], span[1], n)}


def _bare_numpy(var, vd=0.7):
    """First-order closed form of the diode + Zener family (ch. 7): decay time and energies."""
    L, R, vz = var["coil.inductance"], var["coil.resistance"], var["clamp[0].element[1].voltage"]
    i0 = 24.0 / R
    vc = vd + vz
    iz = 1e-9 * i0
    t0 = L / R * np.log((i0 + vc / R) / (iz + vc / R))
    q = (L * (i0 - iz) - vc * t0) / R
    er = 0.5 * L * (i0**2 - iz**2) - vc * q
    return t0, er, vc * q


def _time(fn, repeat=1):
    best = np.inf
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return best, out


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(prog="python benchmarks/bench_batch.py", description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="10⁴ variants per family, 6 detailed runs")
    ap.add_argument("--full", action="store_true", help="also a 10⁶-variant run with its peak resident memory")
    ap.add_argument("--memory-child", type=int, default=0, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.memory_child:
        _memory_child(args.memory_child)
        return
    from kickback.keypath import set_value
    from kickback.simulation import simulate
    from kickback.studies.many import simulate_many

    n = 10_000 if args.quick else 100_000
    n_det = 6 if args.quick else 24
    print(f"batch engine benchmark: {n} variants per family, detailed engine on {n_det} of them")
    print(f"{'family':28s} {'time [s]':>9s} {'variants/s':>11s} {'µs/variant':>11s} {'max |balance|':>14s} "
          f"{'detailed [ms]':>14s} {'speed-up':>9s}")
    for name, (case, path, span) in FAMILIES.items():
        var = _variations(path, span, n, seed=1)
        dt, res = _time(lambda case=case, var=var: simulate_many(case, var))
        ok = res.ok
        bal = float(np.max(np.abs(res.figures["energy_balance_error"][ok]))) if ok.any() else float("nan")
        det = []
        for k in range(n_det):
            one = case
            for p, vals in var.items():
                one = set_value(one, p, float(vals[k]))
            t = time.perf_counter()
            simulate(one)
            det.append(time.perf_counter() - t)
        t_det = float(np.median(det))
        per = dt / n
        print(f"{name:28s} {dt:9.2f} {n / dt:11.0f} {per * 1e6:11.1f} {bal:14.1e} {t_det * 1e3:14.1f} "
              f"{t_det / per:9.0f}" + ("" if ok.all() else f"   ({int((~ok).sum())} not simulated)"))
    case, path, span = FAMILIES["diode + Zener, instant"]
    var = _variations(path, span, n, seed=1)
    t_bare, _ = _time(lambda: _bare_numpy(var), repeat=5)
    t_batch, _ = _time(lambda: simulate_many(case, var))
    print(f"\nconstant-clamp family, {n} variants: bare numpy closed form {t_bare * 1e3:.1f} ms, batch engine "
          f"{t_batch:.2f} s: the engine costs {t_batch / t_bare:.0f}× the bare formula "
          "(it also finds every event, energy, peak and check)")
    if args.full:
        print("\nmemory: the constant-clamp family in a fresh process each, chunks of 10⁴ on the workers")
        for big in (100_000, 1_000_000):
            out = subprocess.run([sys.executable, __file__, "--memory-child", str(big)],
                                 capture_output=True, text=True, check=True).stdout.strip()
            print(f"  {big:>9d} variants: {out}")


def _memory_child(n: int) -> None:
    """One run of n variants of the constant-clamp family; prints time and peak resident memory."""
    import resource

    from kickback.studies.many import simulate_many

    case, path, span = FAMILIES["diode + Zener, instant"]
    var = _variations(path, span, n, seed=2)
    t = time.perf_counter()
    res = simulate_many(case, var)
    dt = time.perf_counter() - t
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**10  # KiB on Linux
    kids = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 2**10
    cols = sum(a.nbytes for a in res.figures.values())
    print(f"{dt:.1f} s, {int(res.ok.sum())} simulated; peak resident {own:.0f} MiB in the main process (its "
          f"{len(res.figures)} result columns {cols / 2**20:.0f} MiB), {kids:.0f} MiB in the largest worker")

if __name__ == "__main__":
    main()
