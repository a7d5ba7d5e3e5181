"""Reliability benchmark: random valid cases through both engines (issue 14, DESIGN.md §9).

Draws N cases with ``tests/wide_range.py`` (seeds START … START+N−1; the same seed gives the
same case), runs each on the detailed engine and, where it covers the case, on the batch engine,
in worker processes, and prints per engine: crashes (a bare exception), stated failures (a
KickbackError saying why; for the batch engine, a regime it declines with a stated reason is
counted apart: studies run those variants on the detailed engine), cases with no answer (a case
error whose physics has none, with its reason: ``NO_ANSWER_KEYS`` in tests/wide_range_check.py),
cases over 2 s, cases killed at the time limit, audits failed, and between the engines: verdict
flips and the worst disagreement per headline figure — each with the seeds of the worst
offenders. Not a timed test: a script. Times are CPU seconds of the worker process (the limit
too: a loaded machine does not kill a case an idle one finishes); the wall times are printed
beside them.

    python benchmarks/reliability.py --cases 10000 --log reliability.jsonl

``--log`` keeps every record (JSON lines); a run given the same log skips the seeds already in
it, so an interrupted run resumes. ``--save DIR`` writes each failing case's TOML to DIR.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from collections import defaultdict
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from wide_range import draw  # noqa: E402
from wide_range_check import ENERGIES, TIMES, compare, run_pool  # noqa: E402

from kickback.engine.pwl import DECLINED  # noqa: E402

SLOW = 2.0  # seconds (issue 14: no case over 2 s)
SHOW = 5  # worst offenders listed per line


def _seeds(recs):
    return ", ".join(str(r["seed"]) for r in recs[:SHOW]) + (" …" if len(recs) > SHOW else "")


def summarize(records: list[dict], n_cases: int) -> str:
    by = defaultdict(dict)
    for r in records:
        by[r["seed"]][r["engine"]] = r
    lines = [f"{n_cases} random valid cases (tests/wide_range.py), both engines where the batch engine covers them"]
    for engine in ("detailed", "batch"):
        recs = [e[engine] for e in by.values() if engine in e]
        run = [r for r in recs if r["status"] != "not covered"]
        lines.append(f"\n{engine} engine: {len(run)} run" +
                     (f" ({len(recs) - len(run)} not covered)" if engine == "batch" else ""))
        declined = [r for r in run if r["status"] == "stated" and DECLINED in r["message"]]
        cats = [("crashes (bare exceptions)", [r for r in run if r["status"] == "crash"]),
                ("stated failures", [r for r in run if r["status"] == "stated" and r not in declined]),
                ("no answer (stated reason)", [r for r in run if r["status"] == "no answer"]),
                ("killed at the time limit", [r for r in run if r["status"] == "timeout"]),
                (f"over {SLOW:g} s of CPU", sorted([r for r in run if r["seconds"] > SLOW],
                                                   key=lambda r: -r["seconds"])),
                ("audits failed", [r for r in run if r["status"] == "ok" and r["audit"]]),
                ("with warnings", [r for r in run if r.get("warnings")])]
        if engine == "batch":
            # a regime the batch engine says it does not cover: a study runs it on the detailed engine
            cats.insert(1, ("declined (stated, see below)", declined))
        for name, hit in cats:
            lines.append(f"  {name:28s} {len(hit):6d}" + (f"   seeds {_seeds(hit)}" if hit else ""))
        kinds = defaultdict(list)
        for r in run:
            if r["status"] in ("crash", "stated", "no answer"):
                kinds[_kind(r["message"])].append(r)
            for f in r["audit"] if r["status"] == "ok" else []:
                kinds["audit: " + _kind(f)].append(r)
        for k, hit in sorted(kinds.items(), key=lambda x: -len(x[1]))[:12]:
            lines.append(f"    {len(hit):5d} × {k[:90]}   seeds {_seeds(hit)}")
        for what, key in (("CPU", "seconds"), ("wall", "wall_seconds")):
            times = sorted(r.get(key, r["seconds"]) for r in run if r["status"] == "ok")
            if times:
                lines.append(f"  {what} time per case: median {times[len(times) // 2]:.3g} s, "
                             f"99 % {times[min(len(times) - 1, int(0.99 * len(times)))]:.3g} s, max {times[-1]:.3g} s")
    pairs = [(e["detailed"], e["batch"]) for e in by.values()
             if "batch" in e and "detailed" in e and e["detailed"]["status"] == "ok" and e["batch"]["status"] == "ok"
             and not e["detailed"]["audit"] and not e["batch"]["audit"]]
    cmp = [(d, compare(d, b)) for d, b in pairs]
    flips = [d for d, c in cmp if c["flip"]]
    lines.append(f"\nboth engines, both audits passed: {len(pairs)} cases "
                 f"({sum(d['fitted'] for d, _ in cmp)} with a fitted Shockley diode or varistor)")
    lines.append(f"  verdict flips {len(flips):22d}" + (f"   seeds {_seeds(flips)}" if flips else ""))
    for fitted, tol_name in ((False, "exact laws, tolerance 1e-4"), (True, "fitted laws, tolerance 5e-2")):
        sub = [(d, c) for d, c in cmp if d["fitted"] == fitted]
        lines.append(f"  {tol_name}: {len(sub)} cases, over tolerance in "
                     f"{sum(bool(c['worse']) for _, c in sub)}")
        for name in ("peak_voltage_V",) + TIMES + ENERGIES:
            vals = sorted(((c["figures"].get(name, 0.0), d) for d, c in sub), key=lambda x: -x[0])
            if not vals:
                continue
            over = [d for v, d in vals if v > c_tol(fitted)]
            worst = vals[0][0]
            lines.append(f"    {name:22s} worst {worst:9.3g} (case {vals[0][1]['seed']:5d})  over {len(over):4d}" +
                         (f"   seeds {_seeds(over)}" if over else ""))
    return "\n".join(lines) + "\n"


def c_tol(fitted: bool) -> float:
    from wide_range_check import EXACT_TOL, FIT_TOL

    return FIT_TOL if fitted else EXACT_TOL


def _kind(message: str) -> str:
    """A message with its numbers taken out, to group failures of one kind."""
    import re

    return re.sub(r"-?\d[\d.e+-]*", "#", message.split(" (")[0] if message.startswith("figure") else message)[:120]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cases", type=int, default=10_000, help="cases to draw (default 10000)")
    ap.add_argument("--start", type=int, default=0, help="first seed (default 0)")
    ap.add_argument("--seeds", type=int, nargs="+", default=None,
                    help="these seeds only (instead of --cases/--start): re-check named cases")
    ap.add_argument("--workers", type=int, default=2, help="worker processes (default 2)")
    ap.add_argument("--limit", type=float, default=5.0, help="CPU seconds before a case is killed (default 5)")
    ap.add_argument("--log", type=Path, default=None, help="JSON-lines record of every solve (resumes)")
    ap.add_argument("--save", type=Path, default=None, help="write each failing case's TOML here")
    args = ap.parse_args(argv)
    seeds = args.seeds if args.seeds is not None else range(args.start, args.start + args.cases)
    done: list[dict] = []
    if args.log is not None and args.log.exists():
        done = [json.loads(x) for x in args.log.read_text().splitlines() if x.strip()]
        # records from before the times were CPU seconds (no "wall_seconds") are solved again
        done = [r for r in done if r["seed"] in seeds and "wall_seconds" in r]
    have = {(r["seed"], r["engine"]) for r in done}
    tasks = [(s, e, True) for s in seeds for e in ("detailed", "batch") if (s, e) not in have]
    log = args.log.open("a") if args.log is not None else None
    t0 = time.perf_counter()
    count = [0]

    def on_record(rec):
        count[0] += 1
        if log is not None:
            log.write(json.dumps(rec) + "\n")
            log.flush()
        if count[0] % 200 == 0:
            print(f"  {count[0]} of {len(tasks)} solves, {time.perf_counter() - t0:.0f} s", file=sys.stderr)

    try:
        records = done + run_pool(tasks, workers=args.workers, limit=args.limit, on_record=on_record)
    finally:
        if log is not None:
            log.close()
    print(summarize(records, len(seeds)), end="")
    print(f"\n{len(tasks)} solves in {time.perf_counter() - t0:.0f} s on {args.workers} workers"
          f" ({len(done)} taken from the log)")
    if args.save is not None:
        save_failures(records, args.save)
    return 0


def failure_kinds(records) -> dict:
    """seed → list of what failed ("detailed crash", "batch audit", "flip", "batch peak_voltage_V" …)."""
    by = defaultdict(dict)
    for r in records:
        by[r["seed"]][r["engine"]] = r
    out = defaultdict(list)
    for seed, e in by.items():
        for engine, r in e.items():
            if r["status"] in ("crash", "stated", "timeout"):
                out[seed].append(f"{engine} {r['status']}")
            elif r["status"] == "ok" and r["audit"]:
                out[seed].append(f"{engine} audit")
            if r["seconds"] > SLOW and r["status"] != "not covered":
                out[seed].append(f"{engine} slow")
        if all(x in e and e[x]["status"] == "ok" and not e[x]["audit"] for x in ("detailed", "batch")):
            c = compare(e["detailed"], e["batch"])
            if c["flip"]:
                out[seed].append("flip")
            out[seed] += [f"disagree {k}" for k in c["worse"]]
    return {s: v for s, v in out.items() if v}


def save_failures(records, folder: Path) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for seed, kinds in failure_kinds(records).items():
        tag = kinds[0].replace(" ", "_")
        text = draw(seed).text
        note = "".join(f"# {k}\n" for k in kinds)
        (folder / f"wide_{seed}_{tag}.toml").write_text(note + text)


if __name__ == "__main__":
    raise SystemExit(main())
