"""The package layout follows the pipeline, and imports only flow down it.

Every import in the package (those at module level and those inside
functions alike) is read with ``ast``; a module may import only from its own
layer or a lower one, and no set of modules may import each other in a circle.
"""

from __future__ import annotations

import ast
from pathlib import Path

import networkx as nx
from conftest import ROOT

PACKAGE = ROOT / "biastree"

# Lower layers first.  A module belongs to the longest prefix listed.
LAYERS: list[tuple[str, ...]] = [
    ("biastree.errors", "biastree.units", "biastree.files", "biastree.version", "biastree.sim.ngspice"),
    ("biastree.physics",),
    ("biastree.input",),
    ("biastree.tree",),
    ("biastree.analysis",),
    ("biastree.output",),
    ("biastree.sim",),
    ("biastree.planner",),
    ("biastree", "biastree.__main__", "biastree.cli"),
]


def _layer(module: str) -> int:
    best, best_len = -1, -1
    for level, prefixes in enumerate(LAYERS):
        for prefix in prefixes:
            if (module == prefix or module.startswith(prefix + ".")) and len(prefix) > best_len:
                best, best_len = level, len(prefix)
    assert best >= 0, f"{module} belongs to no layer: add its folder to LAYERS"
    return best


def _modules() -> dict[str, Path]:
    out = {}
    for path in PACKAGE.rglob("*.py"):
        parts = path.relative_to(ROOT).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        out[name] = path
    return out


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    is_pkg = path.name == "__init__.py"
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = name.split(".") if is_pkg else name.split(".")[:-1]
                base = base[: len(base) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            targets = [mod] + [f"{mod}.{a.name}" for a in node.names]
        else:
            continue
        for target in targets:
            # the most specific package module the import names
            while target and target not in known:
                target = target.rpartition(".")[0]
            if target and target != name:
                found.add(target)
    return found


def _graph() -> nx.DiGraph:
    modules = _modules()
    graph = nx.DiGraph()
    for name, path in modules.items():
        graph.add_node(name)
        for target in _imports(name, path, set(modules)):
            # importing a submodule imports its package's __init__ too; subpackage
            # __init__ files here are docstrings only, so that edge is ignored
            # (the top package's is the public API: importing it is an edge)
            if target != "biastree" and name.startswith(target + "."):
                continue
            graph.add_edge(name, target)
    return graph


def test_every_module_has_a_layer() -> None:
    for name in _modules():
        _layer(name)


def test_imports_flow_down_the_pipeline() -> None:
    upward = [
        f"{a} (layer {_layer(a)}) imports {b} (layer {_layer(b)})"
        for a, b in _graph().edges
        if _layer(b) > _layer(a)
    ]
    assert upward == []


def test_no_import_cycles() -> None:
    cycles = [" -> ".join(c + [c[0]]) for c in nx.simple_cycles(_graph())]
    assert cycles == []


def test_subpackages_are_light() -> None:
    # subpackage __init__ files import nothing, so that importing one module
    # never drags in a whole layer
    for path in PACKAGE.glob("*/__init__.py"):
        if path.parent.name == "cli":
            continue
        tree = ast.parse(path.read_text())
        assert not [n for n in ast.walk(tree) if isinstance(n, (ast.Import, ast.ImportFrom))], path
