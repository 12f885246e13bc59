"""The bucket-count accumulator: merge, copy, equality, pickling and chunking invariance."""

from __future__ import annotations

import pickle

import numpy as np
import pytest

from hashaudit.errors import MergeError
from hashaudit.stats.buckets import BucketCounts

RNG = np.random.default_rng(11)
HASHES = RNG.integers(0, 2**64, size=10_000, dtype=np.uint64)


class TestBucketCounts:
    scheme = "mask"
    buckets = 1024
    width = 64
    hashes = HASHES

    def make(self) -> BucketCounts:
        return BucketCounts("h", 0, self.scheme, self.buckets, self.width)

    def whole(self) -> BucketCounts:
        return self.make().update(self.hashes)

    @pytest.mark.parametrize("chunk", [1, 2, 50, len(HASHES), len(HASHES) + 42])
    def test_chunking_does_not_change_the_result(self, chunk):
        acc = self.make()
        for start in range(0, len(self.hashes), chunk):
            acc.update(self.hashes[start : start + chunk])
        assert acc == self.whole()
        assert acc.result().keys == len(self.hashes)

    def test_merge_of_partitions_equals_one_pass(self):
        parts = np.array_split(self.hashes, 7)
        accs = [self.make().update(p) for p in parts]
        left = accs[0].copy()
        for a in accs[1:]:
            left.merge(a)
        right = accs[-1].copy()
        for a in reversed(accs[:-1]):
            right.merge(a)
        assert left == right == self.whole()

    def test_counts_match_bincount_and_sum_to_n(self):
        result = self.whole().result()
        assert result.counts.sum() == len(self.hashes)
        assert result.load_factor == len(self.hashes) / self.buckets
        assert result.occupancy().sum() == self.buckets

    def test_merge_refuses_other_settings(self):
        other = BucketCounts("h", 1, self.scheme, self.buckets, self.width)
        with pytest.raises(MergeError, match="settings differ"):
            self.make().merge(other)
        with pytest.raises(MergeError):
            self.make().merge(BucketCounts("g", 0, self.scheme, self.buckets, self.width))

    def test_copy_is_independent_and_pickles(self):
        acc = self.whole()
        twin = acc.copy()
        twin.update(self.hashes[:5])
        assert twin != acc
        assert pickle.loads(pickle.dumps(acc)) == acc

    def test_result_is_frozen(self):
        result = self.whole().result()
        with pytest.raises(ValueError):
            result.counts[0] = 5


class TestBucketCountsMod(TestBucketCounts):
    scheme = "mod"
    buckets = 1021


class TestBucketCountsRange32(TestBucketCounts):
    scheme = "range"
    buckets = 1000
    width = 32
    hashes = HASHES >> np.uint64(32)  # a 32-bit function's values (wider ones are refused)


class TestBucketCountsHigh(TestBucketCounts):
    scheme = "high"
    buckets = 4096


def test_counts_widen_to_eight_bytes_before_a_bucket_could_overflow():
    """Four-byte counts halve a large table's memory; they switch to eight bytes before 2^32 keys could meet."""
    values = np.arange(20, dtype=np.uint64)
    small = BucketCounts("xxh3_64", 0, "mod", 7, 64).update(values)
    assert small.counts_.dtype == np.uint32
    near = BucketCounts("xxh3_64", 0, "mod", 7, 64)
    near.keys_seen_ = 2**32 - 10
    near.update(values)
    assert near.counts_.dtype == np.int64
    np.testing.assert_array_equal(near.counts_, small.counts_)
    assert near.result().counts.dtype == small.result().counts.dtype == np.int64
    merged = BucketCounts("xxh3_64", 0, "mod", 7, 64).update(values).merge(near)
    assert merged.counts_.dtype == np.int64 and merged.counts_.sum() == 40
