"""The hand-written way, as analysts do it today in a notebook: the baseline of the build benchmark.

    python benchmarks/baseline_handwritten.py EXPORT.csv OUT.db

Per-cell ``ast.literal_eval`` / ``json.loads``, ``explode``, ``json_normalize``,
``drop_duplicates`` and ``to_sql`` — common practice, written plainly and
without deliberate slowness. It builds the same kind of model: a record
table, a person table shared by both lists, two bridges, a label table with
its bridge, and the series object as record columns.
"""

from __future__ import annotations

import ast
import json
import sqlite3
import sys

import pandas as pd


def parse(cell, how):
    if not isinstance(cell, str) or cell.strip() in ("", "[]", "{}", "None", "null", "nan"):
        return None
    try:
        return how(cell)
    except (ValueError, SyntaxError):
        return None


def main(src: str, out: str) -> None:
    df = pd.read_csv(src, dtype=str, keep_default_na=False)
    df = df.drop_duplicates("record_key")
    df["contributors"] = df["contributors"].map(lambda c: parse(c, ast.literal_eval))
    df["team"] = df["team"].map(lambda c: parse(c, json.loads))
    df["labels"] = df["labels"].map(lambda c: parse(c, json.loads))
    df["series"] = df["series"].map(lambda c: parse(c, json.loads))

    series = pd.json_normalize(df["series"].map(lambda v: v or {}).tolist()).add_prefix("series_")
    records = pd.concat([df[["record_key", "title", "released", "pages"]].reset_index(drop=True), series], axis=1)

    bridges, people = {}, []
    for column in ("contributors", "team"):
        exploded = df[["record_key", column]].explode(column).dropna(subset=[column]).reset_index(drop=True)
        exploded["list_position"] = exploded.groupby("record_key").cumcount() + 1
        objects = pd.json_normalize(exploded[column].tolist())
        links = pd.concat([exploded[["record_key", "list_position"]], objects], axis=1)
        people.append(links[["person_id", "name"]])
        bridges[column] = links.drop(columns=["name"])
    person = pd.concat(people).drop_duplicates("person_id")

    labels = df[["record_key", "labels"]].explode("labels").dropna(subset=["labels"]).reset_index(drop=True)
    labels["position"] = labels.groupby("record_key").cumcount() + 1
    label = labels[["labels"]].drop_duplicates().rename(columns={"labels": "label"})

    with sqlite3.connect(out) as con:
        records.to_sql("records", con, index=False, if_exists="replace")
        person.to_sql("person", con, index=False, if_exists="replace")
        for column, frame in bridges.items():
            frame.to_sql(f"record_{column}", con, index=False, if_exists="replace")
        label.to_sql("label", con, index=False, if_exists="replace")
        labels.to_sql("record_labels", con, index=False, if_exists="replace")


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
