"""The import contract: the modules of ``normalise`` form layers by pass, and imports run downward.

Every ``from .module import ...`` of the package, at the top of a module or inside a function, is read with
Python's own parser (``ast``) and checked in a graph (networkx):

* no circle, of any length (``networkx.simple_cycles``);
* no import from a module to one in a higher layer, except the ones listed in ``UPWARD`` (issue 14 removes
  them; the list must shrink as they go, so a fixed one fails here until it is struck off, and a new one fails
  at once).

The layers are DEVELOPERS.md's passes, the plan model at the bottom.
"""

from __future__ import annotations

import ast
from pathlib import Path

import networkx as nx

PACKAGE = Path(__file__).parent.parent / "normalise"

LAYERS = [  # bottom first: a top-level module or package of normalise in each
    ("model", {"model", "progress", "outputs"}),
    ("read", {"read"}),
    ("decode", {"decode", "_pyliteral"}),
    ("infer", {"infer", "join", "options_check", "option_values", "partition", "survey"}),
    ("build", {"build"}),
    ("check", {"check", "prove"}),
    ("write", {"write"}),
    ("report", {"report", "result"}),
    ("run", {"pipeline", "cli", "__init__", "__main__"}),
]

UPWARD: set = set()  # (importer, imported): imports up the layers; none is left (issue 14)


def module_name(path: Path) -> str:
    """``write/sqlite.py`` -> ``write.sqlite``; a package's ``__init__.py`` is the package (``write``)."""
    parts = list(path.relative_to(PACKAGE).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" and len(parts) > 1 else parts)


def imports() -> nx.DiGraph:
    """Every module of the package and the modules of the package it imports (relative imports, resolved)."""
    graph = nx.DiGraph()
    graph.add_node("_pyliteral")  # the C accelerator (normalise/_ext/pyliteral.c), imported by decode
    for path in sorted(PACKAGE.rglob("*.py")):
        name = module_name(path)
        graph.add_node(name)
        package = name.split(".") if path.name == "__init__.py" else name.split(".")[:-1]
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.level:
                base = package[:len(package) - (node.level - 1)] if node.level > 1 else package
                targets = [node.module] if node.module else [a.name for a in node.names]
                for target in targets:
                    graph.add_edge(name, ".".join(base + target.split(".")))
    return graph


def layer_of(module: str) -> str:
    """A module's layer is its top-level module's or package's."""
    return module.split(".")[0]


def test_every_module_has_a_layer():
    placed = [m for _, modules in LAYERS for m in modules]
    assert len(placed) == len(set(placed))
    assert {layer_of(m) for m in imports()} == set(placed)


def test_no_circle():
    assert list(nx.simple_cycles(imports())) == []


def test_imports_run_downward():
    layer = {m: k for k, (_, modules) in enumerate(LAYERS) for m in modules}
    upward = {(a, b) for a, b in imports().edges if layer[layer_of(b)] > layer[layer_of(a)]}
    assert upward == UPWARD
