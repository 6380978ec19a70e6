"""Infer pass: the relational model of the exports, from their first records.

An *identity* is the field (or fields) that names the thing an object stands for: the same ``person_id`` in many
rows is one person. Given an identity, each other field is an *entity attribute* when the identity functionally
determines it (X -> A: every occurrence of one X value carries the same A, up to a tolerated share of violations
such as misspellings) and a *link attribute* otherwise (a role or a position that varies from record to record).

``planner`` makes the plan (``infer_plan``) from ``options`` (the settings a user may give), asking
``dependencies`` (functional dependencies and identity candidates, counted with numpy), ``types`` (a column's or
field's type, a record's natural key), ``shapes`` (what a nested value holds, and the fields of its objects),
``keyed`` (objects keyed by data: codes as keys), ``entities`` (which entity tables are one) and ``references``
(values that name records of another export).
"""

from .dependencies import (DEFAULT_VIOLATION_THRESHOLD, Dependency, IdentityCandidate, ObjectTable, entity_attributes,
                           identity_candidates, is_scalar, measure_dependency)
from .entities import match_key
from .keyed import keyed_fields, keyed_shape
from .options import Options
from .planner import infer_plan
from .references import (REFERENCE_MIN_SHARE, REFERENCE_MIN_VALUES, infer_references, is_reference, reference_evidence,
                         reference_text, reference_texts)
from .shapes import field_map, get_path, objects_of, scalar_fields, shape_of
from .types import detect_natural_key, list_value_type, scalar_column_type, scalar_type, value_type

__all__ = ["DEFAULT_VIOLATION_THRESHOLD", "Dependency", "IdentityCandidate", "ObjectTable", "Options",
           "REFERENCE_MIN_SHARE", "REFERENCE_MIN_VALUES", "detect_natural_key", "entity_attributes",
           "field_map", "get_path", "identity_candidates", "infer_plan", "infer_references", "is_reference",
           "is_scalar", "keyed_fields", "keyed_shape", "list_value_type", "match_key", "measure_dependency",
           "objects_of", "reference_evidence", "reference_text", "reference_texts", "scalar_column_type",
           "scalar_fields", "scalar_type", "shape_of", "value_type"]
