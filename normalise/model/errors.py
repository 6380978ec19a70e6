"""Errors a person can act on: each names the situation, the place and what to do.

One family: every error the tool raises on purpose is a ``NormaliseError``, a ``ValueError`` (the built-in a
caller expects for bad input), ``literal.CellError`` included. Each says how the command ends (``exit_code``):
1 when the build stopped on what the data holds (``EXIT_DATA``), 2 when the tool was called in a way it cannot
follow (``EXIT_USAGE``), 3 when the call and the data were right but the destination could not be written (busy
with another run, locked, a full disk, a PostgreSQL server that is unreachable or refuses: ``EXIT_DESTINATION``). The message names the place for a person; ``file``, ``line``, ``column`` and
``position`` give it to a program, None where it is not known or the error is about no one place.
"""

from __future__ import annotations

import contextlib
import contextvars
import functools
import re

EXIT_DONE = 0
EXIT_DATA = 1
EXIT_USAGE = 2
EXIT_DESTINATION = 3


class NormaliseError(ValueError):
    """Base class of every error the tool raises on purpose.

    Attributes (each None when unknown): ``file``, the input or plan file; ``line``, the line in it (of the row,
    for an input); ``column``, the input column; ``position``, the 1-based character offset in the cell.

    Example:
        >>> e = NormaliseError("books.csv, line 7: no key", file="books.csv", line=7)
        >>> str(e), e.file, e.line, e.column, e.position, isinstance(e, ValueError)
        ('books.csv, line 7: no key', 'books.csv', 7, None, None, True)
    """

    exit_code = EXIT_DATA

    def __init__(self, *args, file: str | None = None, line: int | None = None, column: str | None = None,
                 position: int | None = None):
        super().__init__(*args)
        self.file = file
        self.line = line
        self.column = column
        self.position = position


class UsageError(NormaliseError):
    """The tool was called in a way it cannot follow; the message says how to fix it."""

    exit_code = EXIT_USAGE


class UnreadableFile(NormaliseError):
    """A whole input file cannot be read (a JSON array, a quote in the header never closed)."""


class MissingInput(UnreadableFile):
    """An input named on the command line is not there, or is a directory: a usage error."""

    exit_code = EXIT_USAGE


class NotClean(NormaliseError):
    """``strict``: the database was written, but rows were rejected or cells quarantined; ``result`` is the
    build's manifest (a ``pipeline.Built``), to look into."""

    def __init__(self, *args, result=None, rejected: int = 0, quarantined: int = 0, **where):
        super().__init__(*args, **where)
        self.result, self.rejected, self.quarantined = result, rejected, quarantined

    @classmethod
    def check(cls, result) -> None:
        """Raise when ``result`` (a build's manifest) rejected a row or quarantined a cell."""
        rejected, quarantined = sum(i["rows_rejected"] for i in result["inputs"]), result["cells_quarantined"]
        if rejected or quarantined:
            raise cls(f"--strict: {rejected:,} rows rejected and {quarantined:,} cells quarantined; the database "
                      f"was written, see rejected_rows and quarantined_cells in {result['database']}",
                      result=result, rejected=rejected, quarantined=quarantined)


class LooksHeaderless(UserWarning):
    """The first row of a CSV or TSV file looks like data, not like column names."""


# --- the same error, phrased for a Python caller -------------------------------------------------------
# Messages name the command line's options, which is how most people meet them. Called from Python (not from
# ``cli.main``), a public function gives each option as its parameter instead (``speaks_to_callers``).
CALLER_NAMES = {
    "--db": "database", "--replace": "replace=True", "--append": "append=True", "--manifest": "manifest_path",
    "--plan": "plan_path", "--pick": "picks", "--report": "report_path", "--dictionary": "dictionary_path",
    "--parquet": "parquet_dir", "--schema": "schema", "--share-schema": "share_schema=True", "--wait": "wait",
    "--allow-lossy": "allow_lossy=True", "--verify": "verify", "--workers": "workers", "--dask": "dask", "--chunk-rows": "chunk_rows",
    "--no-header": "header=False",
    "--encoding": "encoding", "--delimiter": "delimiter", "--decode": "formats", "--strict": "strict=True",
    "--quiet": "progress=False", "--max-depth": "limits.max_depth", "--max-cell-chars": "limits.max_cell_chars",
    "--key": "options.natural_keys", "--identity": "options.identities", "--merge": "options.merge",
    "--no-merge": "options.no_merge", "--match": "options.match", "--threshold": "options.violation_threshold",
    "--duplicates": "options.duplicates", "--join": "join_options.on", "--how": "join_options.how",
    "--cardinality": "join_options.cardinality", "--separate": "join_options.separate=True",
}
_OPTION = re.compile(r"(?<![\w-])(--[a-z][a-z-]*)(?: ([\w.-]+(?::[\w.-]+)?)=([\w.-]+(?::[\w.-]+)?))?")
_MAPPED = {"--key": "options.natural_keys", "--identity": "options.identities", "--match": "options.match",
           "--decode": "formats"}


def _as_parameter(m: re.Match) -> str:
    option, name, value = m.groups()
    if name is not None and option in _MAPPED:  # --key visits=COLUMN -> options.natural_keys={'visits': 'COLUMN'}
        return f"{_MAPPED[option]}={{{name!r}: {value!r}}}"
    rest = "" if name is None else f" {name}={value}"
    return CALLER_NAMES.get(option, option) + rest
_FROM_CLI = contextvars.ContextVar("normalise_from_cli", default=False)


def for_callers(message: str) -> str:
    """A message with each command-line option named as the Python parameter that sets it.

    Example:
        >>> for_callers("out.db exists; use --replace to overwrite it, or --append to add to it")
        'out.db exists; use replace=True to overwrite it, or append=True to add to it'
        >>> for_callers("name it with --key visits=COLUMN")
        "name it with options.natural_keys={'visits': 'COLUMN'}"
    """
    return _OPTION.sub(_as_parameter, message)


@contextlib.contextmanager
def from_the_command_line():
    """Within it, errors keep the command line's option names (``cli.main``)."""
    token = _FROM_CLI.set(True)
    try:
        yield
    finally:
        _FROM_CLI.reset(token)


def speaks_to_callers(func):
    """A public function whose errors name Python parameters, not options, unless the command line called it."""
    @functools.wraps(func)
    def call(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except NormaliseError as exc:
            if not _FROM_CLI.get() and exc.args and isinstance(exc.args[0], str):
                exc.args = (for_callers(exc.args[0]),) + exc.args[1:]
            raise
    return call
