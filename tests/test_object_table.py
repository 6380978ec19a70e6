"""The fast dependency count (infer.ObjectTable, numpy) against the plain definition (infer.measure_dependency).

Reference: ``measure_dependency`` counts, per repeated key value, the occurrences that differ from its most
frequent value — the textbook reading of a functional dependency X -> A with tolerated violations. The table's
keys, values, types and codes are checked against their plain definitions too, for one table, for tables joined
by ``ObjectTable.concat`` and for tables too wide to keep their columns.
"""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from normalise.infer import ObjectTable, measure_dependency

# Python literals give tuples too (ast.literal_eval); equal-length ones once made numpy add a dimension
VALUES = st.sampled_from([None, 0, 1, 2, True, "x", "y", 1.0, [1], {"k": 1}, (1, 2), (3, 4), (5, [6])])
OBJECTS = st.lists(st.dictionaries(st.sampled_from("abc"), VALUES, max_size=3), max_size=40)


@settings(max_examples=300, deadline=None)
@given(OBJECTS)
def test_fast_count_equals_the_definition(objects):
    table = ObjectTable(objects)
    for key in "abc":
        for field in "abc":
            ref = measure_dependency(objects, key, field)
            got = table.measure(key, field)
            assert (got.occurrences, got.violations) == (ref.occurrences, ref.violations)
            carrying = [o for o in objects if field in o]  # only objects that carry the field are evidence
            ref = measure_dependency(carrying, key, field)
            got = table.measure(key, field, carrying_only=True)
            assert (got.occurrences, got.violations) == (ref.occurrences, ref.violations)


# --- the table's columns, and tables joined with ObjectTable.concat -------------------------------------------

# text (some non-ASCII), integers inside and beyond 64 bits, booleans, reals, None and containers
ANY_VALUE = st.one_of(st.none(), st.booleans(), st.integers(-3, 3), st.sampled_from([2 ** 64, -(2 ** 70)]),
                      st.sampled_from([0.0, 1.0, 2.5]), st.sampled_from(["x", "y", "é", "名", ""]),
                      st.sampled_from([[1], [], {"k": 1}, {}]))
FIELD_VALUES = st.one_of(VALUES, ANY_VALUE, st.sampled_from(["x", "y", None]), st.integers(0, 5))
PARTS = st.lists(st.lists(st.dictionaries(st.sampled_from("abcd"), FIELD_VALUES, max_size=4), max_size=15),
                 min_size=1, max_size=4)


def first_seen_codes(values: list) -> list[int]:
    """The plain definition of a factorisation (pandas.factorize's documentation, sort=False): the i-th distinct
    value, in order of appearance, gets code i."""
    seen: dict = {}
    return [seen.setdefault(v, len(seen)) for v in values]


def check_table(table: ObjectTable, objects: list[dict]) -> None:
    import numpy as np
    from normalise.infer import value_type
    from normalise.infer.dependencies import hashable

    assert table.keys() == list(dict.fromkeys(k for o in objects for k in o))  # every key, first seen first
    for field in "abcde":  # e: a key no object has
        values = [o.get(field) for o in objects]
        assert table.values(field) == values
        assert table.kinds(field) == set(map(type, values))
        assert value_type(table.values(field), table.kinds(field)) == value_type(values)
        codes, present, isnull = table.codes(field)
        assert codes.tolist() == first_seen_codes([hashable(v) for v in values])
        assert present.tolist() == [field in o for o in objects]
        assert isnull.tolist() == [v is None for v in values]
        assert codes.dtype == np.int64
        for key in "abcde":
            ref = measure_dependency(objects, key, field)
            got = table.measure(key, field)
            assert (got.occurrences, got.violations) == (ref.occurrences, ref.violations)
            ref = measure_dependency([o for o in objects if field in o], key, field)
            got = table.measure(key, field, carrying_only=True)
            assert (got.occurrences, got.violations) == (ref.occurrences, ref.violations)


@settings(max_examples=300, deadline=None)
@given(PARTS)
def test_table_and_joined_tables_equal_the_plain_definitions(parts):
    objects = [o for part in parts for o in part]
    check_table(ObjectTable(objects), objects)
    # joined: the parts' codes are computed first, as the inference does, and reused
    tables = [ObjectTable(part) for part in parts]
    for t in tables:
        for field in "abcde":
            t.codes(field)
    check_table(ObjectTable.concat(tables), objects)


@settings(max_examples=100, deadline=None)
@given(PARTS)
def test_tables_too_wide_to_keep_equal_the_plain_definitions(parts):
    import normalise.infer.dependencies as infer

    kept, infer.CACHED_VALUES = infer.CACHED_VALUES, 3  # nothing is read in one pass, hardly anything kept
    try:
        objects = [o for part in parts for o in part]
        check_table(ObjectTable(objects), objects)
        check_table(ObjectTable.concat([ObjectTable(part) for part in parts]), objects)
    finally:
        infer.CACHED_VALUES = kept
