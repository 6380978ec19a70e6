"""What a user may decide for the inference: natural keys, the duplicates policy, the share of violations tolerated."""

from __future__ import annotations

from dataclasses import dataclass

from .dependencies import DEFAULT_VIOLATION_THRESHOLD

NATURAL_KEY_MIN_DISTINCT = 0.98  # a few duplicates are set aside, not a reason to reject the key
WIDE_OBJECT_KEYS = 20  # a single object with more keys becomes a 1:1 child table


@dataclass
class Options:
    """Choices a user can make instead of the inference."""

    natural_keys: dict = None  # file stem -> column name
    duplicates: str = "first"  # first | last | refuse
    violation_threshold: float = DEFAULT_VIOLATION_THRESHOLD
    identities: dict = None  # "file:column" or "column" -> identity field ("" = none)
    merge: list = None  # lists of "file:column" forced into one entity
    match: dict = None  # "file:column" or "column" -> field matched on its normalised text
    no_merge: list = None  # "file:column" never merged with another column
    keyed: dict = None  # "file:column" or "column" -> field the keys of an object keyed by data go to ("" = not)

    def __post_init__(self):
        self.keyed = self.keyed or {}
        self.natural_keys = self.natural_keys or {}
        self.identities = self.identities or {}
        self.match = self.match or {}
        self.merge = self.merge or []
        self.no_merge = self.no_merge or []
