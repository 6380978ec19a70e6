"""Shapes of decoded columns: what nests in them, how full, how long.

Part of the infer pass: ``profile_values`` walks decoded values once and
records, for lists of objects, the union of keys with each key's value types
and fill rate, following nesting with a path (``contributors[].awards[]``).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from statistics import median


def type_name(value) -> str:
    """The JSON-ish name of a decoded value's type.

    Example:
        >>> [type_name(v) for v in (1, 1.5, "a", True, None, [1], {"a": 1}, (1,))]
        ['integer', 'real', 'text', 'boolean', 'null', 'list', 'object', 'list']
    """
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "boolean"
    if isinstance(value, int):
        return "integer"
    if isinstance(value, float):
        return "real"
    if isinstance(value, str):
        return "text"
    if isinstance(value, dict):
        return "object"
    if isinstance(value, (list, tuple)):
        return "list"
    return type(value).__name__


@dataclass
class FieldProfile:
    """One key of the objects in a nested column."""

    name: str
    path: str
    present: int = 0  # objects in which the key holds a non-null value
    types: Counter = field(default_factory=Counter)
    nested: "ShapeProfile | None" = None

    def to_json(self, objects: int) -> dict:
        out = {"name": self.name, "path": self.path,
               "types": dict(self.types.most_common()),
               "fill_rate": round(self.present / objects, 4) if objects else 0.0}
        if self.nested is not None:
            out["nested"] = self.nested.to_json()
        return out


@dataclass
class ShapeProfile:
    """The shape of the values found at one path."""

    path: str
    shapes: Counter = field(default_factory=Counter)
    lengths: list[int] = field(default_factory=list)
    objects: int = 0
    fields: dict[str, FieldProfile] = field(default_factory=dict)
    element_types: Counter = field(default_factory=Counter)

    @property
    def shape(self) -> str:
        if not self.shapes:
            return "scalar"
        return self.shapes.most_common(1)[0][0]

    def add(self, value) -> None:
        if isinstance(value, (list, tuple)):
            self.lengths.append(len(value))
            present = [v for v in value if v is not None]
            is_objects = bool(present) and all(isinstance(v, dict) for v in present)
            self.shapes["object-list" if is_objects else "scalar-list"] += 1
            for v in value:
                if isinstance(v, dict):
                    self._add_object(v, self.path + "[]")
                else:
                    self.element_types[type_name(v)] += 1
        elif isinstance(value, dict):
            self.shapes["object"] += 1
            self._add_object(value, self.path)
        else:
            self.shapes["scalar"] += 1
            self.element_types[type_name(value)] += 1

    def _add_object(self, obj: dict, base: str) -> None:
        self.objects += 1
        for key, value in obj.items():
            key = str(key)
            f = self.fields.get(key)
            if f is None:
                f = self.fields[key] = FieldProfile(key, f"{base}.{key}")
            f.types[type_name(value)] += 1
            if value is None:
                continue
            f.present += 1
            if isinstance(value, (list, tuple, dict)):
                if f.nested is None:
                    f.nested = ShapeProfile(f.path)
                f.nested.add(value)

    def to_json(self) -> dict:
        out: dict = {"path": self.path, "shape": self.shape, "shape_counts": dict(self.shapes)}
        if self.lengths:
            out["list_length"] = {"min": min(self.lengths), "median": median(self.lengths),
                                  "max": max(self.lengths)}
        if self.fields:
            out["objects"] = self.objects
            out["keys"] = [f.to_json(self.objects) for f in self.fields.values()]
        if self.element_types:
            out["element_types"] = dict(self.element_types.most_common())
        return out


def profile_values(values: list, path: str = "") -> ShapeProfile:
    """Profile the decoded, non-empty values of one column.

    Example:
        >>> p = profile_values([[{"id": 1, "tags": ["a"]}], None, [{"id": 2}, {"id": 3, "tags": []}]], "people")
        >>> p.shape, p.lengths, p.fields["id"].present, p.fields["tags"].nested.shape
        ('object-list', [1, 2], 3, 'scalar-list')
    """
    profile = ShapeProfile(path)
    for value in values:
        if value is not None:
            profile.add(value)
    return profile
