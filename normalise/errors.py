"""Errors a person can act on: each names the situation, the place and what to do."""

from __future__ import annotations


class NormaliseError(ValueError):
    """Base class of every error the tool raises on purpose."""


class UsageError(NormaliseError):
    """The tool was called in a way it cannot follow; the message says how to fix it."""


class UnreadableFile(NormaliseError):
    """A whole input file cannot be read (missing, a directory, an unknown format)."""
