"""The package's shape: no import cycles, layers import downwards only.

Read with ``ast`` from the source files, so every import counts: module-level ones and
the function-local ones that keep start-up fast (an import inside a function still
ties the two modules together for a reader).
"""

from __future__ import annotations

import ast
import functools
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "relview"

#: Layers from the bottom up (DEVELOPERS.md, "Layout"); a module may import its own layer
#: and the ones below it, never one above.
LAYERS = [
    ("relview.errors", "relview.kinematics", "relview.scene.parts"),
    ("relview.geometry", "relview.light"),
    ("relview.imaging",),
    ("relview.scene",),
    (
        "relview.frame_memory",
        "relview.renderer",
        "relview.probes",
        "relview.illumination",
        "relview.framing",
    ),
    ("relview.figures", "relview.animation"),
    ("relview.cli",),
]


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    """relview modules that ``name`` imports anywhere in its source."""
    tree = ast.parse(path.read_text(), str(path))
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                anchor = package.split(".")[: len(package.split(".")) - node.level + 1]
                base = ".".join(anchor + ([base] if base else []))
            # `from pkg import mod` imports the submodule pkg.mod when there is one
            targets = [
                f"{base}.{a.name}" if f"{base}.{a.name}" in known else base for a in node.names
            ]
        else:
            continue
        for t in targets:
            while t and t not in known:
                t = t.rpartition(".")[0]
            if t and t != name and t != "relview":
                found.add(t)
    return found


@functools.cache  # the sources do not change during a run; parsed once, not per test
def import_graph() -> dict[str, frozenset[str]]:
    mods = _modules()
    known = set(mods)
    return {name: frozenset(_imports(name, path, known)) for name, path in mods.items()}


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm)."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    out: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w in graph.get(v, ()):
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
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def _layer(module: str) -> int:
    best, level = -1, None
    for i, names in enumerate(LAYERS):
        for prefix in names:
            if (module == prefix or module.startswith(prefix + ".")) and len(prefix) > best:
                best, level = len(prefix), i
    if level is None:
        raise AssertionError(f"{module} is in no layer of tests/test_layout.py")
    return level


def test_cycle_finder_sees_a_cycle():
    # the checker itself: a three-module ring and a self-contained pair are found
    graph = {"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"e"}, "e": set()}
    assert _cycles(graph) == [["a", "b", "c"]]


def test_no_import_cycles():
    assert _cycles(import_graph()) == []


@pytest.mark.parametrize("module", sorted(_modules()))
def test_imports_point_down_the_layers(module):
    graph = import_graph()
    if module == "relview":
        return  # the package's public face may name anything (lazily)
    upward = [t for t in sorted(graph[module]) if _layer(t) > _layer(module)]
    assert upward == [], f"{module} imports from a higher layer: {upward}"


def test_command_line_is_imported_by_nothing_else():
    graph = import_graph()
    users = [
        m
        for m, targets in graph.items()
        if not m.startswith("relview.cli") and any(t.startswith("relview.cli") for t in targets)
    ]
    assert users == []
