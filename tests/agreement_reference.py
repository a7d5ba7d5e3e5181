"""The detailed engine's reference for the batch-vs-detailed agreement tests, and its store.

The reference of a case is the detailed engine (kickback's Radau solve) at rtol 1e-9, its
regularising resistance lowered to 1e-9 of the voltage scale and the leakage of an off switch
1e4-fold (see :func:`detailed`), boiled down to the numbers ``tests/test_batch.py`` compares
against: every figure, and the detailed engine's own resolution where it interpolates (the change
to the next sample at a sampled maximum, the sample intervals around a conduction threshold).

Those numbers cost 0.1–2 s a case, about 90 % of the suite's time. They are stored in
:data:`STORE`, keyed by a hash of the case's exact parameters, with a hash of the source the
reference depends on (:func:`source_hash`: the detailed engine and every kickback module it
imports, found by reading their import statements, this file, and the numpy/scipy versions; the
batch engine's files are not among them, so a batch change keeps the store). A case whose key is
in a store of the current source hash takes the stored numbers; any other case is solved live,
as before, and counted: the test run's summary says how many were solved live and why.

``KICKBACK_REFRESH_REFERENCE=1`` solves every case live and rewrites the store at the end of the
session (``python benchmarks/refresh_reference.py`` runs that job over the agreement tests).
"""

from __future__ import annotations

import ast
import dataclasses
import hashlib
import json
import math
import os
import platform
from pathlib import Path

import numpy as np
import pytest
import scipy

import kickback.case as kcase
import kickback.circuit as kcircuit
from kickback.case import Case
from kickback.circuit import Circuit
from kickback.engine.detailed import integrate
from kickback.errors import KickbackError
from kickback.figures import chain_signals, compute_figures

ROOT = Path(__file__).resolve().parent.parent
STORE = Path(__file__).resolve().parent / "reference" / "agreement.json"
REFRESH = os.environ.get("KICKBACK_REFRESH_REFERENCE", "") not in ("", "0")
#: examples per property for the agreement tests: 150 per clamp family and node kind, so 300 per
#: clamp topology (the stored count; the reference costs 0.1–2 s each where solved live).
#: KICKBACK_BATCH_EXAMPLES=10 for a quick local run; above the stored count the extra examples are
#: solved live (=300 for 600 per topology, about 20 min: the long run)
EXAMPLES = int(os.environ.get("KICKBACK_BATCH_EXAMPLES", "150"))

#: the modules the reference calls; the hash covers them and everything they import
ROOTS = ("kickback.circuit", "kickback.engine.detailed", "kickback.figures", "kickback.case", "kickback.errors")
#: a stored case text is kept for keys below this (about 1 in 64): the live check re-solves a few
SAMPLE_BELOW = "04"

#: per process: references taken from the store, solved live (by reason), and the entries solved live
STATS = {"stored": 0, "stale": 0, "missing": 0, "refresh": 0}
SOLVED: dict[str, dict] = {}
SAMPLES: dict[str, str] = {}


# ------------------------------------------------------------------------------- the reference
def detailed(case: Case):
    """(figures, circuit, waveforms) of the detailed engine at rtol 1e-9, regularisation 1e-9."""
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(kcircuit, "REGULARIZATION", 1e-9)
        c = Circuit(case)
    # its 1e-12 leakage of an off switch (circuit.g_leak) would move the time the current takes
    # to reach 1e-9·i0 on a slow tail by up to 1e-3 relative: lowered 1e4-fold for the reference
    c.g_leak *= 1e-4
    with pytest.MonkeyPatch.context() as mp:
        # the reference is scipy's Radau whatever the environment asks (kickback/engine/kstep.py,
        # the compiled stepping, is not part of it: EXCLUDED)
        mp.setenv("KICKBACK_KERNEL", "0")
        w = integrate(c, rtol=1e-9, samples_per_step=8)
    return compute_figures(w), c, w


def sample_step(x) -> float:
    """How far the detailed engine's sampled maximum of |x| can sit below the true one: the
    larger change of x to a neighbouring sample at its sampled maximum."""
    x = np.abs(np.asarray(x, float))
    if x.size < 2:
        return 0.0
    k = int(np.argmax(x))
    return float(max(abs(x[k] - x[max(k - 1, 0)]), abs(x[min(k + 1, x.size - 1)] - x[k])))


def crossings(w, n, level) -> tuple[float, float]:
    """The detailed engine's resolution where chain n's current crosses ``level`` in magnitude:
    (total length of the sample intervals holding a crossing [s], largest change of the chain
    voltage over one of them [V]). Its figures interpolate linearly there; a conduction that ends
    at a kink (the current reaching zero) is resolved only to that interval."""
    ic = np.abs(w.i_chains[n])
    k = np.nonzero((ic[:-1] > level) != (ic[1:] > level))[0]
    if k.size == 0:
        return 0.0, 0.0
    dt = float(np.sum(w.t[k + 1] - w.t[k]))
    return dt, float(np.max(np.abs(w.v[k + 1] - w.v[k])))


FIGURES = ("to_10_percent_s", "to_1_percent_s", "to_zero_s", "release_s", "end_time_s", "resistance_energy_J",
           "crossover_energy_J", "avalanche_energy_J", "body_diode_energy_J", "supply_energy_J",
           "left_in_capacitors_J", "peak_voltage_V", "peak_time_s", "initial_current_A")
CLAMP_FIGURES = ("energy_J", "peak_current_A", "conduction_s")
ELEMENT_FIGURES = ("energy_J", "peak_voltage_V", "peak_current_A", "peak_power_W", "standoff_voltage_V")


def _num(x):
    return None if x is None else float(x)


def compute(case: Case) -> dict:
    """The reference of ``case`` solved live: a JSON-ready dict (``{"error": text}`` where the
    detailed engine stated it could not finish)."""
    try:
        fd, c, w = detailed(case)
    except KickbackError as exc:
        return {"error": str(exc)}
    ref = {name: _num(getattr(fd, name)) for name in FIGURES}
    ref["e0"] = float(fd.stored_energy_J + fd.initial_capacitor_energy_J)
    ref["vscale"] = float(max(c.v_scale, abs(fd.peak_voltage_V)))
    # its t = 0 sample: any node voltage in a flat balance (the falling channel current capped)
    ref["v0"] = float(abs(float(w.v[0]) - c.on.node_voltage) + abs(c.on.node_voltage))
    clamps = []
    for k, cd in enumerate(fd.clamps):
        dt_x, dv_x = (0.0, 0.0)
        if k in c.active_chains:
            dt_x, dv_x = crossings(w, c.active_chains.index(k), 1e-6 * fd.initial_current_A)
        ic, _vch, vel = chain_signals(w, k)
        elements = []
        for j, ed in enumerate(cd.elements):
            e = {name: _num(getattr(ed, name)) for name in ELEMENT_FIGURES}
            e["type"] = ed.type
            e["power_step"] = sample_step(np.clip(vel[j] * ic, 0.0, None))
            elements.append(e)
        cl = {name: _num(getattr(cd, name)) for name in CLAMP_FIGURES}
        cl.update(current_step=sample_step(ic), crossing_s=dt_x, crossing_V=dv_x, elements=elements)
        clamps.append(cl)
    ref["clamps"] = clamps
    return decode(json.loads(json.dumps(encode(ref))))  # exactly what the store gives back


HEAD = FIGURES + ("e0", "vscale", "v0")
CLAMP = CLAMP_FIGURES + ("current_step", "crossing_s", "crossing_V")
ELEMENT = ELEMENT_FIGURES + ("type", "power_step")


def encode(ref: dict):
    """The store's compact form of a reference: lists in the field order above (floats by repr)."""
    if "error" in ref:
        return ref
    return [*(ref[n] for n in HEAD),
            [[*(cl[n] for n in CLAMP), [[e[n] for n in ELEMENT] for e in cl["elements"]]] for cl in ref["clamps"]]]


def decode(entry) -> dict:
    if isinstance(entry, dict):
        return entry
    ref = dict(zip(HEAD, entry[: len(HEAD)], strict=True))
    ref["clamps"] = [{**dict(zip(CLAMP, cl[:-1], strict=True)),
                      "elements": [dict(zip(ELEMENT, e, strict=True)) for e in cl[-1]]} for cl in entry[len(HEAD)]]
    return ref


# ------------------------------------------------------------------------------------ keys, hash
def case_text(case: Case) -> str:
    """The case's exact parameters as text (its file name and file text left out)."""
    return repr(dataclasses.replace(case, source=None, text=""))


def case_key(case: Case) -> str:
    return hashlib.sha256(case_text(case).encode()).hexdigest()[:24]


def case_from_text(text: str) -> Case:
    """The case back from :func:`case_text` (the dataclasses of kickback.case by name)."""
    names = {n: getattr(kcase, n) for n in dir(kcase) if n[:1].isupper() and isinstance(getattr(kcase, n), type)}
    return eval(text, {"__builtins__": {}, "inf": math.inf, "nan": math.nan}, names)  # noqa: S307 (our own file)


def _module_file(name: str) -> Path | None:
    p = ROOT.joinpath(*name.split("."))
    for f in (p / "__init__.py", p.with_suffix(".py")):
        if f.is_file():
            return f
    return None


def _imports(name: str, path: Path) -> set[str]:
    """kickback modules imported anywhere in ``path`` (function-level imports included)."""
    pkg = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            mod = node.module or ""
            if node.level:
                base = pkg.split(".")[: len(pkg.split(".")) - node.level + 1]
                mod = ".".join(base + ([mod] if mod else []))
            found.add(mod)
            found.update(f"{mod}.{a.name}" for a in node.names)
    out = set()
    for m in found:
        parts = m.split(".")
        # every enclosing package but kickback itself (its __init__ only re-exports, lazily)
        out.update(".".join(parts[:i]) for i in range(2, len(parts) + 1) if parts[0] == "kickback")
    return {m for m in out if _module_file(m)}


#: modules the reference never runs: the detailed engine imports the compiled stepping only when
#: ``KICKBACK_KERNEL`` asks for it, which :func:`detailed` sets to 0
EXCLUDED = frozenset({"kickback.engine.kstep"})


def reference_modules() -> list[str]:
    """The kickback modules the reference depends on: :data:`ROOTS` and all they import."""
    seen: set[str] = set()
    todo = list(ROOTS)
    while todo:
        m = todo.pop()
        if m not in seen and m not in EXCLUDED:
            seen.add(m)
            todo.extend(_imports(m, _module_file(m)))
    return sorted(seen)


def source_hash() -> str:
    """sha256 over the reference's source files, this file, and the numeric libraries' versions."""
    h = hashlib.sha256()
    files = [_module_file(m) for m in reference_modules()] + [Path(__file__).resolve()]
    for f in files:
        h.update(str(f.relative_to(ROOT)).encode() + b"\0" + f.read_bytes() + b"\0")
    h.update(f"numpy {np.__version__} scipy {scipy.__version__} {platform.machine()}".encode())
    return h.hexdigest()[:24]


# --------------------------------------------------------------------------------------- store
_store: dict | None = None
_hash: str | None = None


def store() -> dict:
    """The stored references (``{}`` if there is no store file)."""
    global _store
    if _store is None:
        _store = json.loads(STORE.read_text(encoding="utf-8")) if STORE.is_file() else {}
    return _store


def current_hash() -> str:
    global _hash
    if _hash is None:
        _hash = source_hash()
    return _hash


def stale() -> bool:
    return store().get("source_hash") != current_hash()


def reference(case: Case) -> dict:
    """The reference of ``case``: stored if the store is current and holds it, else solved live."""
    key = case_key(case)
    if REFRESH:
        reason = "refresh"
    elif stale():
        reason = "stale"
    elif key in store().get("entries", {}):
        STATS["stored"] += 1
        return decode(store()["entries"][key])
    else:
        reason = "missing"
    ref = compute(case)
    STATS[reason] += 1
    if REFRESH:
        SOLVED[key] = encode(ref)
        if key < SAMPLE_BELOW:
            SAMPLES[key] = case_text(case)
    return ref


def write_store(entries: dict, samples: dict, examples: int) -> None:
    """Write the store: one entry a line (:func:`encode`), keys sorted, so a refresh diffs line by line."""
    STORE.parent.mkdir(parents=True, exist_ok=True)
    head = {"source_hash": current_hash(), "examples": examples, "modules": reference_modules()}
    lines = ["{" + ", ".join(f"{json.dumps(k)}: {json.dumps(v)}" for k, v in head.items()) + ","]
    lines.append('"samples": ' + json.dumps(dict(sorted(samples.items())), indent=0) + ",")
    lines.append('"entries": {')
    body = [f"{json.dumps(k)}: {json.dumps(v, separators=(',', ':'))}" for k, v in sorted(entries.items())]
    lines.append(",\n".join(body))
    lines.append("}}")
    tmp = STORE.with_suffix(".tmp")
    tmp.write_text("\n".join(lines) + "\n", encoding="utf-8")
    tmp.replace(STORE)
