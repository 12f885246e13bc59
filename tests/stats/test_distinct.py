"""The distinct-key filter against a Python set."""

from __future__ import annotations

import numpy as np
import pytest

import hashaudit.hashes  # noqa: F401  (provides the default fingerprint functions)
from hashaudit.errors import UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats.distinct import DistinctKeys


def test_first_occurrences_match_a_python_set():
    rng = np.random.default_rng(31)
    keys = [b"%d" % x for x in rng.integers(0, 30_000, size=100_000)] + [b""] * 3
    filt = DistinctKeys()
    marks = []
    for start in range(0, len(keys), 7_777):  # several batches and table growths
        marks.extend(filt.update(KeyBatch.from_keys(keys[start : start + 7_777])).tolist())
    seen: set[bytes] = set()
    expected = []
    for k in keys:
        expected.append(k not in seen)
        seen.add(k)
    assert marks == expected
    assert filt.distinct_ == len(seen) and filt.repeats == len(keys) - len(seen)


def test_merge_is_the_union():
    a, b = DistinctKeys(), DistinctKeys()
    a.update(KeyBatch.from_keys([b"x", b"y", b"x"]))
    b.update(KeyBatch.from_keys([b"y", b"z"]))
    a.merge(b)
    assert a.distinct_ == 3 and a.keys_seen_ == 5


def test_budget():
    with pytest.raises(UsageError, match="4 MiB"):
        DistinctKeys(memory_bytes=1000)
    small = DistinctKeys(memory_bytes=4 << 20)
    with pytest.raises(UsageError, match="--all-keys"):
        small.update(KeyBatch.from_uint64(np.arange(1_000_000, dtype=np.uint64)))


def test_reserving_space_changes_nothing_but_growth():
    keys = [b"%d" % (i % 5000) for i in range(20_000)]
    grown, reserved = DistinctKeys(), DistinctKeys()
    reserved.reserve(20_000)
    size_after_reserve = len(reserved.table_)
    a = grown.update(KeyBatch.from_keys(keys))
    b = reserved.update(KeyBatch.from_keys(keys))
    assert a.tolist() == b.tolist() and grown.distinct_ == reserved.distinct_ == 5000
    assert reserved.slots_ * 7 / 8 >= 20_000 and len(reserved.table_) == size_after_reserve  # never grew
    small = DistinctKeys(memory_bytes=4 << 20)
    small.reserve(10**9)  # never beyond the budget
    assert small.memory_in_use <= 4 << 20


def test_growing_in_place_keeps_the_table_sorted_and_exact():
    """Enough keys to grow the table in place several times (65,536 home slots to over a million); the table stays
    sorted by (high, low) with no repeat, every fingerprint at or after its home slot with no empty slot between,
    and the marks agree with numpy's unique."""
    rng = np.random.default_rng(5)
    values = rng.integers(0, 600_000, size=1_500_000, dtype=np.uint64)
    store = DistinctKeys()
    marks = np.concatenate([store.update(KeyBatch.from_uint64(part)) for part in np.array_split(values, 9)])
    _, first_index = np.unique(values, return_index=True)
    expected = np.zeros(len(values), dtype=bool)
    expected[first_index] = True
    assert np.array_equal(marks, expected)
    prints = store.fingerprints()
    assert len(prints) == store.distinct_ == len(first_index)
    order = np.lexsort((prints[:, 1], prints[:, 0]))
    assert np.array_equal(order, np.arange(len(prints)))
    assert np.all(np.any(prints[1:] != prints[:-1], axis=1))
    filled = (store.table_[:, 0] | store.table_[:, 1]) != 0
    occupied = np.flatnonzero(filled)
    homes = ((store.table_[occupied, 0] >> np.uint64(32)) * np.uint64(store.slots_)) >> np.uint64(32)
    assert np.all(occupied >= homes)
    empty = np.concatenate(([0], np.cumsum(~filled)))
    assert np.all(empty[occupied] == empty[homes.astype(np.int64)])  # no empty slot from home to place: findable
    assert store.slots_ >= 8 * 65_536


def test_fingerprints_are_murmur3_x64_128():
    """The default fingerprint is MurmurHash3 x64_128 (checked against the mmh3 reference binding) under the
    distinct-key seed of the hash layer."""
    mmh3 = pytest.importorskip("mmh3")
    from hashaudit.hashes.fingerprint import DISTINCT_SEED

    store = DistinctKeys()
    store.update(KeyBatch.from_keys([b"crate-0001"]))
    ref = mmh3.hash128(b"crate-0001", DISTINCT_SEED, x64arch=True, signed=False)
    ((hi, lo),) = store.fingerprints().tolist()
    assert (lo, hi) == (ref & (2**64 - 1), ref >> 64)


def test_parts_split_the_distinct_keys_without_overlap():
    """Each key belongs to exactly one part (by its fingerprint's top bits): the parts' first occurrences are
    disjoint and together are the first occurrences of the whole stream."""
    rng = np.random.default_rng(8)
    values = rng.integers(0, 50_000, size=200_000, dtype=np.uint64)
    batch = KeyBatch.from_uint64(values)
    whole = DistinctKeys().update(batch)
    marks = [DistinctKeys(part=p, parts=4).update(batch) for p in range(4)]
    assert not np.any(np.sum(marks, axis=0) > 1)
    assert np.array_equal(np.any(marks, axis=0), whole)
    assert all(0.2 < m.sum() / whole.sum() < 0.3 for m in marks)  # about a quarter each
    with pytest.raises(UsageError, match="power of two"):
        DistinctKeys(part=0, parts=3)


def test_fingerprints_taken_elsewhere_give_the_same_marks():
    # the engine takes a batch's fingerprints on its reading thread and hands them in
    rng = np.random.default_rng(5)
    values = rng.integers(0, 5_000, size=20_000, dtype=np.uint64)
    batches = [KeyBatch.from_uint64(values[i : i + 4_000]) for i in range(0, len(values), 4_000)]
    plain, given = DistinctKeys(), DistinctKeys()
    for batch in batches:
        expected = plain.update(batch)
        assert np.array_equal(given.update(batch, given.fingerprint(batch)), expected)
    assert given.distinct_ == plain.distinct_ == len(np.unique(values))
    with pytest.raises(UsageError, match="fingerprints for a batch of"):
        given.update(batches[0], given.fingerprint(batches[1])[:10])
