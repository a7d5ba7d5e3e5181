"""The package's structure: every exception under ``KickbackError``, small modules, no import cycles.

These hold rules of the design card (DESIGN.md §8: "one package base (KickbackError)", modules
small; issue 17: no module over 450 lines, no import cycles, lazy imports that only hold a cycle
apart count as the cycle). They are project rules, no outside source. Each rule's checker is also
run on a small made-up input it must reject, so that a checker that finds nothing cannot pass.
"""

from __future__ import annotations

import ast
import importlib
import inspect
import pkgutil
import types
from pathlib import Path

import kickback
from kickback.errors import KickbackError

PACKAGE = Path(kickback.__file__).parent
MAX_LINES = 450

#: modules over MAX_LINES, each with the reason it is still allowed (path relative to the package)
KNOWN_LONG = {
    "engine/detailed.py": "the detailed engine's driver (phases, pins, floating node, events); the engine "
                          "interface of issue 17 is being built on another branch and splits it",
    "engine/pwl_roots.py": "the batch engine's first-event scan and refiner; the segment mathematics move to "
                           "a folder of their own under the batch engine (issue 17, another branch)",
    "engine/batch.py": "the batch engine's segment loop; reworked with the engine interface (issue 17, "
                       "another branch)",
}

#: cycles that exist only through imports inside functions (lazy imports that hold them apart), each
#: a set of modules with its reason; all in kickback/engine and kickback/outputs, which other work on
#: issue 17 is reshaping
KNOWN_LAZY_CYCLES = {
    frozenset({"kickback.engine.detailed", "kickback.engine.sampling", "kickback.engine.linring"}):
        "the detailed engine's types (Waveforms, Phase) live in its driver module, which calls "
        "sampling.sample_run and linring.try_linear_ring; sampling and linring import those types back",
    frozenset({"kickback.engine.pwl_roots", "kickback.engine.pwl_scalar_roots"}):
        "pwl_scalar_roots borrows pwl_roots' private _Pairs and _refine, while pwl_roots calls its "
        "closed-form roots",
    frozenset({"kickback.engine.averaged", "kickback.engine.periodic"}):
        "averaged borrows periodic.scales while periodic starts its shooting from averaged_guess",
    frozenset({"kickback.outputs.report", "kickback.outputs.reportstudies"}):
        "reportstudies borrows report's Section and figure_html while report places its sections",
}


# --------------------------------------------------------------------------- the package's modules
def _module_files() -> dict[str, tuple[Path, bool]]:
    """Module name → (file, is a package's __init__) for every .py file of the package."""
    out = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
        is_pkg = parts[-1] == "__init__"
        out[".".join(parts[:-1] if is_pkg else parts)] = (path, is_pkg)
    return out


MODULES = _module_files()


def test_the_walk_finds_the_package():
    assert {"kickback", "kickback.cli", "kickback.errors", "kickback.engine.pwl", "kickback.studies.sweep",
            "kickback.outputs.report", "kickback.models.diode"} <= set(MODULES)
    walked = {m.name for m in pkgutil.walk_packages(kickback.__path__, "kickback.")} | {"kickback"}
    assert walked == set(MODULES)


# --------------------------------------------------------------------------- exceptions
def _exception_classes(module: types.ModuleType) -> list[type]:
    """Exception classes defined in ``module`` (not imported into it); warnings are not errors."""
    return [obj for obj in vars(module).values()
            if inspect.isclass(obj) and issubclass(obj, BaseException) and not issubclass(obj, Warning)
            and obj.__module__ == module.__name__]


def _outside_the_base(modules) -> list[str]:
    return [f"{cls.__module__}.{cls.__qualname__}" for m in modules for cls in _exception_classes(m)
            if not issubclass(cls, KickbackError)]


def test_the_exception_walk_catches_a_stray_exception():
    fake = types.ModuleType("kickback.fake")
    fake.Stray = type("Stray", (ValueError,), {"__module__": "kickback.fake"})
    fake.Fine = type("Fine", (KickbackError, ValueError), {"__module__": "kickback.fake"})
    fake.Borrowed = ValueError  # defined elsewhere: not this module's
    assert _outside_the_base([fake]) == ["kickback.fake.Stray"]


def test_every_exception_of_the_package_is_a_kickback_error():
    modules = [importlib.import_module(name) for name in MODULES]
    found = {cls.__name__ for m in modules for cls in _exception_classes(m)}
    # the walk reaches the exceptions defined outside errors.py too
    assert {"CaseError", "SolverError", "OutputError", "UnitError", "TraceError", "FitError",
            "IntegratorArgumentError", "SegmentError"} <= found
    assert _outside_the_base(modules) == []


def test_a_segment_failure_is_a_kickback_error_and_still_arithmetic():
    from kickback.engine.pwl import SegmentError

    # kept an ArithmeticError: callers that catch the builtin still do
    assert issubclass(SegmentError, KickbackError) and issubclass(SegmentError, ArithmeticError)


# --------------------------------------------------------------------------- module sizes
def _long_modules(files, limit: int = MAX_LINES) -> dict[str, int]:
    out = {}
    for path in files:
        n = len(Path(path).read_text(encoding="utf-8").splitlines())
        if n > limit:
            out[Path(path).relative_to(PACKAGE).as_posix()] = n
    return out


def test_the_size_check_sees_a_long_file():
    long = PACKAGE / "cli.py"
    assert _long_modules([long], limit=5) == {"cli.py": len(long.read_text(encoding="utf-8").splitlines())}


def test_no_module_over_450_lines():
    long = _long_modules(path for path, _ in MODULES.values())
    unknown = {name: n for name, n in long.items() if name not in KNOWN_LONG}
    assert not unknown, (f"modules over {MAX_LINES} lines: {unknown} (split them along a natural seam, as "
                         "DEVELOPERS.md's map shows)")


# --------------------------------------------------------------------------- import cycles
def _under_type_checking(node: ast.AST) -> bool:
    return isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test)


def _imported_names(tree: ast.Module, name: str, is_pkg: bool, *, lazy: bool) -> list[str]:
    """What a module imports at module level (``lazy=False``: what runs on import, class bodies
    and try/if blocks included, ``if TYPE_CHECKING:`` not) or inside functions (``lazy=True``).
    ``from a.b import c`` names both ``a.b`` and ``a.b.c`` (c may be a module)."""
    package = name if is_pkg else name.rpartition(".")[0]
    out: list[str] = []

    def visit(body, top: bool) -> None:
        for node in body:
            if _under_type_checking(node):
                continue
            if isinstance(node, ast.Import | ast.ImportFrom) and top != lazy:
                if isinstance(node, ast.Import):
                    out.extend(alias.name for alias in node.names)
                else:
                    base = node.module or ""
                    if node.level:
                        parts = package.split(".")
                        parts = parts[:len(parts) - node.level + 1]
                        base = ".".join(parts + ([node.module] if node.module else []))
                    out.append(base)
                    out.extend(f"{base}.{alias.name}" for alias in node.names)
            inner = top and not isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef | ast.Lambda)
            for field in ("body", "orelse", "finalbody", "handlers"):
                sub = getattr(node, field, None)
                if isinstance(sub, list):
                    visit(sub, inner)

    visit(tree.body, True)
    return out


def import_graph(*, lazy: bool = False) -> dict[str, set[str]]:
    """Module → the package's modules it imports (``lazy``: the imports inside functions only).

    Importing ``a.b.c`` also runs the package ``a.b``'s ``__init__``: that is an edge too,
    except to the importing module's own packages (already being imported when it runs).
    """
    graph = {}
    for name, (path, is_pkg) in MODULES.items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        targets = set()
        for target in _imported_names(tree, name, is_pkg, lazy=lazy):
            parts = target.split(".")
            for k in range(2, len(parts) + 1):
                step = ".".join(parts[:k])
                is_last = k == len(parts)
                if step in MODULES and step != name and not name.startswith(step + ".") \
                        and (is_last or MODULES[step][1]):
                    targets.add(step)
        graph[name] = targets
    return graph


def cycles(graph: dict[str, set[str]]) -> list[frozenset[str]]:
    """The strongly connected components of more than one module (Tarjan's algorithm, iterative)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    out = []
    counter = 0
    for root in sorted(graph):
        if root in index:
            continue
        work = [(root, iter(sorted(graph[root])))]
        index[root] = low[root] = counter
        counter += 1
        stack.append(root)
        on_stack.add(root)
        while work:
            v, children = work[-1]
            for w in children:
                if w not in index:
                    index[w] = low[w] = counter
                    counter += 1
                    stack.append(w)
                    on_stack.add(w)
                    work.append((w, iter(sorted(graph.get(w, ())))))
                    break
                if w in on_stack:
                    low[v] = min(low[v], index[w])
            else:
                work.pop()
                if work:
                    low[work[-1][0]] = min(low[work[-1][0]], low[v])
                if low[v] == index[v]:
                    comp = set()
                    while True:
                        w = stack.pop()
                        on_stack.discard(w)
                        comp.add(w)
                        if w == v:
                            break
                    if len(comp) > 1:
                        out.append(frozenset(comp))
    return out


def test_the_cycle_finder_finds_cycles():
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a", "d"}, "d": set(), "e": {"f"}, "f": {"e"}, "g": {"g"}}
    assert sorted(map(sorted, cycles(graph))) == [["a", "b", "c"], ["e", "f"]]


def test_the_import_graph_reads_the_package():
    graph = import_graph()
    assert "kickback.errors" in graph["kickback.caseio"]
    assert "kickback.engine" in graph["kickback.simulation"] or "kickback.engine.detailed" in graph[
        "kickback.simulation"]
    assert "kickback.engine.detailed" in graph["kickback.engine"]  # the package's __init__ imports it
    assert "kickback.engine" not in graph["kickback.engine.pwl_build"]  # its own package
    assert "kickback.engine.pwl_roots" in import_graph(lazy=True)["kickback.engine.pwl_scalar_roots"]


def test_no_import_cycle_at_module_level():
    found = cycles(import_graph())
    assert not found, f"import cycles: {[sorted(c) for c in found]}"


def test_no_cycle_held_apart_by_lazy_imports():
    lazy = import_graph(lazy=True)
    graph = {name: targets | lazy[name] for name, targets in import_graph().items()}
    unknown = [sorted(c) for c in cycles(graph) if not any(c <= known for known in KNOWN_LAZY_CYCLES)]
    assert not unknown, (f"import cycles (a lazy import that only holds a cycle apart counts as the cycle): "
                         f"{unknown}")


# --------------------------------------------------------------------------- conventions defined once
#: the shared conventions (issue 17: "one place for conventions"); kickback/conventions.py holds them
CONVENTIONS = ("ZERO_FRACTION", "RING_END_FRACTION", "CONDUCTION_FRACTION", "ON_STATE_FRACTION", "LEAKAGE_MARGIN",
               "AVALANCHE_NEGLIGIBLE")


def _defines(source: str) -> set[str]:
    """Names of :data:`CONVENTIONS` a module's source assigns at module level (an import does not count)."""
    out = set()
    for node in ast.parse(source).body:
        targets = node.targets if isinstance(node, ast.Assign) else \
            [node.target] if isinstance(node, ast.AnnAssign) else []
        out |= {t.id for t in targets if isinstance(t, ast.Name) and t.id in CONVENTIONS}
    return out


def test_the_convention_scan_sees_a_second_definition():
    assert _defines("from kickback.conventions import ZERO_FRACTION\nZERO_FRACTION = 1e-9\nx = 1\n") \
        == {"ZERO_FRACTION"}
    assert _defines("from kickback.conventions import ZERO_FRACTION\n") == set()


def test_conventions_are_defined_once():
    """Both engines, the figures, the rating rules and the audit import the thresholds from
    kickback/conventions.py; no other module defines its own copy."""
    where = {name: _defines(path.read_text(encoding="utf-8")) for name, (path, _) in MODULES.items()}
    assert where["kickback.conventions"] == set(CONVENTIONS)
    stray = {name: found for name, found in where.items() if found and name != "kickback.conventions"}
    assert not stray, f"conventions defined outside kickback/conventions.py: {stray}"


# --------------------------------------------------------------------------- no private names across modules
#: (importing module, imported module, name) of private names still imported across modules, each group
#: with its reason (issue 17: "no private names imported across modules"); drop an entry once it is gone
KNOWN_PRIVATE = {
    ("kickback.coilstate", "kickback.models.coil", "_SERIES_LIMIT"): "the saturating coil's series cut-off",
    ("kickback.engine.linedge", "kickback.engine.linphase", "_XI01"): "quadrature nodes of the affine phases",
    ("kickback.engine.linedge", "kickback.engine.linphase", "_panels"): "quadrature panels of the affine phases",
    ("kickback.engine.linphase", "kickback.engine.linsolution", "_XI01"): "quadrature nodes of the affine phases",
    **{("kickback.engine.pwl_scalar_roots", "kickback.engine.pwl_roots", n): "the batch engine's segment "
       "mathematics (issue 17 moves them to a folder of their own)" for n in ("_Pairs", "_refine")},
    **{("kickback.engine.pwl_allroots", "kickback.engine.pwl_roots", n): "the batch engine's segment "
       "mathematics (issue 17)" for n in ("_bilinear", "_extremum", "_never", "_Pairs", "_refine", "_xis")},
    ("kickback.engine.pwl_roots", "kickback.engine.pwl_refine", "_refine"): "the batch engine's segment "
                                                                           "mathematics (issue 17)",
}


def private_imports(source: str, module: str) -> set[tuple[str, str, str]]:
    """(module, imported module, name) for every ``from kickback… import _name`` in ``source``
    (module level or inside a function; dunder names do not count)."""
    out = set()
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.split(".")[0] == "kickback":
            out |= {(module, node.module, a.name) for a in node.names
                    if a.name.startswith("_") and not a.name.startswith("__")}
    return out


def test_the_private_import_scan_sees_one():
    src = "from kickback.models.coil import _x, y\ndef f():\n    from kickback.units import _z\n"
    assert private_imports(src, "m") == {("m", "kickback.models.coil", "_x"), ("m", "kickback.units", "_z")}
    assert private_imports("from kickback import __version__\nfrom os import _exit\n", "m") == set()


def test_no_private_name_is_imported_across_modules():
    found = set()
    for name, (path, _) in MODULES.items():
        found |= private_imports(path.read_text(encoding="utf-8"), name)
    new = sorted(found - set(KNOWN_PRIVATE))
    assert not new, f"private names imported across modules (make them public or move them): {new}"
    gone = sorted(set(KNOWN_PRIVATE) - found)
    assert not gone, f"entries of KNOWN_PRIVATE no longer imported (drop them): {gone}"
