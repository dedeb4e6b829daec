"""No import circle among the modules of bench, drivers and simulated_instruments.

The graph is read from the source with ``ast`` (every import statement, also those inside
functions and under ``if TYPE_CHECKING``), so a circle hidden by a function-local import counts
too. Importing a module's own parent package is not an edge: Python imports it first anyway.
"""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
PACKAGES = ("bench", "drivers", "simulated_instruments")


def module_files(root: Path, packages=PACKAGES) -> dict[str, Path]:
    mods = {}
    for pkg in packages:
        for path in (root / pkg).rglob("*.py"):
            parts = list(path.relative_to(root).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts.pop()
            mods[".".join(parts)] = path
    return mods


def import_graph(mods: dict[str, Path]) -> dict[str, set[str]]:
    def resolve(name: str) -> str | None:
        while name and name not in mods:
            name = name.rpartition(".")[0]
        return name or None

    graph: dict[str, set[str]] = {m: set() for m in mods}
    for mod, path in mods.items():
        package = mod if path.name == "__init__.py" else mod.rpartition(".")[0]
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), str(path))):
            if isinstance(node, ast.Import):
                targets = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                base = node.module or ""
                if node.level:
                    anchor = package
                    for _ in range(node.level - 1):
                        anchor = anchor.rpartition(".")[0]
                    base = f"{anchor}.{base}" if base else anchor
                targets = [f"{base}.{a.name}" for a in node.names] + [base]
            else:
                continue
            for target in targets:
                found = resolve(target)
                if found and found != mod and not mod.startswith(found + "."):
                    graph[mod].add(found)
    return graph


def find_circle(graph: dict[str, set[str]]) -> list[str] | None:
    """One circle as a path ``[a, b, ..., a]``, or None (depth-first search, three colours)."""
    state: dict[str, int] = {}  # 1: on the current path, 2: done
    path: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        path.append(node)
        for nxt in sorted(graph[node]):
            if state.get(nxt) == 1:
                return path[path.index(nxt) :] + [nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        path.pop()
        state[node] = 2
        return None

    for start in sorted(graph):
        if start not in state:
            found = visit(start)
            if found:
                return found
    return None


def test_no_import_circle():
    circle = find_circle(import_graph(module_files(ROOT)))
    assert circle is None, "import circle: " + " -> ".join(circle)


def test_the_walk_finds_a_circle_written_for_it(tmp_path):
    # a hand-written package: a imports b at the top, b imports a inside a function; c is
    # imported by both and imports its parent package only (not a circle)
    pkg = tmp_path / "pkg"
    pkg.mkdir()
    (pkg / "__init__.py").write_text("from pkg import c\n")
    (pkg / "a.py").write_text("from pkg.b import thing\nfrom . import c\n")
    (pkg / "b.py").write_text("import pkg.c\n\ndef thing():\n    from pkg import a\n    return a\n")
    (pkg / "c.py").write_text("import pkg\n")
    graph = import_graph(module_files(tmp_path, ("pkg",)))
    assert graph["pkg.c"] == set()
    assert find_circle(graph) == ["pkg.a", "pkg.b", "pkg.a"]
    (pkg / "b.py").write_text("import pkg.c\n")
    assert find_circle(import_graph(module_files(tmp_path, ("pkg",)))) is None
