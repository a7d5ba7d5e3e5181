"""Refresh the stored detailed-engine reference of the agreement tests (tests/reference/agreement.json).

Run from the repository root after a change to the detailed engine or anything it imports
(the test summary line "agreement reference: … because the store is stale" says when):

    python benchmarks/refresh_reference.py [--examples N] [--workers N]

It runs ``tests/test_batch.py`` with ``KICKBACK_REFRESH_REFERENCE=1``: every reference is solved
live (the detailed engine at rtol 1e-9) and the store is rewritten at the end with the current
source hash, then it prints how long that took. The agreement assertions run as usual, so the
exit status is pytest's; the store is written even where an assertion fails (the reference is
solved before the comparison). ``--examples`` is the number of examples per property the store
holds (default 150, the suite's default; a larger KICKBACK_BATCH_EXAMPLES in a later run solves
the rest live). ``--workers`` runs that many pytest-xdist processes (default 2, 0 for none).
"""

from __future__ import annotations

import argparse
import importlib.util
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--examples", type=int, default=150, help="examples per agreement property (default 150)")
    ap.add_argument("--workers", type=int, default=2, help="pytest-xdist processes (default 2; 0: none)")
    args = ap.parse_args()
    env = dict(os.environ, KICKBACK_REFRESH_REFERENCE="1", KICKBACK_BATCH_EXAMPLES=str(args.examples))
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(ROOT), env.get("PYTHONPATH", "")) if p)
    cmd = [sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", "tests/test_batch.py"]
    if args.workers and importlib.util.find_spec("xdist") is not None:
        cmd += ["-n", str(args.workers)]
    elif args.workers:
        cmd += ["-p", "no:xdist"]
        print("pytest-xdist not installed: one process", file=sys.stderr)
    else:
        cmd += ["-p", "no:xdist"]
    print(" ".join(cmd), flush=True)
    t0 = time.perf_counter()
    status = subprocess.call(cmd, cwd=ROOT, env=env)
    print(f"refresh_reference: {time.perf_counter() - t0:.0f} s wall, pytest exit status {status}, "
          f"store {ROOT / 'tests' / 'reference' / 'agreement.json'}", flush=True)
    return status


if __name__ == "__main__":
    sys.exit(main())
