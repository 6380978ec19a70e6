"""A canonical digest of every decoded value, and the running sums of the input's digests the lossless proof
compares with the database's (``InputDigests``).
"""

from __future__ import annotations

from hashlib import blake2b

from .exact import canonical_text, encode_canonical, json_pure


def keyed_digest(key: int, value, pure: bool = False) -> int:
    """A 128-bit number that is equal for two (record key, value) pairs exactly when the keys are and ``same``
    holds for the values.

    ``pure`` says the value holds only what JSON holds (dicts with text keys,
    lists, text, numbers, booleans, None), as every cell of a JSON column does:
    then ``json.dumps`` with sorted keys is the canonical text, in C.

    Example:
        >>> keyed_digest(7, {"a": 1, "b": [2.0]}, True) == keyed_digest(7, {"b": [2.0], "a": 1})
        True
        >>> keyed_digest(7, [1]) == keyed_digest(7, (1,)), keyed_digest(7, [1]) == keyed_digest(7, [True])
        (False, False)
    """
    if pure or json_pure(value):
        text = "j" + encode_canonical(value)
    else:
        text = "c" + canonical_text(value)
    return int.from_bytes(blake2b(key.to_bytes(9, "big", signed=True) + text.encode("utf-8", "surrogatepass"),
                                  digest_size=16).digest(), "big")


DIGEST_MODULUS = 1 << 128  # digest sums are kept modulo this


class InputDigests:
    """Per record table and input column: the number of non-empty cells and a running sum of their digests.

    The sum is over (record key, cell digest) pairs, so it does not depend on the
    order (or the chunks) the records come in, and it changes when any one cell does.
    """

    def __init__(self):
        self.sums: dict[tuple[str, str], list] = {}  # (record table, column) -> [cells, sum]
        self.records: dict[str, set] = {}  # record table -> keys of the records loaded by this build

    def add(self, table: str, column: str, keys: list[int], values: list, rows: list[int],
            impure: set | None) -> None:
        """The cells ``values`` of the records ``keys`` (rows ``rows`` of their column); ``impure``: the rows
        whose value may hold what JSON has not (``DecodedColumn.impure``; None: any)."""
        self.records.setdefault(table, set()).update(keys)
        entry = self.sums.setdefault((table, column), [0, 0])
        total = entry[1]
        n = 0
        for sk, v, i in zip(keys, values, rows):
            if v is not None:
                total += keyed_digest(sk, v, impure is not None and i not in impure)
                n += 1
        entry[0] += n
        entry[1] = total % DIGEST_MODULUS
