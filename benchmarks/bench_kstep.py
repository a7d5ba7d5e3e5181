"""CPU of the detailed engine with its phases stepped by scipy's Radau (default) and by
kickback's compiled Radau IIA on the compiled circuit (``KICKBACK_KERNEL=1``, kstep.py).

Run from the repository top:  PYTHONPATH=$PWD python benchmarks/bench_kstep.py [SEED ...] [--limit S]

Each wide-range draw (tests/wide_range.py, demo data; default: the slow [drive] draws of issue
18) is simulated in a fresh process per path, once to warm numba's cache and once measured
(CPU seconds of ``simulate``, imports and the event function's compile excluded); a run past
``--limit`` CPU seconds is stopped and shown as "> limit". The figures of the two paths are
compared (largest relative difference of the peak voltage, decay times and energies).
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys

SLOW = [4361, 3754, 1606, 5438, 5386, 1264, 7308, 3453, 6443]

_RUN = """
import json, resource, sys, time
sys.path.insert(0, 'tests')
from wide_range import draw
from kickback.caseio import load_case
from kickback.simulation import simulate
import os
if os.environ.get("KICKBACK_KERNEL"):
    from kickback.engine import kcircuit, kstep
    kstep._compiled_events(kcircuit)
case = load_case(draw(int(sys.argv[1])).text, source=sys.argv[1])
cap = int(float(sys.argv[2])) + int(time.process_time()) + 1
resource.setrlimit(resource.RLIMIT_CPU, (cap, resource.RLIM_INFINITY))
t = time.process_time()
f = simulate(case).figures
cpu = time.process_time() - t
keys = ("peak_voltage_V", "to_10_percent_s", "to_1_percent_s", "to_zero_s", "resistance_energy_J", "supply_energy_J")
print(json.dumps({"cpu": cpu, **{k: getattr(f, k) for k in keys}}))
"""


def _run(seed: int, kernel: bool, limit: float) -> dict | None:
    env = dict(os.environ)
    env.pop("KICKBACK_KERNEL", None)
    if kernel:
        env["KICKBACK_KERNEL"] = "1"
    out = subprocess.run([sys.executable, "-c", _RUN, str(seed), str(limit)], env=env, capture_output=True,
                         text=True, check=False)
    lines = out.stdout.strip().splitlines()
    return json.loads(lines[-1]) if out.returncode == 0 and lines else None


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("seeds", nargs="*", type=int, default=SLOW)
    ap.add_argument("--limit", type=float, default=60.0, help="CPU seconds per run (default 60)")
    args = ap.parse_args()
    _run(args.seeds[0], True, args.limit)  # warm numba's on-disk cache
    print(f"{'seed':>6} {'scipy s':>9} {'kstep s':>9} {'speed-up':>8}  largest figure difference")
    for seed in args.seeds:
        a, b = _run(seed, False, args.limit), _run(seed, True, args.limit)
        ta = f"{a['cpu']:9.2f}" if a else f"> {args.limit:g}".rjust(9)
        tb = f"{b['cpu']:9.2f}" if b else f"> {args.limit:g}".rjust(9)
        sp = f"{a['cpu'] / b['cpu']:7.1f}x" if a and b else " " * 8
        diff = ""
        if a and b:
            rel = [abs(a[k] - b[k]) / max(abs(a[k]), abs(b[k]), 1e-300) for k in a
                   if k != "cpu" and a[k] is not None and b[k] is not None]
            diff = f"{max(rel):.1e}"
        print(f"{seed:>6} {ta} {tb} {sp}  {diff}", flush=True)


if __name__ == "__main__":
    main()
