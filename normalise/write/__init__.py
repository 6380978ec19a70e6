"""Write pass: the planned schema and the built rows into a database, through SQLAlchemy.

One module per destination, each with what only it needs: ``ddl`` (the SQL types and the SQLAlchemy schema of a
plan, shared by both databases), ``destinations`` (what ``--db`` names, and the errors of a destination),
``sqlite`` (the embedded default: a temporary file, checked, then moved into place), ``postgresql`` (one
transaction with COPY, native types where the text comes back, comments, a register of what a run made) and
``parquet`` (a file per table with the plan's Arrow schema).
"""

from .ddl import TYPES, metadata_for
from .destinations import (ACCEPTED_DESTINATIONS, DestinationError, DestinationExists, DestinationFailed,
                           DestinationLocked, destination, display_url, is_postgresql, postgresql_url)
from .parquet import ARROW_TYPES, arrow_field, write_parquet
from .postgresql import (DEFAULT_SCHEMA, PG_MAX_IDENTIFIER, PG_REGISTER, UnstorableValue, column_notes, native_forms,
                         postgresql_run_lock, proof_queries, server_message, write_postgresql)
from .sqlite import BTREE_CHECKS, SqliteWriter, sqlite_engine, write_sqlite

__all__ = ["ACCEPTED_DESTINATIONS", "ARROW_TYPES", "BTREE_CHECKS", "DEFAULT_SCHEMA", "DestinationError", "DestinationExists",
           "DestinationFailed", "DestinationLocked", "PG_MAX_IDENTIFIER", "PG_REGISTER", "SqliteWriter",
           "TYPES", "UnstorableValue", "arrow_field", "column_notes", "destination", "display_url",
           "is_postgresql", "metadata_for", "native_forms", "postgresql_run_lock", "postgresql_url",
           "proof_queries", "server_message", "sqlite_engine", "write_parquet", "write_postgresql",
           "write_sqlite"]
