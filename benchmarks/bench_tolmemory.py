"""Peak memory of one process running a tolerance study, with every sample gathered or with the
statistics merged from per-chunk summaries (issue 19).

Run from the repository top, once per mode (each in a fresh process, so the peak is its own):
    PYTHONPATH=$PWD python benchmarks/bench_tolmemory.py 1000000 gather
    PYTHONPATH=$PWD python benchmarks/bench_tolmemory.py 1000000 merged

The case is the tests' diode + Zener coil (demo data) with four toleranced values; batch engine,
one process (``workers=1``), no detailed recheck. Prints the wall time, the peak resident memory
(ru_maxrss, Linux: KiB) after a warm-up and at the end, the yield and the 99.9 % peak voltage.
"""

from __future__ import annotations

import resource
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from coil_cases import TEMPERATURE, ZENER_1V, diode_zener_case, tolerance  # noqa: E402

from kickback import load_case  # noqa: E402
from kickback.studies.tolerance import run_tolerance  # noqa: E402

TOL = (diode_zener_case("memory benchmark", 45) + tolerance("coil.inductance", band="10 %", distribution="uniform")
       + tolerance("supply.voltage", band="5 %", distribution="normal") + ZENER_1V + TEMPERATURE)


def _peak_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def main() -> None:
    n, mode = int(sys.argv[1]), sys.argv[2]
    if mode not in ("gather", "merged"):
        raise SystemExit("usage: bench_tolmemory.py N gather|merged")
    case = load_case(TOL)
    run_tolerance(case, 200, 1, workers=1, recheck=0, search_budget=2)  # imports and first run
    base = _peak_mib()
    t = time.perf_counter()
    tr = run_tolerance(case, n, 1, workers=1, recheck=0, search_budget=2, gather=10**9 if mode == "gather" else 0)
    print(f"{mode} {n} samples: {time.perf_counter() - t:.0f} s, peak memory {_peak_mib():.0f} MiB "
          f"(after the warm-up {base:.0f} MiB), yield {tr.yield_:.6f}, "
          f"99.9 % peak voltage {tr.percentiles['peak_voltage_V'][99.9]!r} V")


if __name__ == "__main__":
    main()
