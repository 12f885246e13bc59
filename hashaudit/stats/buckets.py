"""``BucketCounts``: the mergeable accumulator of keys per bucket for one (hash, seed, scheme, m)."""

from __future__ import annotations

import weakref
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from hashaudit.errors import MergeError
from hashaudit.tables.schemes import add_counts, check_scheme


@dataclass(frozen=True)
class BucketCountsResult:
    """What a ``BucketCounts`` accumulator learned.

    Attributes
    ----------
    hash_name, seed, scheme, buckets, width : the settings the counts belong to.
    keys : int
        Keys counted.
    counts : numpy.ndarray of int64
        Keys per bucket (length ``buckets``).
    """

    hash_name: str
    seed: int
    scheme: str
    buckets: int
    width: int
    keys: int
    counts: np.ndarray

    @cached_property
    def occupied(self) -> np.ndarray:
        """The counts of the occupied buckets, in bucket order (every test of fit needs only these)."""
        return self.counts[self.counts > 0]

    @property
    def load_factor(self) -> float:
        """Keys per bucket, n / m."""
        return self.keys / self.buckets

    def occupancy(self) -> np.ndarray:
        """How many buckets hold exactly k keys, for k = 0 .. max load."""
        return np.bincount(self.counts)


class BucketCounts:
    """Keys per bucket for one hash function, seed, bucketing scheme and table size.

    Follows the accumulator contract of the project: ``update(hashes)`` adds a batch of hash values,
    ``merge(other)`` adds another accumulator's counts (associative and commutative), ``result()`` returns a
    frozen ``BucketCountsResult``. Results do not depend on how the keys were split into batches.

    Parameters
    ----------
    hash_name : str
    seed : int
    scheme : {"mod", "mask", "high", "range"}
    buckets : int
    width : int
        Output width of the hash in bits.
    """

    def __init__(self, hash_name: str, seed: int, scheme: str, buckets: int, width: int) -> None:
        check_scheme(scheme, buckets)
        self.hash_name = hash_name
        self.seed = int(seed)
        self.scheme = scheme
        self.buckets = int(buckets)
        self.width = int(width)
        # 4-byte counts while no bucket can pass 2^32 - 1 (half the memory of a large table), 8-byte after
        self.counts_ = np.zeros(self.buckets, dtype=np.uint32)
        self.keys_seen_ = 0
        # the last result() while something still holds it (an int64 copy of the counts: a table of 2^22 buckets
        # is 32 MiB, which the memory budget does not count), and until the counts change
        self._result: weakref.ReferenceType[BucketCountsResult] | None = None

    def settings(self) -> tuple[str, int, str, int, int]:
        """The settings two accumulators must share to be merged."""
        return (self.hash_name, self.seed, self.scheme, self.buckets, self.width)

    def update(self, hashes: np.ndarray) -> BucketCounts:
        """Count a batch of hash values (``uint64[n]``, or ``uint64[n, 2]`` for 128-bit functions)."""
        self._widen_for(int(hashes.shape[0]))
        self._result = None
        add_counts(hashes, self.scheme, self.buckets, self.width, self.counts_)
        self.keys_seen_ += int(hashes.shape[0])
        return self

    def _widen_for(self, more: int) -> None:
        """Switch to 8-byte counts before ``more`` keys could take a bucket past 2^32 - 1."""
        if self.counts_.dtype == np.uint32 and self.keys_seen_ + more > np.iinfo(np.uint32).max:
            self.counts_ = self.counts_.astype(np.int64)

    def merge(self, other: BucketCounts) -> BucketCounts:
        """Add ``other``'s counts to this accumulator (in place); settings must match."""
        if not isinstance(other, BucketCounts) or other.settings() != self.settings():
            mine = self.settings()
            theirs = other.settings() if isinstance(other, BucketCounts) else type(other).__name__
            raise MergeError(f"cannot merge bucket counts {theirs} into {mine}: settings differ")
        self._widen_for(other.keys_seen_)
        self._result = None
        if self.counts_.dtype != other.counts_.dtype:
            self.counts_ = self.counts_.astype(np.int64)
        self.counts_ += other.counts_
        self.keys_seen_ += other.keys_seen_
        return self

    def copy(self) -> BucketCounts:
        """An independent copy."""
        twin = BucketCounts(*self.settings())
        twin.counts_ = self.counts_.copy()
        twin.keys_seen_ = self.keys_seen_
        return twin

    def result(self) -> BucketCountsResult:
        """The counts so far (int64), frozen: the same object while it is in use and no more keys were counted
        (every check of a table shares one copy; once none holds it, its memory is given back)."""
        kept = self._result() if self._result is not None else None
        if kept is None:
            counts = self.counts_.astype(np.int64)
            counts.setflags(write=False)
            kept = BucketCountsResult(
                self.hash_name, self.seed, self.scheme, self.buckets, self.width, self.keys_seen_, counts
            )
            self._result = weakref.ref(kept)
        return kept

    def __getstate__(self) -> dict:
        return {**self.__dict__, "_result": None}  # a weak reference does not pickle; the result is made again

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, BucketCounts):
            return NotImplemented
        return (
            self.settings() == other.settings()
            and self.keys_seen_ == other.keys_seen_
            and bool(np.array_equal(self.counts_, other.counts_))
        )

    def __repr__(self) -> str:
        return (
            f"BucketCounts({self.hash_name!r}, seed={self.seed}, scheme={self.scheme!r}, "
            f"buckets={self.buckets}, keys={self.keys_seen_})"
        )
