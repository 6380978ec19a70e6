"""Build pass: turn decoded exports into table rows as the plan says.

Surrogate keys are deterministic and need no shared counter, so chunks or partitions built apart agree (see
DEVELOPERS.md, "Keys"; ``keys``). ``rows`` holds the row engine (``Builder``: every nested shape, a column at a
time), ``entities`` the entity tables' identities and attribute counts, ``references`` the links from a record
to entities named by a key, ``values`` how a value is stored and spelt, ``counts`` what a build counted and
returns, ``partitions`` the build over every partition of the input, ``append`` adding to a database an earlier
build made, and ``width`` the refusal of a table wider than the database allows.
"""

from .counts import Built, FileCounts
from .keys import key_of, row_key
from .bookkeeping import entity_members, name_map, occurrence_columns
from .partitions import InMemory, build, build_partitions
from .references import reference_values
from .rows import Builder, DuplicateNaturalKey
from .values import canonical, to_sql_value, value_text
from .width import TooManyColumns, check_width

__all__ = ["Builder", "Built", "DuplicateNaturalKey", "FileCounts", "InMemory", "TooManyColumns", "build",
           "build_partitions", "canonical", "check_width", "entity_members", "key_of", "name_map",
           "occurrence_columns", "reference_values", "row_key", "to_sql_value", "value_text"]
