"""The inference's thresholds; what a user may decide is ``model.settings.Settings``."""

from __future__ import annotations

from ..model.settings import Options, Settings

NATURAL_KEY_MIN_DISTINCT = 0.98  # a few duplicates are set aside, not a reason to reject the key
WIDE_OBJECT_KEYS = 20  # a single object with more keys becomes a 1:1 child table

__all__ = ["NATURAL_KEY_MIN_DISTINCT", "Options", "Settings", "WIDE_OBJECT_KEYS"]
