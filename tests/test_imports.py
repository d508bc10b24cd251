"""Module structure: every module imports on its own, and the import graph has no loop.

The graph counts every ``import`` statement of the package, also those inside functions
(a lazy import hides a cycle from the interpreter, not from the reader), and no module may
import a private (``_x``) name from another module.
"""
from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1] / "ordwidgets"


def _module_name(path):
    parts = list(path.relative_to(ROOT.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


MODULES = {_module_name(p): p for p in sorted(ROOT.rglob("*.py"))}


def _resolve(module, node):
    """Absolute module names an import statement of ``module`` refers to, with the names taken."""
    package = module if MODULES[module].name == "__init__.py" else module.rpartition(".")[0]
    if isinstance(node, ast.Import):
        return [(alias.name, None) for alias in node.names]
    base = package
    for _ in range(node.level - 1):
        base = base.rpartition(".")[0]
    target = (f"{base}.{node.module}" if node.module else base) if node.level else node.module
    out = []
    for alias in node.names:
        sub = f"{target}.{alias.name}"
        out.append((sub, None) if sub in MODULES else (target, alias.name))
    return out


def _edges():
    edges = {m: set() for m in MODULES}
    private = []
    for module, path in MODULES.items():
        for node in ast.walk(ast.parse(path.read_text(), filename=str(path))):
            if not isinstance(node, (ast.Import, ast.ImportFrom)):
                continue
            for target, name in _resolve(module, node):
                if target in MODULES and target != module:
                    edges[module].add(target)
                    if name and name.startswith("_") and not name.startswith("__"):
                        private.append(f"{module} imports {name} from {target}")
    return edges, private


def _cycles(edges):
    """Strongly connected components with more than one module (Tarjan 1972)."""
    index, low, stack, on, out = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in sorted(edges[v]):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(edges):
        if v not in index:
            visit(v)
    return out


def test_cycle_finder_finds_a_planted_loop():
    assert _cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    assert _cycles({"a": {"b"}, "b": set()}) == []


# compare_links lives in link_ranking.py, above fitting, so no edge needs excusing.
PENDING: set = set()  # no edge is excused: the graph must have no loop at all


def test_the_import_graph_has_no_loop():
    edges, _ = _edges()
    for a, b in PENDING:
        edges[a].discard(b)
    assert _cycles(edges) == []


def test_no_module_imports_a_private_name_of_another():
    _, private = _edges()
    assert private == []


@pytest.mark.parametrize("module", sorted(MODULES))
def test_each_module_imports_on_its_own(module):
    done = subprocess.run([sys.executable, "-c", f"import {module}"], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
