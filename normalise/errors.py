"""Errors a person can act on: each names the situation, the place and what to do.

One family: every error the tool raises on purpose is a ``NormaliseError``, a ``ValueError`` (the built-in a
caller expects for bad input), ``literal.CellError`` included. Each says how the command ends (``exit_code``):
1 when the build stopped on what the data holds (``EXIT_DATA``), 2 when the tool was called in a way it cannot
follow (``EXIT_USAGE``), 3 when the call and the data were right but the destination could not be written (busy
with another run, locked, a full disk, a PostgreSQL server that is unreachable or refuses: ``EXIT_DESTINATION``). The message names the place for a person; ``file``, ``line``, ``column`` and
``position`` give it to a program, None where it is not known or the error is about no one place.
"""

from __future__ import annotations

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


class LooksHeaderless(UserWarning):
    """The first row of a CSV or TSV file looks like data, not like column names."""
