"""``java.util.HashMap`` buckets of string keys in the table the map has after its puts, bit for bit.

References: the ``String.hashCode`` formula of the Java SE API documentation evaluated in plain Python
(``test_placements_jvm.java_string_hashcode``) with published values, and a plain-Python model of the map written
here from OpenJDK's ``java.util.HashMap`` source and its documentation: ``hash(Object)`` (``h ^ (h >>> 16)``), the
index ``(n - 1) & hash`` of ``putVal``, ``tableSizeFor`` (the JDK 8 bit-smearing form) and ``resize`` (the lazy
first table, ``newThr = oldThr << 1`` from 16 buckets on, ``(float) newCap * loadFactor`` below, the maximum
capacity 2^30), one put at a time.
"""

from __future__ import annotations

from collections import Counter

import numpy as np
import pytest
from test_placements_jvm import java_string_hashcode

from hashaudit.keys.batch import KeyBatch
from hashaudit.placements import java_hashmap
from hashaudit.placements.rules import parse_placement
from hashaudit.settings import SettingError

_MASK = 0xFFFFFFFF
_INT_MAX = 2**31 - 1
_MAXIMUM_CAPACITY = 1 << 30  # HashMap.MAXIMUM_CAPACITY
_LOAD_FACTOR = np.float32(0.75)  # HashMap.DEFAULT_LOAD_FACTOR, a Java float


def _signed(x: int) -> int:
    x &= _MASK
    return x - (1 << 32) if x >= 1 << 31 else x


def model_table_size_for(cap: int) -> int:
    """JDK 8 ``HashMap.tableSizeFor`` on Java ``int``: smear the bits of ``cap - 1`` to the right, add one."""
    n = _signed(cap - 1)
    for shift in (1, 2, 4, 8, 16):
        n = _signed(n | ((n & _MASK) >> shift))  # n |= n >>> shift
    return 1 if n < 0 else _MAXIMUM_CAPACITY if n >= _MAXIMUM_CAPACITY else n + 1


class ModelHashMap:
    """The sizes of a ``HashMap``: ``new HashMap<>(initial_capacity)`` (or ``new HashMap<>()`` for None), then puts
    of new keys, following ``putVal`` (``if (++size > threshold) resize();``) and ``resize`` line by line."""

    def __init__(self, initial_capacity: int | None = None) -> None:
        self.table_length = 0  # the table is allocated by the first put
        self.size = 0
        self.threshold = 0 if initial_capacity is None else model_table_size_for(initial_capacity)

    def resize(self) -> None:
        old_cap, old_thr, new_thr = self.table_length, self.threshold, 0
        if old_cap > 0:
            if old_cap >= _MAXIMUM_CAPACITY:
                self.threshold = _INT_MAX
                return
            new_cap = old_cap << 1
            if new_cap < _MAXIMUM_CAPACITY and old_cap >= 16:  # DEFAULT_INITIAL_CAPACITY
                new_thr = old_thr << 1
        elif old_thr > 0:  # the initial capacity was kept in the threshold
            new_cap = old_thr
        else:
            new_cap, new_thr = 16, int(np.float32(16) * _LOAD_FACTOR)
        if new_thr == 0:
            ft = np.float32(new_cap) * _LOAD_FACTOR
            new_thr = int(ft) if new_cap < _MAXIMUM_CAPACITY and ft < np.float32(_MAXIMUM_CAPACITY) else _INT_MAX
        self.threshold, self.table_length = new_thr, new_cap

    def put_new_key(self) -> None:
        if self.table_length == 0:
            self.resize()
        self.size += 1
        if self.size > self.threshold:
            self.resize()


def model_bucket(hashcode: int, table_length: int) -> int:
    """``(n - 1) & hash`` with ``hash = h ^ (h >>> 16)`` (``HashMap.hash`` and ``putVal``)."""
    return (table_length - 1) & model_spread(hashcode)


def model_spread(hashcode: int) -> int:
    """``HashMap.hash``: ``h ^ (h >>> 16)``, as unsigned 32 bits."""
    h = hashcode & _MASK
    return h ^ (h >> 16)


@pytest.fixture(scope="module")
def spreads(placement_keys: list[bytes]) -> list[int]:
    return [model_spread(java_string_hashcode(k)) for k in placement_keys]


def _model_after(capacity: int | None, entries: int) -> int:
    model = ModelHashMap(capacity)
    for _ in range(entries):
        model.put_new_key()
    return model.table_length


@pytest.mark.parametrize(
    "capacity",
    [*range(0, 70), 255, 256, 257, 1000, 4096, 2**29 - 1, 2**29 + 1, 2**30 - 1, 2**30, 2**30 + 1, _INT_MAX],
)
def test_table_size_for_equals_the_model(capacity: int) -> None:
    assert java_hashmap.table_size_for(capacity) == model_table_size_for(capacity)


@pytest.mark.parametrize("capacity", [0, 1, 2, 3, 5, 8, 12, 16, 17, 100, 1000])
def test_growth_equals_the_model_put_by_put(capacity: int) -> None:
    model = ModelHashMap(capacity)
    sizes = []
    for _ in range(5000):
        model.put_new_key()
        sizes.append(model.table_length)
    assert [java_hashmap.table_size_after(e, capacity) for e in range(1, 5001)] == sizes


def test_growth_of_large_and_maximal_maps() -> None:
    # new HashMap<>() is new HashMap<>(16); 100,000 puts: 16 doubles to 262,144 after the 98,305th (98,304 = 0.75 * 2^17)
    assert java_hashmap.table_size_after(100_000) == _model_after(None, 100_000) == 262_144
    assert java_hashmap.table_size_after(98_304) == _model_after(16, 98_304) == 131_072
    assert java_hashmap.table_size_after(98_305, 16) == 262_144
    # at the maximum capacity the threshold is Integer.MAX_VALUE: the table never grows again
    assert java_hashmap.table_size_after(_INT_MAX, 2**30) == 2**30
    assert java_hashmap.threshold(2**29) == 3 * 2**27 and java_hashmap.threshold(2**30) == _INT_MAX
    model = ModelHashMap(2**29)  # one doubling from 2^29 reaches the maximum and keeps the threshold at MAX_VALUE
    model.put_new_key()
    model.size = 3 * 2**27
    model.put_new_key()
    assert (model.table_length, model.threshold) == (2**30, _INT_MAX)
    assert java_hashmap.table_size_after(3 * 2**27 + 1, 2**29) == 2**30


# String.hashCode values computed by the formula of the Java SE API documentation, s[0]*31^(n-1) + ... + s[n-1];
# the first three are common knowledge ("polygenelubricants" is the widely quoted Integer.MIN_VALUE)
PUBLISHED = [("", 0), ("hello", 99162322), ("polygenelubricants", -(2**31)), ("Aa", 2112), ("BB", 2112)]


def test_published_hashcodes_in_a_default_table() -> None:
    keys = [s.encode() for s, _ in PUBLISHED]
    assert [java_string_hashcode(k) for k in keys] == [h for _, h in PUBLISHED]
    placement = parse_placement("java-hashmap:entries=5")  # new HashMap<>() holding 5 keys: 16 buckets
    buckets = placement.layout.assign(placement.hash_batch(KeyBatch.from_keys(keys)), placement.width).tolist()
    # 99162322 = 0x05E918D2: 0x05E918D2 ^ 0x000005E9 = 0x05E91D3B, bucket 0xB; MIN_VALUE spreads to 0x80008000,
    # bucket 0; "Aa" and "BB" share bucket 2112 & 15 = 0 (their hash codes are equal)
    assert buckets == [0, 11, 0, 0, 0] == [model_bucket(h, 16) for _, h in PUBLISHED]


@pytest.mark.parametrize("capacity", [16, 1, 100_000])
def test_buckets_equal_the_model(
    placement_keys: list[bytes], placement_batch: KeyBatch, spreads: list[int], capacity: int
) -> None:
    entries = len(set(placement_keys))  # puts of keys already in the map do not grow it
    table_length = _model_after(capacity, entries)
    assert entries == 96_229 and table_length == 131_072  # 96,229 <= 0.75 * 2^17; 100,000 rounds up to 2^17
    placement = parse_placement(f"java-hashmap:capacity={capacity},entries={entries}")
    assert placement.layout.shards == table_length and placement.width == 32
    expected = [(table_length - 1) & h for h in spreads]
    assert placement.layout.assign(placement.hash_batch(placement_batch), placement.width).tolist() == expected


def test_growth_moves_the_keys_with_the_new_bit(placement_batch: KeyBatch, spreads: list[int]) -> None:
    layout = parse_placement("java-hashmap:entries=1000").layout  # 2,048 buckets
    values = parse_placement("java-hashmap:entries=1000").hash_batch(placement_batch)
    # the map only doubles: one more unit and twice the units are both the next table
    assert layout.resized(2049) == layout.resized(4096) == java_hashmap.HashMapLayout(4096)
    here, there = layout.assign(values, 32), layout.resized(2049).assign(values, 32)
    moved = [bool(h & 2048) for h in spreads]  # resize's split: (e.hash & oldCap) == 0 stays, else moves by oldCap
    assert (there != here).tolist() == moved and np.all((there - here)[there != here] == 2048)
    assert layout.ideal_moved(2049) == 0.5
    top = java_hashmap.HashMapLayout(2**30)
    assert top.resized(2**30 + 1) == top and top.ideal_moved(2**30 + 1) == 0.0
    assert layout.shares().tolist() == [1 / 2048] * 2048  # 2^32 values, divisible by the table length


def test_the_audit_counts_the_models_buckets() -> None:
    from hashaudit.engine.plan import AuditPlan
    from hashaudit.engine.runner import audit_batches

    rng = np.random.default_rng(20261203)
    keys = [f"user-{n:08d}@example.org".encode() for n in rng.choice(10**8, 700, replace=False)]
    name = "java-hashmap:capacity=16,entries=700"  # 700 > 0.75 * 2^9: 1,024 buckets, the most listed per unit
    plan = AuditPlan(hashes=("xxh3_64",), checks=("buckets",), buckets=(1024,), placements=(name,))
    result = audit_batches([KeyBatch.from_keys(keys)], plan, threads=1)
    findings = {f.check: f for f in next(h for h in result.hashes if h.name == name).findings}
    expected = Counter(model_bucket(java_string_hashcode(k), 1024) for k in keys)
    balance = findings["placement_balance"]
    assert balance.details["keys_per_shard"] == [expected[b] for b in range(1024)]
    assert balance.details["unit"] == "bucket" and balance.verdict == "pass", balance.message
    movement = findings["placement_movement"]
    moved = sum(bool(model_spread(java_string_hashcode(k)) & 1024) for k in keys)
    assert movement.details["moved_to_next"] == movement.details["moved_to_double"] == moved
    assert movement.details["ideal_fraction_to_next"] == 0.5 and movement.verdict == "pass", movement.message
    assert movement.details["grown_to"] == 2048  # HashMap grows by doubling its table
    from hashaudit.checks import CHECKS

    sentence = CHECKS["placement_movement"].sentence
    assert sentence is not None and "growing from 1,024 buckets to 2,048 moves" in sentence(movement)
    big = AuditPlan(hashes=("xxh3_64",), checks=("buckets",), buckets=(1024,), placements=("java-hashmap:entries=800",))
    wide = audit_batches([KeyBatch.from_keys(keys)], big, threads=1)
    balance = next(f for h in wide.hashes for f in h.findings if f.check == "placement_balance")
    assert "keys_per_shard" not in balance.details  # 2,048 buckets: above the 1,024 units listed one by one


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("java-hashmap", "java-hashmap needs entries=N"),
        ("java-hashmap:entries=3145728", None),  # 0.75 * 2^22: the largest table taken
        ("java-hashmap:entries=3145729", "table of 8,388,608 buckets"),
        ("java-hashmap:capacity=5000000,entries=1", "table of 8,388,608 buckets"),
        ("java-hashmap:capacity=-1,entries=1", "java-hashmap takes capacity=N"),
    ],
)
def test_rule_parameters(text: str, words: str | None) -> None:
    if words is None:
        assert parse_placement(text).layout.label == "4194304 buckets"
        return
    with pytest.raises(SettingError, match=words):
        parse_placement(text)


def test_errors() -> None:
    with pytest.raises(ValueError, match="power of two"):
        java_hashmap.HashMapLayout(24)
    with pytest.raises(ValueError, match="non-negative"):
        java_hashmap.table_size_for(-1)
