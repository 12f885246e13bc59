"""``java.util.HashMap`` of string keys: the bucket of every key in the table a map holding the keys would have.

A key's bucket is ``(n - 1) & hash`` in a table of ``n`` buckets, ``n`` a power of two, where ``hash`` is the
map's spread of ``String.hashCode``, ``h ^ (h >>> 16)`` (``jvm.hashmap_spread``; the hash code is over the UTF-16
code units of the key decoded as UTF-8). The table's length follows the map's resize rule:

- ``new HashMap<>(initialCapacity)`` keeps ``tableSizeFor(initialCapacity)``, the least power of two at or above
  it (1 for 0; at most ``MAXIMUM_CAPACITY`` = 2^30), and allocates that table at the first ``put``
  (``new HashMap<>()`` behaves as an initial capacity of 16);
- a table of ``n`` buckets has the threshold ``(int) (n * 0.75)`` (the default load factor; ``Integer.MAX_VALUE``
  at the maximum capacity), and a ``put`` of a new key that takes the size above the threshold doubles the table.

Each put adds one entry and at most one doubling, and the threshold of a doubled table is at least one above the
old one, so after ``entries`` puts the table is the least ``tableSizeFor(initialCapacity) * 2^k`` whose threshold
is at least ``entries`` (or the maximum). Doubling keeps every key's low bits: a key stays in bucket ``b`` or moves
to ``b + n``, so exactly the keys whose spread hash has bit ``log2(n)`` set move, half of an ideal hash's.

A bin that grows past ``TREEIFY_THRESHOLD`` (8) entries becomes a red-black tree when the table has at least
``MIN_TREEIFY_CAPACITY`` (64) buckets: the tree changes the cost of a lookup in that bucket, not which bucket a key
is in, and the rule does not model it. In a smaller table such a bin doubles the table instead; that doubling
depends on the keys, not only on their number, and the rule leaves it out (it matters only for maps that small).

References
----------
OpenJDK, ``java.util.HashMap`` (JDK 8 and later): ``hash(Object)``, ``tableSizeFor``, ``resize``, ``putVal``,
``treeifyBin``, the constants ``DEFAULT_INITIAL_CAPACITY``, ``DEFAULT_LOAD_FACTOR``, ``MAXIMUM_CAPACITY``,
``TREEIFY_THRESHOLD`` and ``MIN_TREEIFY_CAPACITY``, and the implementation notes of its source; Java SE API
Specification, ``java.util.HashMap`` (capacity, load factor and rehashing).
"""

from __future__ import annotations

import operator

from hashaudit.placements.rules import ModLayout

DEFAULT_INITIAL_CAPACITY = 16
MAXIMUM_CAPACITY = 1 << 30
_INT_MAX = (1 << 31) - 1


def table_size_for(capacity: int) -> int:
    """``HashMap.tableSizeFor``: the table length a map created with ``capacity`` allocates at its first put.

    Parameters
    ----------
    capacity : int
        The initial capacity given to the constructor, a non-negative Java ``int``.

    Returns
    -------
    int
        The least power of two at or above ``capacity`` (1 for 0 and 1), at most 2^30.

    References
    ----------
    OpenJDK, ``java.util.HashMap.tableSizeFor`` and ``MAXIMUM_CAPACITY``.
    """
    capacity = operator.index(capacity)
    if not 0 <= capacity <= _INT_MAX:
        raise ValueError(f"capacity must be a non-negative Java int (got {capacity})")
    return 1 if capacity <= 1 else min(MAXIMUM_CAPACITY, 1 << (capacity - 1).bit_length())


def threshold(table_size: int) -> int:
    """The size above which a table of ``table_size`` buckets doubles: ``(int) (table_size * 0.75)``, or
    ``Integer.MAX_VALUE`` at the maximum capacity (the doubling of the threshold in ``resize`` gives the same).

    References
    ----------
    OpenJDK, ``java.util.HashMap.resize`` and ``DEFAULT_LOAD_FACTOR``.
    """
    return _INT_MAX if table_size >= MAXIMUM_CAPACITY else (3 * table_size) // 4


def table_size_after(entries: int, capacity: int = DEFAULT_INITIAL_CAPACITY) -> int:
    """The table length of ``new HashMap<>(capacity)`` after ``entries`` puts of distinct keys.

    Parameters
    ----------
    entries : int
        Distinct keys put into the map (at least 0).
    capacity : int
        The initial capacity (16 for ``new HashMap<>()``).

    Returns
    -------
    int
        ``tableSizeFor(capacity)`` doubled until its threshold is at least ``entries`` (at most 2^30).

    References
    ----------
    OpenJDK, ``java.util.HashMap.putVal`` (``if (++size > threshold) resize();``) and ``resize``.
    """
    entries = operator.index(entries)
    if entries < 0:
        raise ValueError(f"entries must be at least 0 (got {entries})")
    size = table_size_for(capacity)
    while entries > threshold(size):
        size *= 2
    return size


class HashMapLayout(ModLayout):
    """The buckets of a ``HashMap`` table of ``shards`` buckets (a power of two): ``hash & (shards - 1)``, which is
    ``hash % shards`` of the unsigned spread hash; the map grows by doubling its table, up to 2^30 buckets."""

    def __init__(self, shards: int) -> None:
        super().__init__(shards)
        if self.shards < 1 or self.shards > MAXIMUM_CAPACITY or self.shards & (self.shards - 1):
            raise ValueError(f"a HashMap table has a power of two from 1 to 2^30 buckets (got {self.shards})")

    def resized(self, shards: int) -> HashMapLayout:
        """The table after the map's next growth, whatever ``shards`` above the current size is asked for: the map
        only ever doubles (a table at the maximum stays)."""
        return HashMapLayout(min(2 * self.shards, MAXIMUM_CAPACITY) if shards > self.shards else self.shards)

    def ideal_moved(self, shards: int, width: int = 32) -> float | None:
        """Half the values move on a doubling (those with the new bit set); none when the table cannot grow."""
        return 0.5 if self.resized(shards).shards > self.shards else 0.0

    @property
    def label(self) -> str:
        return f"{self.shards} buckets"
