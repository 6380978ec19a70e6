"""The fast dependency count (infer.ObjectTable, numpy) against the plain definition (infer.measure_dependency).

Reference: ``measure_dependency`` counts, per repeated key value, the occurrences that differ from its most
frequent value — the textbook reading of a functional dependency X -> A with tolerated violations.
"""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from normalise.infer import ObjectTable, measure_dependency

VALUES = st.sampled_from([None, 0, 1, 2, True, "x", "y", 1.0, [1], {"k": 1}])
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
