"""The stored detailed-engine reference of the agreement tests (tests/agreement_reference.py).

The stored numbers must be exactly what the live reference gives: a few stored cases (those
whose case text the store keeps) are solved live here and compared to 1e-12 relative — the
reference written in these tests is the detailed engine itself, solved the same way as in
tests/test_batch.py. Where the store is stale (the detailed engine changed since the last
refresh) the stored numbers are not used by any test, and this checks that the live reference is
what the agreement tests then get.
"""

from __future__ import annotations

import math

import agreement_reference as ar
import pytest


def _same(stored, live, path="reference", rtol=1e-12):
    """Every number of ``stored`` within ``rtol`` of ``live``, every other value equal."""
    if isinstance(live, dict):
        assert stored.keys() == live.keys(), f"{path}: keys {sorted(stored)} against {sorted(live)}"
        for k in live:
            _same(stored[k], live[k], f"{path}.{k}", rtol)
    elif isinstance(live, list):
        assert len(stored) == len(live), f"{path}: {len(stored)} items against {len(live)}"
        for n, (a, b) in enumerate(zip(stored, live, strict=True)):
            _same(a, b, f"{path}[{n}]", rtol)
    elif isinstance(live, float) and isinstance(stored, float) and math.isfinite(live):
        assert abs(stored - live) <= rtol * abs(live), f"{path}: stored {stored!r}, live {live!r}"
    else:
        assert stored == live, f"{path}: stored {stored!r}, live {live!r}"


def _samples(n=3):
    samples = ar.store().get("samples", {})
    return sorted(samples.items())[:n]


def test_store_is_there_and_keeps_case_texts():
    s = ar.store()
    assert s.get("entries"), f"no stored references in {ar.STORE}"
    assert s.get("samples"), "the store keeps no case texts to re-solve"
    assert set(s["samples"]) <= set(s["entries"]), "a kept case text without its entry"


@pytest.mark.parametrize("n", range(3))
def test_stored_entry_is_the_live_reference(n):
    """A stored case solved live: its key from its text, and every stored number to 1e-12."""
    picked = _samples()
    assert n < len(picked), f"the store keeps {len(picked)} case texts, fewer than 3"
    key, text = picked[n]
    case = ar.case_from_text(text)
    assert ar.case_key(case) == key, "the case text does not give its key back"
    live = ar.compute(case)
    if ar.stale():
        # the store is not used: the agreement tests get the live reference
        _same(ar.reference(case), live, rtol=0.0)
    else:
        _same(ar.decode(ar.store()["entries"][key]), live)


def test_source_hash_covers_the_detailed_engine_not_the_batch_engine():
    mods = ar.reference_modules()
    for m in ("kickback.engine.detailed", "kickback.circuit", "kickback.figures", "kickback.models.diode",
              "kickback.chain"):
        assert m in mods, f"{m} is not in the reference's source hash"
    assert not [m for m in mods if m.startswith(("kickback.engine.batch", "kickback.engine.pwl"))], mods
    assert ar.source_hash() == ar.source_hash(), "the source hash is not stable"


def test_encoding_round_trips():
    ref = {**{n: float(k) for k, n in enumerate(ar.HEAD)}, "release_s": None,
           "clamps": [{**{n: 0.5 for n in ar.CLAMP},
                       "elements": [{**{n: 1.5 for n in ar.ELEMENT}, "type": "zener"}]}]}
    assert ar.decode(ar.encode(ref)) == ref
    assert ar.decode(ar.encode({"error": "why"})) == {"error": "why"}
