"""Report pass: the manifest (a stable JSON contract) and the run summary."""

from __future__ import annotations

from ..build import Built
from ..infer.sharing import widened_sentence
from ..model.plan import Plan
from ..outputs import mask_password

MANIFEST_VERSION = 1


def manifest(plan: Plan, built: Built, database: str, integrity: dict, joined=None,
             row_counts: dict | None = None) -> dict:
    tables = []
    for t in plan.tables:
        tables.append({
            "name": t.name, "role": t.role, "rows": (row_counts or {}).get(t.name, len(built.rows.get(t.name, []))),
            "sources": t.sources, "primary_key": t.primary_key, "natural_key": t.natural_key,
            "position_column": t.position_column,
            "foreign_keys": [{"columns": fk.columns, "references": fk.references, "ref_columns": fk.ref_columns}
                             for fk in t.foreign_keys],
            "columns": [{"name": c.name, "type": c.type, "nullable": c.nullable, "source": c.source}
                        for c in t.columns],
        })
    reconciled = all(c.reconciled for c in built.counts)
    # a joined file's quarantined cells are counted on its own input (build counts the main file's)
    joined_inputs = [dict(i, cells_quarantined=built.cells_quarantined_by_file.get(i["path"], 0))
                     for i in joined.inputs] if joined else []
    for i in joined_inputs:
        reconciled &= i["rows_read"] == (i["records_loaded"] + i["rows_set_aside"] + i["rows_rejected"]
                                         + i["rows_unmatched"])
    partitioned = {"partitions": dict(built.partitions)} if built.partitions else {}
    return {
        "manifest_version": MANIFEST_VERSION,
        "database": mask_password(database),
        "inputs": [{"path": c.path, "rows_read": c.rows_read, "records_loaded": c.records_loaded,
                    "rows_set_aside": c.rows_set_aside, "rows_rejected": c.rows_rejected,
                    "rows_unmatched": c.rows_unmatched,
                    "cells_quarantined": c.cells_quarantined, "elements_decoded": c.elements_decoded,
                    "elements_written": c.elements_written, "elements_quarantined": c.elements_quarantined}
                   for c in built.counts] + joined_inputs,
        "joins": list(joined.joins) if joined else [],
        "tables": tables,
        "matched": built.merges,
        "views": [{"name": v.name, "kind": v.kind, "table": v.table} for v in plan.views],
        "cells_quarantined": (sum(c.cells_quarantined for c in built.counts)
                              + sum(i["cells_quarantined"] for i in joined_inputs)),
        "conflicts": built.conflicts,
        # delimited values whose name suffix ("Jr.", "Ltd.") was rejoined to the value before it, per column
        "values_rejoined": dict(sorted(built.rejoined.items())),
        # values that are natural keys of a record table: how many found their record; the others are kept
        "references": list(built.references),
        "widened": list(plan.widened),
        "entities": [{"table": g.table, "identity": g.identity, "members": g.members,
                      "attributes": [f.column for f in g.attributes]} for g in plan.entities],
        "integrity": {"foreign_key_violations": integrity["foreign_key_violations"],
                      "integrity_check": integrity.get("integrity_check"),
                      # which PRAGMA gave integrity_check's outcome: quick_check (default) or integrity_check
                      "btree_check": integrity.get("btree_check"),
                      "reconciled": reconciled, **_proof(integrity)},
        **partitioned,  # a partitioned build (--workers, --dask): who built the partitions, merged how
    }


def _proof(integrity: dict) -> dict:
    """The lossless proof's figures (``prove.py``), as the manifest gives them."""
    p = integrity.get("proof")
    if p is None:
        return {"proof": "not run"}
    return {"proof": "lossy, kept (--allow-lossy)" if p["lossy_kept"] else "exact",
            "cells_checked": p["cells_checked"], "cells_rebuilt_exactly": p["cells_rebuilt_exactly"],
            "cells_differing": p["cells_differing"], "differences": p["differences"],
            "values_traced": p["values_traced"], "traced_by_reason": p["traced_by_reason"]}


def summary(m: dict) -> str:
    """The end-of-run summary a person reads."""
    out = [f"wrote {m['database']}"]
    for i in m["inputs"]:
        if "joined_into" in i:
            total = i["records_loaded"] + i["rows_set_aside"] + i["rows_rejected"] + i["rows_unmatched"]
            ok = "=" if i["rows_read"] == total else "!="
            out.append(f"  {i['path']}: {i['rows_read']} rows read {ok} {i['records_loaded']} joined into "
                       f"{i['joined_into']} + {i['rows_set_aside']} set aside + {i['rows_rejected']} rejected "
                       f"+ {i['rows_unmatched']} unmatched (kept in unmatched_rows)")
            continue
        unmatched = i.get("rows_unmatched", 0)
        ok = "=" if i["rows_read"] == (i["records_loaded"] + i["rows_set_aside"] + i["rows_rejected"]
                                       + unmatched) else "!="
        out.append(f"  {i['path']}: {i['rows_read']} rows read {ok} {i['records_loaded']} loaded "
                   f"+ {i['rows_set_aside']} set aside + {i['rows_rejected']} rejected"
                   + (f" + {unmatched} unmatched (kept in unmatched_rows)" if unmatched else "") + "; "
                   f"{i['elements_decoded']} nested elements = {i['elements_written']} written "
                   f"+ {i['elements_quarantined']} quarantined; {i['cells_quarantined']} cells quarantined")
    width = max(len(t["name"]) for t in m["tables"])
    for t in m["tables"]:
        out.append(f"  {t['name']:<{width}}  {t['role']:<10} {t['rows']:>9,} rows")
    if m.get("matched"):
        examples = "; ".join(" = ".join(repr(k) for k in x["spellings"]) for x in m["matched"][:3])
        out.append(f"  matched on normalised names: {len(m['matched'])} entities from several spellings "
                   f"(e.g. {examples}; all in attribute_variants)")
    for v in m.get("views", []):
        out.append(f"  view {v['name']} ({v['kind'].replace('_', ' ')} of {v['table']})")
    for j in m.get("joins", []):
        on = ", ".join(f"{a} = {b}" for a, b in j["on"])
        out.append(f"  join ({j['how']}, {j['cardinality']}) {j['right']} on {on}: "
                   f"{j['left_only']} keys only in {j['left']}"
                   + (f" (e.g. {', '.join(map(str, j['left_only_examples']))})" if j["left_only"] else "")
                   + f", {j['right_only']} only in {j['right']}"
                   + (f" (e.g. {', '.join(map(str, j['right_only_examples']))})" if j["right_only"] else "")
                   + f", {j['right_duplicates_set_aside']} duplicates set aside")
    for e in m["entities"]:
        if len(e["members"]) > 1:
            out.append(f"  entity {e['table']} shared by {', '.join(e['members'])} (identity {e['identity']})")
    for w in m.get("widened", []):
        out.append("  " + widened_sentence(w))
    for r in m.get("references", []):
        out.append(f"  {r['column']} -> {r['references']} ({r['foreign_key']}): {r['matched']:,} of {r['values']:,} "
                   f"values name a record" + (f"; {r['unmatched']:,} name none ({r['distinct_unmatched']:,} distinct, "
                                              f"kept with a NULL key)" if r["unmatched"] else ""))
    out.append(f"  conflicts: {m['conflicts']} (all variants in attribute_variants)")
    p = m.get("partitions")
    if p:
        again = "; ".join(f"{n} {why}" for why, n in p["why_again"].items())
        out.append(f"  partitions: {p['merged'] + p['built_again']:,} built by {p['built_by']}, {p['merged']:,} merged "
                   f"as built, {p['built_again']:,} built again in order" + (f" ({again})" if again else ""))
    for where, n in m.get("values_rejoined", {}).items():
        out.append(f"  {where}: {n:,} delimited values kept whole with their name suffix (\"Dole, Jr.\" is one value)")
    integ = m["integrity"]
    out.append(f"  integrity: {integ['foreign_key_violations']} foreign-key violations, "
               f"{integ.get('btree_check') or 'integrity_check'} {integ['integrity_check']}, "
               f"reconciled: {'yes' if integ['reconciled'] else 'NO'}")
    if "cells_checked" in integ:
        out.append(f"  lossless proof: {integ['cells_rebuilt_exactly']:,} of {integ['cells_checked']:,} cells rebuilt "
                   f"exactly from the database"
                   + (f"; {integ['values_traced']:,} values kept as given in value_traces ("
                      + ", ".join(f"{n:,} {r}" for r, n in integ["traced_by_reason"].items()) + ")"
                      if integ["values_traced"] else "")
                   + (f"; {integ['cells_differing']:,} DIFFER, database kept (--allow-lossy)"
                      if integ["cells_differing"] else ""))
    return "\n".join(out)
