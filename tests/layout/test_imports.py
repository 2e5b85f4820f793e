"""The package's shape: no import circles between modules, nothing private used across
packages, nothing loose at the top level. Read from the source with `ast` (nothing is imported),
so a new circle or a reach into another package's internals fails here first."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2] / "sweeper"


def module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


MODULES = {module_name(p): p for p in sorted(ROOT.rglob("*.py"))}


def package_of(module: str) -> str:
    """The package a module belongs to: 'sweeper.run.runner' -> 'sweeper.run'."""
    path = MODULES[module]
    return module if path.name == "__init__.py" else module.rsplit(".", 1)[0]


def resolve(module: str, node: ast.ImportFrom) -> str:
    if node.level == 0:
        return node.module or ""
    base = package_of(module).split(".")
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def imports_of(module: str) -> list[tuple[str, list[str], int]]:
    """(imported module, names taken from it, line) for every import in a module, at any depth
    (imports inside functions count: a lazy import is still a dependency)."""
    tree = ast.parse(MODULES[module].read_text(encoding="utf-8"))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for alias in node.names:
                found.append((alias.name, [], node.lineno))
        elif isinstance(node, ast.ImportFrom):
            target = resolve(module, node)
            names = [a.name for a in node.names]
            # `from sweeper.pkg import mod` imports the module sweeper.pkg.mod
            for name in names:
                if f"{target}.{name}" in MODULES:
                    found.append((f"{target}.{name}", [], node.lineno))
            found.append((target, [n for n in names if f"{target}.{n}" not in MODULES], node.lineno))
    return [(t, n, line) for t, n, line in found if t in MODULES]


GRAPH = {module: sorted({target for target, _, _ in imports_of(module)} - {module}) for module in MODULES}


def cycles(graph: dict[str, list[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    found: list[list[str]] = []
    counter = [0]

    def visit(v: str) -> None:
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on_stack.add(v)
        for w in graph[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                found.append(sorted(component))

    for v in graph:
        if v not in index:
            visit(v)
    return found


def test_the_walker_sees_the_imports() -> None:
    # a guard against a walker that finds nothing and so passes vacuously
    assert len(MODULES) > 80
    assert "sweeper.measure.engine" in GRAPH["sweeper.run.supervise"]
    assert "sweeper.located.problem" in GRAPH["sweeper.located.yamltree"]
    assert cycles({"a": ["b"], "b": ["c"], "c": ["a"], "d": ["a"]}) == [["a", "b", "c"]]


def test_no_import_circles_between_modules() -> None:
    # package __init__ modules only hand names on; an __init__ that imports its own modules is
    # not a circle with them
    graph = {m: [t for t in targets if not (MODULES[m].name == "__init__.py" and t.startswith(m + "."))]
             for m, targets in GRAPH.items()}
    graph = {m: [t for t in targets if not (MODULES[t].name == "__init__.py" and m.startswith(t + "."))]
             for m, targets in graph.items()}
    assert cycles(graph) == []


@pytest.mark.parametrize("module", sorted(MODULES))
def test_nothing_private_is_taken_from_another_package(module: str) -> None:
    here = package_of(module)
    bad = []
    for target, names, line in imports_of(module):
        other = package_of(target)
        if other == here:
            continue
        for name in names:
            if name.startswith("_") and not name.startswith("__"):
                bad.append(f"{MODULES[module].name}:{line}: {name} from {target}")
        if target.rsplit(".", 1)[-1].startswith("_"):
            bad.append(f"{MODULES[module].name}:{line}: private module {target}")
    assert bad == []


def test_the_top_level_holds_only_packages() -> None:
    loose = sorted(p.name for p in ROOT.glob("*.py") if p.name not in ("__init__.py", "__main__.py"))
    assert loose == []
    assert all((p / "__init__.py").is_file() for p in ROOT.iterdir() if p.is_dir() and p.name != "__pycache__"
               and any(p.glob("*.py")))


def test_the_engine_knows_no_instruments_files_or_verdicts() -> None:
    # GUIDE: the engine talks to roles; numerics know no VISA; nothing downstream reaches back up
    measure = [m for m in MODULES if m.startswith("sweeper.measure.")]
    reached = {t for m in measure for t in GRAPH[m]}
    forbidden = [t for t in reached if t.startswith(("sweeper.store", "sweeper.verdict", "sweeper.run",
                                                     "sweeper.cli", "sweeper.sim", "sweeper.report"))]
    assert forbidden == []
    allowed_instruments = {"sweeper.instruments.roles"}
    assert {t for t in reached if t.startswith("sweeper.instruments")} <= allowed_instruments
