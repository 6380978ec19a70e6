"""What ``build_database`` gives back to a notebook: the manifest, read as attributes, and the tables.

``Built`` is the manifest itself (a ``dict``, so ``json.dump`` writes it and every key reads as before) with
each field also an attribute, the database it was written to, and ``frame(name)``: any table or view of that
database as a pandas DataFrame.

Example:
    >>> import os, tempfile
    >>> from normalise import build_database
    >>> d = tempfile.mkdtemp(); p = os.path.join(d, "books.csv")
    >>> _ = open(p, "w").write('key,tags\\nb1,"[""sea"", ""maps""]"\\nb2,"[""sea""]"\\n')
    >>> built = build_database(p, os.path.join(d, "books.db"))
    >>> built.integrity["proof"], [t["name"] for t in built.tables][:3]
    ('exact', ['books', 'tag', 'book_tags'])
    >>> sorted(built.frame("tag")["tag"])
    ['maps', 'sea']
"""

from __future__ import annotations

from typing import Any


class Built(dict):
    """The manifest of a build (a dict), its fields as attributes, and its tables as DataFrames."""

    def __init__(self, manifest: dict, database: str, schema: str | None = None):
        super().__init__(manifest)
        self._database = database  # the real path or URL (the manifest's "database" has the password masked)
        self._schema = schema

    def __getattr__(self, name: str) -> Any:
        try:
            return self[name]
        except KeyError:
            raise AttributeError(f"the manifest has no field {name!r} (fields: {', '.join(self)})") from None

    def __reduce__(self):  # pickles (and copies) as the plain manifest
        return dict, (dict(self),)

    @property
    def names(self) -> list[str]:
        """Every table and view of the database, in the manifest's order."""
        return [t["name"] for t in self["tables"]] + [v["name"] for v in self["views"]]

    def frame(self, name: str):
        """The table or view ``name`` as a pandas DataFrame, every row, in its key order for a table.

        Columns are pandas' nullable types (``Int64``, ``Float64``, ``string``): an integer column with
        NULLs stays integers, so surrogate keys compare exactly.
        """
        import pandas as pd
        import sqlalchemy as sa

        if name not in self.names:
            from difflib import get_close_matches

            close = get_close_matches(name, self.names, n=3)
            raise KeyError(f"{name!r} is no table or view of this build"
                           + (f"; closest: {', '.join(close)}" if close else ""))
        from .model.names import quote_name
        from .write import destination, postgresql_url

        kind, target = destination(self._database)
        if kind == "postgresql":
            engine = sa.create_engine(postgresql_url(target), poolclass=sa.pool.NullPool)
            source = f"{quote_name(self._schema or 'normalise')}.{quote_name(name)}"
        else:
            engine = sa.create_engine(f"sqlite:///{target}", poolclass=sa.pool.NullPool)
            source = quote_name(name)
        table = next((t for t in self["tables"] if t["name"] == name), None)
        order = f" ORDER BY {', '.join(map(quote_name, table['primary_key']))}" if table and table.get(
            "primary_key") else ""
        try:
            with engine.connect() as conn:
                return pd.read_sql_query(sa.text(f"SELECT * FROM {source}{order}"), conn,
                                         dtype_backend="numpy_nullable")
        finally:
            engine.dispose()
