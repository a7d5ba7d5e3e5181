"""CPU per call of the compiled circuit (kickback.engine.kcircuit) against the Python circuit.

Run from the repository top:  PYTHONPATH=$PWD python benchmarks/bench_kcircuit.py [SEED ...] [--compile]

For a few wide-range draws (tests/wide_range.py, demo data): ``Circuit.rhs`` and
``PhaseRunner.jac`` against ``kcircuit.RHS`` and ``JAC`` called from Python, and ``rhs_core`` /
``jac_core`` called inside compiled code (as radau5's loop calls them), at a state with the node
past the supply (the clamps conducting). ``--compile``: the first compile (an empty numba cache
folder) and the load from the cache, each in a fresh process, imports included.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

_COMPILE = """
import time
t0, c0 = time.perf_counter(), time.process_time()
import sys; sys.path.insert(0, 'tests')
from wide_range import draw
from kickback.caseio import load_case
from kickback.circuit import Circuit
from kickback.engine import kcircuit as K
c = Circuit(load_case(draw(46).text, source='case 46')); p = K.pack(c); y = c.initial_state()
K.RHS(0.0, y, p); K.JAC(0.0, y, p); K.NODE_BALANCE(0.0, y, p); K.PIN_RELEASE(0.0, y, p)
print('%.2f s wall, %.2f s CPU' % (time.perf_counter() - t0, time.process_time() - c0))
"""


def per_call(fn, n):
    t0 = time.process_time()
    for _ in range(n):
        fn()
    return (time.process_time() - t0) / n


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("seeds", nargs="*", type=int, default=[46, 322, 4361, 25, 117, 19])
    ap.add_argument("--compile", action="store_true")
    args = ap.parse_args()
    if args.compile:
        with tempfile.TemporaryDirectory() as d:
            env = {**os.environ, "NUMBA_CACHE_DIR": d}
            for name in ("first compile", "cached load"):
                out = subprocess.run([sys.executable, "-c", _COMPILE], env=env, capture_output=True, text=True,
                                     check=True).stdout.strip()
                print(f"{name}: {out}")
        return
    from wide_range import draw

    from kickback.caseio import load_case
    from kickback.circuit import Circuit
    from kickback.engine import kchain
    from kickback.engine import kcircuit as K
    from kickback.engine.detailed import PhaseRunner

    print("per call [µs]: Python rhs, RHS from Python, rhs in compiled code; Python jac, JAC, jac in compiled code")
    for s in args.seeds:
        c = Circuit(load_case(draw(s).text, source=f"case {s}"))
        if K.supported(c):
            print(f"{s:>6}  refused: {K.supported(c)}")
            continue
        pr = PhaseRunner(c, 1e-8, c.initial_state())
        r, j = time_case(c, pr, K.pack(c, pr.scale))
        kinds = ",".join(str(kchain.chain_kind(c.chains[k])) for k in c.active_chains)
        print(f"{s:>6}  chains {kinds:<6} n={c.n_states:<3} rhs {r[0]*1e6:6.2f} {r[1]*1e6:6.2f} {r[2]*1e6:6.3f}"
              f"   jac {j[0]*1e6:6.1f} {j[1]*1e6:6.2f} {j[2]*1e6:6.3f}")


def time_case(c, pr, p):
    """Per-call CPU times [s] of (rhs, RHS, rhs in compiled code) and likewise for the Jacobian."""
    import numba

    from kickback.engine import kcircuit as K

    @numba.njit
    def loop_rhs(t, y, p, n):
        s = 0.0
        for k in range(n):
            s += K.rhs_core(t + 1e-18 * k, y, p)[0]
        return s

    @numba.njit
    def loop_jac(t, y, p, n):
        s = 0.0
        for k in range(n):
            s += K.jac_core(t + 1e-18 * k, y, p)[0, 0]
        return s

    y = c.initial_state()
    y[1] = 1.3 * c.Vs + 5.0  # past the supply: the clamps conduct
    loop_rhs(0.0, y, p, 10)
    loop_jac(0.0, y, p, 10)
    r = [per_call(lambda: c.rhs(0.0, y), 2000), per_call(lambda: K.RHS(0.0, y, p), 20000),
         per_call(lambda: loop_rhs(0.0, y, p, 100000), 3) / 100000]
    j = [per_call(lambda: pr.jac(0.0, y), 300), per_call(lambda: K.JAC(0.0, y, p), 5000),
         per_call(lambda: loop_jac(0.0, y, p, 20000), 3) / 20000]
    return r, j


if __name__ == "__main__":
    main()
