"""Check pass: referential integrity of the plan, as a graph, before anything is written.

Tables are nodes and foreign keys are edges from the referencing table to the
referenced one. Every foreign key must name an existing table and its key
columns, the graph must have no cycle, and tables load in topological order
(referenced tables first), as SQLite's foreign-key rules require when
enforcement is on.
"""

from __future__ import annotations

import networkx as nx

from .model.errors import NormaliseError
from .model.plan import Plan


class IntegrityError(NormaliseError):
    """The plan's foreign keys do not form a loadable, acyclic graph."""


def table_graph(plan: Plan) -> nx.DiGraph:
    """The directed graph of tables (nodes) and foreign keys (edges child -> parent)."""
    graph = nx.DiGraph()
    for t in plan.tables:
        graph.add_node(t.name, role=t.role)
    for t in plan.tables:
        for fk in t.foreign_keys:
            graph.add_edge(t.name, fk.references, columns=fk.columns, ref_columns=fk.ref_columns)
    return graph


def check_plan(plan: Plan) -> list[str]:
    """Validate the foreign keys and return the load order (referenced tables first)."""
    tables = {t.name: t for t in plan.tables}
    problems = []
    for t in plan.tables:
        names = {c.name for c in t.columns}
        for fk in t.foreign_keys:
            parent = tables.get(fk.references)
            if parent is None:
                problems.append(f"{t.name}.{fk.columns} references missing table {fk.references}")
                continue
            if not set(fk.columns) <= names:
                problems.append(f"{t.name}: foreign-key columns {fk.columns} are not columns of it")
            keys = [parent.primary_key] + parent.unique + [[c.name] for c in parent.columns if c.unique]
            if fk.ref_columns not in keys:
                problems.append(f"{t.name}.{fk.columns} references {fk.references}.{fk.ref_columns}, "
                                "which is not a primary or unique key")
    graph = table_graph(plan)
    # a table referring to itself (a region's parent region) needs no order: both writers check foreign keys
    # after the rows are in (SQLite's PRAGMA foreign_key_check; PostgreSQL adds the constraints then)
    graph.remove_edges_from(list(nx.selfloop_edges(graph)))
    if not nx.is_directed_acyclic_graph(graph):
        cycle = nx.find_cycle(graph)
        problems.append("foreign keys form a cycle: " + " -> ".join(a for a, _ in cycle))
    if problems:
        raise IntegrityError("the planned schema is not consistent:\n  " + "\n  ".join(problems))
    return list(reversed(list(nx.lexicographical_topological_sort(graph))))


def check_rows(plan: Plan, rows: dict[str, list[tuple]]) -> int:
    """Count foreign-key values that name no row of the referenced table (0 when all resolve)."""
    tables = {t.name: t for t in plan.tables}
    missing = 0
    for t in plan.tables:
        names = [c.name for c in t.columns]
        for fk in t.foreign_keys:
            parent = tables[fk.references]
            pnames = [c.name for c in parent.columns]
            pidx = [pnames.index(c) for c in fk.ref_columns]
            present = {tuple(r[k] for k in pidx) for r in rows[parent.name]}
            idx = [names.index(c) for c in fk.columns]
            # a NULL foreign key names no row and needs none (SQL's MATCH SIMPLE)
            missing += sum(tuple(r[k] for k in idx) not in present for r in rows[t.name]
                           if all(r[k] is not None for k in idx))
    return missing
