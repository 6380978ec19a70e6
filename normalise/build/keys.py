"""Deterministic surrogate keys, the same for the same input on every build and in any partition:

* a record's key is the line on which its row starts in the file;
* an entity's key is the first 53 bits of the BLAKE2b hash of its typed natural key (``integer:7``, ``text:Ann``),
  exact as an IEEE 754 double, so a JavaScript client reads it back unchanged;
* a bridge or child row owned by a record gets ``record key * 2**24 + position``; one owned by another bridge or
  child row (a list inside an object) hashes its source column, its owner's key and its position.
"""

from __future__ import annotations

from hashlib import blake2b

_MASK = (1 << 53) - 1  # keys of at most 53 bits: exact as IEEE 754 doubles


def key_of(text: str) -> int:
    """A deterministic 53-bit surrogate key for a text: every key is an integer a JSON reader that
    keeps numbers as IEEE 754 doubles (JavaScript, spreadsheets) reads back exactly (at most 2**53).

    Example:
        >>> key_of("integer:7") == key_of("integer:7"), key_of("integer:7") == key_of("text:7")
        (True, False)
        >>> key_of("integer:7") < 2**53
        True
    """
    digest = blake2b(text.encode("utf-8", "surrogatepass"), digest_size=8).digest()
    return int.from_bytes(digest, "big") & _MASK


class KeySpace:
    """The surrogate keys of one table's natural keys: ``key_of`` the text, or, in the rare case that
    another text of the table already has that key (about n**2 / 2**54 for n keys), ``key_of`` the text
    with a count appended, the first free one. The first text to reach a key (in input order, the
    same for any chunking) keeps it; ``collisions`` counts the others.

    Example:
        >>> space = KeySpace()
        >>> space.claim("integer:7") == key_of("integer:7") == space.claim("integer:7")
        True
        >>> space.taken[key_of("text:x")] = "text:other"  # as if another text had that key
        >>> space.claim("text:x") == key_of("text:x\\x001"), space.collisions
        (True, 1)
    """

    def __init__(self):
        self.taken: dict[int, str] = {}  # key -> text
        self.keys: dict[str, int] = {}  # text -> key
        self.collisions = 0

    def claim(self, text: str) -> int:
        key = self.keys.get(text)
        if key is not None:
            return key
        key, n = key_of(text), 0
        while self.taken.get(key, text) != text:
            n += 1
            key = key_of(f"{text}\x00{n}")
        self.collisions += n > 0
        self.taken[key] = text
        self.keys[text] = key
        return key

    def holds(self, text: str, key: int) -> None:
        """A key already in the database (build --append)."""
        self.taken[key] = text
        self.keys[text] = key


# Rows owned by a record get record key * 2**24 + position: with record keys below 2**29 every such key is
# below 2**53, like the hashed ones.
RECORD_KEY_LIMIT = 1 << 29
POSITION_BITS = 24


def row_key(source: str, owner_sk: int, position: int) -> int:
    """The key of a bridge or child row: its record's key and its position, or a hash below that.

    Rows owned by a record get ``record key * 2**24 + position``: keys that grow
    in file order, which SQLite appends cheaply. Rows owned by other bridge or
    child rows (lists inside objects) hash their source, owner and position.

    Example:
        >>> row_key("f:c", 12, 3) == 12 * 2**24 + 3
        True
    """
    if owner_sk < RECORD_KEY_LIMIT and position < (1 << POSITION_BITS):
        return (owner_sk << POSITION_BITS) | position
    return key_of(f"{source}:{owner_sk}:{position}")
