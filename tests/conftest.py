"""Shared fixtures (paths of the demo cases) and the agreement reference store's session hooks:
the summary line of how many detailed-engine references were solved live, the merge of what
xdist workers solved, and the store's rewrite in a refresh run (tests/agreement_reference.py)."""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

import pytest

# `kickback run --out` may draw its pictures in a forked child when a core is free
# (kickback/outputs/painter.py): the suite draws in-process, whatever the machine's load, and
# tests/test_cold_run.py asks for the child where it tests it (same bytes either way)
os.environ.setdefault("KICKBACK_PAINTER", "0")

ROOT = Path(__file__).resolve().parent.parent
CASES = ROOT / "cases"

#: what the session's processes did with the agreement reference (this one, and xdist workers)
_AGREEMENT = {"stats": {}, "solved": {}, "samples": {}}


@pytest.fixture(scope="session")
def cases_dir() -> Path:
    return CASES


@pytest.fixture(autouse=True)
def _examples_from_the_test_file_only(monkeypatch):
    """A derandomized Hypothesis test draws the same examples whatever ran before it in the
    process: Hypothesis (6.13x on) also draws, now and then, numbers written in any local module
    loaded at the time, so examples changed with the modules a session (or an xdist worker) had
    imported — a live agreement reference imports more than a stored one — and with every numeric
    literal edited anywhere in kickback. The stored references of tests/test_batch.py are keyed by
    case, so their examples must not move. That pool is emptied; Hypothesis's own constants stay."""
    from hypothesis.internal.conjecture import providers

    # hypothesis is pinned in pyproject.toml; another version may lack the pool: then nothing is
    # emptied and the stored references that no longer match are solved live (slower, not wrong)
    if not hasattr(providers.HypothesisProvider, "_local_constants"):
        return
    monkeypatch.setattr(providers.HypothesisProvider, "_local_constants", providers.Constants())
    # its cache of the constants allowed per kind of draw may hold local ones from a draw made
    # outside this fixture (at collection, say)
    cache = getattr(providers, "CONSTANTS_CACHE", None)
    if cache is not None:
        cache.cache.clear()


def _merge(part: dict) -> None:
    for k, v in part["stats"].items():
        _AGREEMENT["stats"][k] = _AGREEMENT["stats"].get(k, 0) + v
    _AGREEMENT["solved"].update(part["solved"])
    _AGREEMENT["samples"].update(part["samples"])


def pytest_sessionfinish(session):
    ar = sys.modules.get("agreement_reference")
    if ar is None:
        return
    part = {"stats": dict(ar.STATS), "solved": ar.SOLVED, "samples": ar.SAMPLES}
    workeroutput = getattr(session.config, "workeroutput", None)
    if workeroutput is not None:  # an xdist worker: hand it to the controller
        workeroutput["agreement"] = json.dumps(part)
        return
    _merge(part)


@pytest.hookimpl(optionalhook=True)
def pytest_testnodedown(node, error):
    """xdist controller: what a worker solved."""
    out = getattr(node, "workeroutput", {}).get("agreement")
    if out:
        _merge(json.loads(out))


def pytest_terminal_summary(terminalreporter, config):
    stats = _AGREEMENT["stats"]
    if not stats or hasattr(config, "workeroutput"):
        return
    import agreement_reference as ar

    write = terminalreporter.write_line
    stored, stale, missing, refresh = (stats.get(k, 0) for k in ("stored", "stale", "missing", "refresh"))
    rel = ar.STORE.relative_to(ROOT)
    if refresh:
        ar.write_store(_AGREEMENT["solved"], _AGREEMENT["samples"], ar.EXAMPLES)
        write(f"agreement reference: {refresh} solved live, store {rel} rewritten "
              f"({len(_AGREEMENT['solved'])} entries, source hash {ar.current_hash()})")
        return
    write(f"agreement reference: {stored} from {rel}, {stale + missing} solved live"
          + (f" ({stale} because the store is stale: source hash {ar.current_hash()}, stored "
             f"{ar.store().get('source_hash')}; refresh: python benchmarks/refresh_reference.py)" if stale else "")
          + (f" ({missing} not in the store: new or changed cases, or KICKBACK_BATCH_EXAMPLES above "
             f"the stored {ar.store().get('examples')})" if missing else ""))
