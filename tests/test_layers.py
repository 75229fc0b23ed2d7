"""The packages' layers point one way, with no cycles, and Prefect stays in ``pqflow.pipeline``.

Every module's imports are read from its source (``ast``, including imports inside functions,
which are imports all the same), so the check needs no import of the code. A package may import
its own modules and any package of a LOWER layer, never one above it. The order (lowest first;
DEVELOPERS.md says what each owns):

    errors, config, storage, market, models, measure, calibration, sensitivities, simulation,
    validation, liabilities, report, jobs, pipeline (Prefect only), cli_errors, cli

The command line is the outermost shell: ``pqflow run`` starts the Prefect flow (imported
inside the command, so that commands without a flow never import Prefect), and nothing below
it imports the command line.

(Layering rule: common practice; the acyclic-dependencies principle, R. C. Martin, *Agile
Software Development: Principles, Patterns, and Practices*, 2002, from memory.)
"""

from __future__ import annotations

import ast
from collections import defaultdict
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
SRC = REPO / "src" / "pqflow"
PIPELINE = REPO / "pipeline"

#: Lowest first. ``pqflow`` itself (``__init__.py``: the version and the caution) is below all.
LAYERS = (
    "pqflow",
    "errors",
    "config",
    "storage",
    "market",
    "models",
    "measure",
    "calibration",
    "sensitivities",
    "simulation",
    "validation",
    "liabilities",
    "report",
    "jobs",
    "pipeline",
    "cli_errors",
    "cli",
)
RANK = {name: i for i, name in enumerate(LAYERS)}

#: Edges allowed for now, each with the reason and the change that removes it. A listed edge that
#: no longer exists fails the test, so that the list only shrinks.
KNOWN: dict[tuple[str, str], str] = {}


def _modules() -> list[tuple[str, str, Path]]:
    """``(package, where, path)`` for every module: ``where`` relative to ``src/pqflow`` (or
    ``pipeline/...`` for the flows)."""
    out = []
    for path in sorted(SRC.rglob("*.py")):
        rel = path.relative_to(SRC)
        package = rel.parts[0] if len(rel.parts) > 1 else ("pqflow" if rel.stem == "__init__" else rel.stem)
        out.append((package, rel.as_posix(), path))
    for path in sorted(PIPELINE.rglob("*.py")):
        out.append(("pipeline", "pipeline/" + path.relative_to(PIPELINE).as_posix(), path))
    return out


def _imports(path: Path) -> list[tuple[int, str]]:
    """Every imported module name (absolute; relative imports resolved to their package)."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(node.lineno, a.name) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                raise AssertionError(f"{path}:{node.lineno}: relative import; write the absolute pqflow.* name")
            assert node.module is not None
            out.append((node.lineno, node.module))
            # ``from pqflow import cli`` imports the module pqflow.cli
            if node.module == "pqflow":
                out += [(node.lineno, f"pqflow.{a.name}") for a in node.names if (SRC / f"{a.name}").exists()
                        or (SRC / f"{a.name}.py").exists()]
    return out


def _target(module: str) -> str | None:
    """The layer an imported ``pqflow`` module belongs to (``None``: not pqflow)."""
    parts = module.split(".")
    if parts[0] != "pqflow":
        return None
    return parts[1] if len(parts) > 1 else "pqflow"


def _edges() -> list[tuple[str, str, str, int, str]]:
    """``(from package, to package, where, line, module)`` for every import of another package."""
    out = []
    for package, where, path in _modules():
        for line, module in _imports(path):
            target = _target(module)
            if target is not None and target != package:
                out.append((package, target, where, line, module))
    return out


def test_every_package_has_a_layer():
    packages = {p for p, _, _ in _modules()} | {t for _, t, _, _, _ in _edges()}
    assert packages <= set(RANK), f"give these a place in LAYERS: {sorted(packages - set(RANK))}"


def test_no_package_imports_a_higher_layer():
    upward, used = [], set()
    for src, dst, where, line, module in _edges():
        if RANK[dst] > RANK[src]:
            if (where, module) in KNOWN:
                used.add((where, module))
                continue
            upward.append(f"{where}:{line}: {src} -> {dst} ({module})")
    assert not upward, "imports of a higher layer:\n" + "\n".join(upward)
    stale = set(KNOWN) - used
    assert not stale, f"these allowed edges are gone; remove them from KNOWN: {sorted(stale)}"


def test_no_package_cycles():
    graph: dict[str, set[str]] = defaultdict(set)
    where: dict[tuple[str, str], str] = {}
    for src, dst, at, line, module in _edges():
        if (at, module) in KNOWN:
            continue
        graph[src].add(dst)
        where.setdefault((src, dst), f"{at}:{line} ({module})")
    # Tarjan's strongly connected components (Tarjan, SIAM J. Computing 1 (1972)); a component
    # of more than one package is a cycle.
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    cycles: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in sorted(graph[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                cycles.append(sorted(comp))

    for v in sorted(set(graph) | {w for ws in graph.values() for w in ws}):
        if v not in index:
            visit(v)
    lines = [f"{a} -> {b}: {where[(a, b)]}" for comp in cycles for a in comp for b in sorted(graph[a]) if b in comp]
    assert not cycles, "package cycles:\n" + "\n".join(lines)


def test_the_check_finds_an_upward_import_and_a_cycle(tmp_path):
    # The reader sees imports inside functions, and the rank comparison flags them.
    module = tmp_path / "m.py"
    module.write_text("def f():\n    from pqflow.jobs.steps import plan_run\n    import prefect\n", encoding="utf-8")
    found = _imports(module)
    assert found == [(2, "pqflow.jobs.steps"), (3, "prefect")]
    assert RANK[_target(found[0][1])] > RANK["liabilities"]


def test_prefect_is_imported_only_in_pqflow_pipeline():
    outside = [f"{where}:{line}: {module}" for package, where, path in _modules() if package != "pipeline"
               for line, module in _imports(path) if module.split(".")[0] in ("prefect", "prefect_dask")]
    assert not outside, "Prefect outside pqflow.pipeline:\n" + "\n".join(outside)


def test_nothing_imports_a_top_level_module_named_pipeline():
    files = [*SRC.rglob("*.py"), *PIPELINE.rglob("*.py"), *(REPO / "tests").rglob("*.py"),
             *(REPO / "benchmarks").rglob("*.py")]
    bad = [f"{p.relative_to(REPO)}:{line}: {module}" for p in files for line, module in _imports(p)
           if module.split(".")[0] == "pipeline"]
    assert not bad, "import the flows as pqflow.pipeline:\n" + "\n".join(bad)
