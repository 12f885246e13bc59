"""Merge laws of every accumulator, checked on small inputs that hypothesis chooses.

For each accumulator the same input is split into parts (each part a list of batches); one accumulator per
part is built and the parts are merged left to right, right to left, and along a random tree over a random
permutation of the parts. Every way must equal one accumulator fed all batches in stream order (the
accumulator contract in DESIGN.md: merge is associative and commutative, and results do not depend on batch
boundaries). Where the statistic is simple enough, the result is also compared with a plain-Python reference
(``collections.Counter``, ``sorted``), written here and independent of the library's kernels.
"""

from __future__ import annotations

import math
import os
from collections import Counter
from collections.abc import Callable

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hashaudit.hashes.fingerprint import sample_priorities
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats.avalanche import KeySample
from hashaudit.stats.bits import BitCounts
from hashaudit.stats.buckets import BucketCounts
from hashaudit.stats.collisions import LARGEST_GROUPS, CollisionGroup, FullCollisions
from hashaudit.stats.distinct import DistinctKeys
from hashaudit.stats.heavy import HeavyKeys
from hashaudit.stats.shards import BucketLoads, ShardCounts
from hashaudit.tables.prefix import FirstValues
from hashaudit.tables.shards import SHARD_SCHEMES, ShardLayout

# Deterministic in CI: examples come from a fixed derivation, and no example database is read or written.
PROPERTY = settings(max_examples=40, deadline=None, derandomize=True, database=None)
FEW = settings(max_examples=12, deadline=None, derandomize=True, database=None)

MASK64 = (1 << 64) - 1
DISTINCT_BUDGET = 4 << 20  # the smallest budget DistinctKeys accepts


# ---------------------------------------------------------------------------------------------------------
# Merge orders
# ---------------------------------------------------------------------------------------------------------


def merge_orders(parts: list, build: Callable, data: st.DataObject) -> dict[str, object]:
    """The accumulator of all parts, merged four ways: fed in one stream, folded left, folded right, and merged
    along a random tree over a random permutation of the parts. ``build(batches)`` makes a fresh accumulator
    fed ``batches`` in order."""
    every = [batch for part in parts for batch in part]
    single = build(every)

    left = build(parts[0])
    for part in parts[1:]:
        left = left.merge(build(part))

    right = build(parts[-1])
    for part in reversed(parts[:-1]):
        right = build(part).merge(right)

    order = data.draw(st.permutations(range(len(parts))), label="permutation")
    pending = [build(parts[i]) for i in order]
    while len(pending) > 1:
        i = data.draw(st.integers(0, len(pending) - 2), label="merge at")
        a, b = pending[i], pending[i + 1]
        pending[i : i + 2] = [b.merge(a) if data.draw(st.booleans(), label="swap") else a.merge(b)]
    return {"single": single, "left": left, "right": right, "tree": pending[0]}


def parts_of(batch: st.SearchStrategy, max_parts: int = 4, max_batches: int = 3) -> st.SearchStrategy:
    """Parts (at least one), each a list of batches (possibly none)."""
    return st.lists(st.lists(batch, max_size=max_batches), min_size=1, max_size=max_parts)


# ---------------------------------------------------------------------------------------------------------
# Hash-value strategies: a few small values (so that collisions and equal buckets happen) mixed with full-width
# random ones.
# ---------------------------------------------------------------------------------------------------------


def words(width: int) -> st.SearchStrategy[int]:
    top = (1 << min(width, 64)) - 1
    return st.one_of(st.integers(0, 7), st.integers(top - 3, top), st.integers(0, top))


def hash_values(width: int, max_size: int = 150) -> st.SearchStrategy[np.ndarray]:
    """A batch of hash values: ``uint64[n]``, or ``uint64[n, 2]`` (low, high) for 128-bit functions."""
    if width == 128:
        rows = st.lists(st.tuples(words(64), st.sampled_from([0, 1, MASK64])), max_size=max_size)
        return rows.map(lambda r: np.array(r, dtype=np.uint64).reshape(-1, 2))
    return st.lists(words(width), max_size=max_size).map(lambda v: np.array(v, dtype=np.uint64))


def concat_values(parts: list[list[np.ndarray]], width: int) -> np.ndarray:
    every = [b for part in parts for b in part]
    empty = np.zeros((0, 2) if width == 128 else 0, dtype=np.uint64)
    return np.concatenate([empty, *every])


def as_ints(values: np.ndarray) -> list[int]:
    if values.ndim == 1:
        return [int(v) for v in values]
    return [(int(hi) << 64) | int(lo) for lo, hi in values]


# ---------------------------------------------------------------------------------------------------------
# BucketCounts
# ---------------------------------------------------------------------------------------------------------

TABLE_SETTINGS = st.one_of(
    st.tuples(st.sampled_from(["mod", "range"]), st.integers(1, 40)),
    st.tuples(st.sampled_from(["mask", "high", "mod", "range"]), st.sampled_from([1, 2, 8, 32])),
)


@pytest.mark.parametrize("width", [32, 64, 128])
@PROPERTY
@given(table=TABLE_SETTINGS, data=st.data())
def test_bucket_counts_merge_in_any_order_equals_one_pass(width, table, data):
    scheme, buckets = table
    parts = data.draw(parts_of(hash_values(width)), label="parts")

    def build(batches):
        acc = BucketCounts("h", 5, scheme, buckets, width)
        for b in batches:
            acc.update(b)
        return acc

    merged = merge_orders(parts, build, data)
    single = merged["single"]
    for way, acc in merged.items():
        assert acc == single, way
        assert np.array_equal(acc.result().counts, single.result().counts), way
    # Reference: every value's bucket by the scheme's definition, with Python integers.
    values = as_ints(concat_values(parts, width))
    low = [v & MASK64 for v in values]
    w = min(width, 64)
    bits = buckets.bit_length() - 1
    index = {
        "mod": lambda v: v % buckets,
        "mask": lambda v: v & (buckets - 1),
        "high": lambda v: v >> (w - bits) if bits else 0,
        "range": lambda v: (v * buckets) >> w,
    }[scheme]
    expected = np.bincount([index(v) for v in low], minlength=buckets)
    assert np.array_equal(single.result().counts, expected)
    assert single.result().keys == len(values)


# ---------------------------------------------------------------------------------------------------------
# BitCounts
# ---------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("width", [32, 64, 128])
@PROPERTY
@given(data=st.data())
def test_bit_counts_merge_in_any_order_equals_one_pass(width, data):
    parts = data.draw(parts_of(hash_values(width)), label="parts")

    def build(batches):
        acc = BitCounts("h", 1, width)
        for b in batches:
            acc.update(b)
        return acc

    merged = merge_orders(parts, build, data)
    single = merged["single"]
    for way, acc in merged.items():
        assert acc == single, way
    # Reference: count the bits of every value with Python integers.
    values = as_ints(concat_values(parts, width))
    bits = np.array([[(v >> j) & 1 for j in range(width)] for v in values], dtype=np.int64).reshape(-1, width)
    result = single.result()
    assert result.keys == len(values)
    assert np.array_equal(result.ones, bits.sum(axis=0))
    assert np.array_equal(result.both, bits.T @ bits)


# ---------------------------------------------------------------------------------------------------------
# FullCollisions, in memory and spilled to disk
# ---------------------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def spill_root(tmp_path_factory):
    return str(tmp_path_factory.mktemp("spill"))


def collision_reference(values: np.ndarray) -> tuple[int, int, int, tuple[CollisionGroup, ...]]:
    """(colliding pairs, keys in collisions, groups, largest groups) counted with a Counter."""
    shared = {v: g for v, g in Counter(as_ints(values)).items() if g > 1}
    largest = sorted((CollisionGroup(v, g) for v, g in shared.items()), key=lambda c: (-c.keys, c.hash_value))
    pairs = sum(math.comb(g, 2) for g in shared.values())
    return pairs, sum(shared.values()), len(shared), tuple(largest[:LARGEST_GROUPS])


@pytest.mark.parametrize("width", [32, 64, 128])
@pytest.mark.parametrize("memory_bytes", [0, 40, 1 << 30], ids=["spill-always", "spill-often", "in-memory"])
@PROPERTY
@given(data=st.data())
def test_full_collisions_merge_in_any_order_equals_one_pass(width, memory_bytes, spill_root, data):
    parts = data.draw(parts_of(hash_values(width)), label="parts")
    made: list[FullCollisions] = []

    def build(batches):
        acc = FullCollisions("h", 2, width, memory_bytes, spill_root)
        made.append(acc)
        for b in batches:
            acc.update(b)
        return acc

    try:
        merged = merge_orders(parts, build, data)
        single = merged["single"]
        values = concat_values(parts, width)
        if memory_bytes < {32: 4, 64: 8, 128: 16}[width] * len(values):  # 32-bit values are kept in 4 bytes
            assert single.spilled
        for way, acc in merged.items():
            assert acc == single, way
        pairs, keys, groups, largest = collision_reference(values)
        for way, acc in merged.items():
            result = acc.result()
            assert (result.keys, result.colliding_pairs, result.keys_in_collisions, result.groups) == (
                len(values),
                pairs,
                keys,
                groups,
            ), way
            assert result.largest == largest, way
            assert not acc.spilled, way  # computing the result removes the spill folder
    finally:
        for acc in made:
            acc.close()
    assert os.listdir(spill_root) == []


# ---------------------------------------------------------------------------------------------------------
# DistinctKeys (stores of the same part)
# ---------------------------------------------------------------------------------------------------------

KEYS = st.one_of(st.integers(0, 30).map(lambda i: b"key-%d" % i), st.binary(max_size=12))
KEY_BATCHES = st.lists(KEYS, max_size=40)


@PROPERTY
@given(layout=st.sampled_from([(0, 1), (0, 2), (1, 2), (0, 4), (3, 4)]), data=st.data())
def test_distinct_keys_merge_in_any_order_equals_one_pass(layout, data):
    part, count = layout
    parts = data.draw(parts_of(KEY_BATCHES), label="parts")

    def build(batches):
        store = DistinctKeys(DISTINCT_BUDGET, part, count)
        for b in batches:
            store.update(KeyBatch.from_keys(b))
        return store

    merged = merge_orders(parts, build, data)
    single = merged["single"]
    for way, store in merged.items():
        assert np.array_equal(store.fingerprints(), single.fingerprints()), way
        assert (store.distinct_, store.keys_seen_) == (single.distinct_, single.keys_seen_), way
    every = [k for part_ in parts for b in part_ for k in b]
    assert single.keys_seen_ == len(every)
    if count == 1:
        assert single.distinct_ == len(set(every))


@FEW
@given(keys=st.lists(KEYS, max_size=120), cuts=st.lists(st.integers(0, 120), max_size=6))
def test_distinct_keys_parts_together_mark_each_first_occurrence_once(keys, cuts):
    """Over all parts of the fingerprint space, every distinct key is marked first exactly once, at its first
    occurrence in stream order, whatever the batch boundaries."""
    bounds = sorted({0, len(keys), *(min(c, len(keys)) for c in cuts)})
    batches = [keys[a:b] for a, b in zip(bounds, bounds[1:], strict=False)]
    first_positions = sorted({k: i for i, k in reversed(list(enumerate(keys)))}.values())
    for count in (1, 2, 4):
        marked = np.zeros(len(keys), dtype=np.int64)
        distinct = 0
        for part in range(count):
            store = DistinctKeys(DISTINCT_BUDGET, part, count)
            flags = [store.update(KeyBatch.from_keys(b)) for b in batches]
            marked += np.concatenate([np.zeros(0, dtype=bool), *flags]).astype(np.int64)
            distinct += store.distinct_
        assert distinct == len(set(keys))
        assert np.flatnonzero(marked).tolist() == first_positions
        assert marked.max(initial=0) <= 1


@settings(max_examples=4, deadline=None, derandomize=True, database=None)
@given(
    sizes=st.tuples(st.integers(20_000, 60_000), st.integers(20_000, 60_000)),
    overlap=st.integers(0, 20_000),
)
def test_distinct_keys_merge_across_table_growth(sizes, overlap):
    """Two stores whose union no longer fits the first table: the merge grows the table and keeps every key once."""
    a_keys = np.arange(sizes[0], dtype=np.uint64)
    b_start = sizes[0] - min(overlap, sizes[0])  # the last ``overlap`` keys of a are also keys of b
    b_keys = np.arange(b_start, b_start + sizes[1], dtype=np.uint64)
    a, b, single = DistinctKeys(64 << 20), DistinctKeys(64 << 20), DistinctKeys(64 << 20)
    a.update(KeyBatch.from_uint64(a_keys))
    b.update(KeyBatch.from_uint64(b_keys))
    single.update(KeyBatch.from_uint64(a_keys))
    single.update(KeyBatch.from_uint64(b_keys))
    union = len(np.union1d(a_keys, b_keys))
    merged = a.merge(b)
    assert merged.distinct_ == single.distinct_ == union
    assert np.array_equal(merged.fingerprints(), single.fingerprints())


# ---------------------------------------------------------------------------------------------------------
# ShardCounts and BucketLoads
# ---------------------------------------------------------------------------------------------------------

WEIGHTED_VALUES = hash_values(64, max_size=60).flatmap(
    lambda v: st.tuples(
        st.just(v),
        st.one_of(
            st.none(),
            # small integers: sums of them are exact in float64, so every order gives the same bits
            st.lists(st.integers(0, 9), min_size=len(v), max_size=len(v)).map(lambda w: np.array(w, dtype=np.float64)),
        ),
    )
)


@st.composite
def shard_layouts(draw) -> ShardLayout:
    scheme = draw(st.sampled_from(SHARD_SCHEMES))
    shards = draw(st.integers(1, 9))
    weights: tuple[float, ...] = ()
    if scheme in ("rendezvous", "ring") and draw(st.booleans()):
        weights = tuple(draw(st.lists(st.sampled_from([0.5, 1.0, 2.0, 3.0]), min_size=shards, max_size=shards)))
    vnodes = draw(st.sampled_from([1, 4, 160]))
    return ShardLayout(scheme, shards, weights, vnodes)


@PROPERTY
@given(layout=shard_layouts(), width=st.sampled_from([32, 64]), data=st.data())
def test_shard_counts_merge_in_any_order_equals_one_pass(layout, width, data):
    parts = data.draw(parts_of(WEIGHTED_VALUES), label="parts")
    if width == 32:
        parts = [[(v & np.uint64(0xFFFFFFFF), w) for v, w in part] for part in parts]

    def build(batches):
        acc = ShardCounts("h", width, layout)
        for values, weights in batches:
            acc.update(values)
            acc.add_load(values, weights)
        return acc

    merged = merge_orders(parts, build, data)
    single = merged["single"]
    for way, acc in merged.items():
        assert np.array_equal(acc.distinct_, single.distinct_), way
        assert np.array_equal(acc.load_, single.load_), way
        assert (acc.moved_next_, acc.moved_double_) == (single.moved_next_, single.moved_double_), way
    every = [b for part in parts for b in part]
    values = np.concatenate([np.zeros(0, dtype=np.uint64), *(v for v, _ in every)])
    weights = np.concatenate([np.zeros(0), *(np.ones(len(v)) if w is None else w for v, w in every)])
    here = layout.assign(values, width)
    assert np.array_equal(single.distinct_, np.bincount(here, minlength=layout.shards))
    assert np.array_equal(single.load_, np.bincount(here, weights=weights, minlength=layout.shards))
    assert single.moved_next_ == int(np.count_nonzero(layout.resized(layout.shards + 1).assign(values, width) != here))


@PROPERTY
@given(table=TABLE_SETTINGS, data=st.data())
def test_bucket_loads_merge_in_any_order_equals_one_pass(table, data):
    scheme, buckets = table
    parts = data.draw(parts_of(WEIGHTED_VALUES), label="parts")

    def build(batches):
        acc = BucketLoads(scheme, buckets, 64)
        for values, weights in batches:
            acc.add_load(values, weights)
        return acc

    merged = merge_orders(parts, build, data)
    single = merged["single"]
    for way, acc in merged.items():
        assert np.array_equal(acc.load_, single.load_), way
        assert acc.hottest(3) == single.hottest(3), way
    total = sum(float(len(v)) if w is None else float(w.sum()) for part in parts for v, w in part)
    assert float(single.load_.sum()) == total


# ---------------------------------------------------------------------------------------------------------
# HeavyKeys
# ---------------------------------------------------------------------------------------------------------

HEAVY_BATCHES = st.lists(
    st.tuples(st.sampled_from([b"a", b"b", b"c", b"d", b"e", b"f", b"g", b""]), st.integers(0, 6)), max_size=25
)


def heavy_build(capacity: int, weighted: bool) -> Callable:
    def build(batches):
        acc = HeavyKeys(capacity)
        for batch in batches:
            keys = KeyBatch.from_keys([k for k, _ in batch])
            acc.update(keys, np.array([w for _, w in batch], dtype=np.float64) if weighted else None)
        return acc

    return build


def true_counts(parts: list, weighted: bool) -> Counter:
    counts: Counter = Counter()
    for part in parts:
        for batch in part:
            for key, weight in batch:
                counts[key] += weight if weighted else 1
    return counts


@PROPERTY
@given(capacity=st.integers(8, 12), weighted=st.booleans(), data=st.data())
def test_heavy_keys_are_exact_while_distinct_keys_fit(capacity, weighted, data):
    """At most eight distinct keys and at least eight counters: every merge order gives the exact counts."""
    parts = data.draw(parts_of(HEAVY_BATCHES), label="parts")
    expected = true_counts(parts, weighted)
    for way, acc in merge_orders(parts, heavy_build(capacity, weighted), data).items():
        assert acc.exact, way
        assert dict(acc.top(capacity)) == dict(expected), way
        assert acc.total_ == sum(expected.values()), way


@PROPERTY
@given(capacity=st.integers(1, 5), weighted=st.booleans(), data=st.data())
def test_heavy_keys_bounds_hold_when_counters_are_cut(capacity, weighted, data):
    """More distinct keys than counters: every kept count is low by at most the error, a key not kept weighs at
    most the error, and the error is at most (total - kept) / (capacity + 1) (the Misra-Gries bound, which
    merging keeps)."""
    parts = data.draw(parts_of(HEAVY_BATCHES), label="parts")
    expected = true_counts(parts, weighted)
    for way, acc in merge_orders(parts, heavy_build(capacity, weighted), data).items():
        kept = dict(acc.top(capacity + 1))
        assert len(kept) <= capacity, way
        error = acc.error_
        for key, count in kept.items():
            assert count <= expected[key] <= count + error, (way, key)
        for key, weight in expected.items():
            if key not in kept:
                assert weight <= error, (way, key)
        assert acc.total_ == sum(expected.values()), way
        assert error * (capacity + 1) <= acc.total_ - sum(kept.values()), way
        if len(expected) <= capacity:
            assert acc.exact and kept == {k: v for k, v in expected.items()}, way


# ---------------------------------------------------------------------------------------------------------
# FirstValues
# ---------------------------------------------------------------------------------------------------------


@st.composite
def positioned_parts(draw) -> tuple[list[list[tuple[np.ndarray, np.ndarray]]], dict[int, int]]:
    """A stream of distinct positions with values, dealt to parts; each part gets its positions as calls of
    increasing positions, the calls in any order (a later pass may bring earlier positions)."""
    n = draw(st.integers(0, 60))
    positions = sorted(draw(st.sets(st.integers(0, 10_000), min_size=n, max_size=n)))
    values = {p: draw(st.integers(0, MASK64)) for p in positions}
    count = draw(st.integers(1, 4))
    owner = draw(st.lists(st.integers(0, count - 1), min_size=n, max_size=n))
    parts = []
    for part in range(count):
        mine = [p for p, o in zip(positions, owner, strict=True) if o == part]
        cuts = sorted(set(draw(st.lists(st.integers(0, len(mine)), max_size=4))) | {0, len(mine)})
        calls = [mine[a:b] for a, b in zip(cuts, cuts[1:], strict=False)]
        calls = draw(st.permutations(calls))
        parts.append([(np.array([values[p] for p in c], dtype=np.uint64), np.array(c, dtype=np.int64)) for c in calls])
    return parts, values


@PROPERTY
@given(stream=positioned_parts(), limit=st.integers(0, 70), data=st.data())
def test_first_values_keep_the_first_positions_in_any_merge_order(stream, limit, data):
    parts, values = stream

    def build(batches):
        acc = FirstValues(limit)
        for vals, positions in batches:
            acc.update(vals, positions)
        return acc

    expected = [values[p] for p in sorted(values)[:limit]]
    for way, acc in merge_orders(parts, build, data).items():
        assert acc.values().tolist() == expected, way


# ---------------------------------------------------------------------------------------------------------
# KeySample
# ---------------------------------------------------------------------------------------------------------


@PROPERTY
@given(size=st.integers(1, 8), seed=st.integers(0, 2**64), data=st.data())
def test_key_sample_merge_equals_one_sample_of_everything(size, seed, data):
    parts = data.draw(parts_of(KEY_BATCHES), label="parts")

    def build(batches):
        sample = KeySample(size, seed)
        for b in batches:
            sample.update(KeyBatch.from_keys(b))
        return sample

    merged = merge_orders(parts, build, data)
    single = merged["single"]
    for way, sample in merged.items():
        assert sample == single, way
    # Reference: the ``size`` distinct keys with the smallest (priority, bytes), priorities of the keys one by one.
    distinct = sorted({k for part in parts for b in part for k in b})
    priority = {k: int(sample_priorities(KeyBatch.from_keys([k]), seed)[0]) for k in distinct}
    expected = sorted(distinct, key=lambda k: (priority[k], k))[:size]
    assert single.result().to_list() == expected
