"""Errors a person can act on: each names the situation, the place and what to do.

Each error says how the command ends (``exit_code``): 1 when the build stopped on what the data holds
(``EXIT_DATA``), 2 when the tool was called in a way it cannot follow (``EXIT_USAGE``).
"""

from __future__ import annotations

EXIT_DONE = 0
EXIT_DATA = 1
EXIT_USAGE = 2


class NormaliseError(ValueError):
    """Base class of every error the tool raises on purpose."""

    exit_code = EXIT_DATA


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
