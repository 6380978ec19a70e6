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

LAYERS = [  # bottom first
    ("model", {"errors", "escapes", "names", "plan", "exact", "datetimes", "decimals", "profile", "literal",
               "progress", "outputs"}),
    ("read", {"read"}),
    ("decode", {"decode"}),
    ("infer", {"infer", "schema", "views", "join", "sharing", "options_check", "option_values", "planfile",
               "partition", "survey", "describe"}),
    ("build", {"build", "append"}),
    ("check", {"check", "prove"}),
    ("write", {"write"}),
    ("report", {"report", "report_html", "dictionary", "catalog", "result"}),
    ("run", {"pipeline", "cli", "__init__", "__main__"}),
]

UPWARD: set = set()  # (importer, imported): imports up the layers; none is left (issue 14)


def imports() -> nx.DiGraph:
    graph = nx.DiGraph()
    for path in sorted(PACKAGE.glob("*.py")):
        graph.add_node(path.stem)
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.level == 1 and node.module:
                graph.add_edge(path.stem, node.module.split(".")[0])
    return graph


def test_every_module_has_a_layer():
    placed = [m for _, modules in LAYERS for m in modules]
    assert len(placed) == len(set(placed))
    assert set(imports()) == set(placed)


def test_no_circle():
    assert list(nx.simple_cycles(imports())) == []


def test_imports_run_downward():
    layer = {m: k for k, (_, modules) in enumerate(LAYERS) for m in modules}
    upward = {(a, b) for a, b in imports().edges if layer[b] > layer[a]}
    assert upward == UPWARD
