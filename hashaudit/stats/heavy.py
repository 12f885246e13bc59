"""``HeavyKeys``: the keys that carry the most occurrences (or weight), in bounded memory.

A Misra–Gries summary of ``capacity`` counters over 64-bit key fingerprints: each batch is first reduced to its
distinct fingerprints with their counts, merged into the summary, and when more than ``capacity`` remain, the
(capacity+1)-th largest count is taken off every counter and the non-positive ones are dropped. Every key whose
true count exceeds W / (capacity + 1) of a total weight W is kept, and each kept count is low by at most the sum of
what was taken off (``error_``): exact while the input has at most ``capacity`` distinct keys. The summary merges
with another the same way, so it streams and partitions like every accumulator (Agarwal et al. 2012).

The bytes of each kept key are held so the report can place it on a shard under every hash function audited;
they appear in no report unless ``--show-keys`` is given.

Once the summary has cut counts, its lower bounds depend on the order the keys came in (batch boundaries, the order
partial summaries merge in). When the input can be read again, a further pass settles them: :class:`HeavyCounts`
counts the kept keys exactly, and :meth:`HeavyKeys.settle` keeps those whose exact count exceeds W / (capacity + 1).
Every such key is among the kept ones whatever the order (the guarantee above), so the settled list — every key
heavier than that floor, with its exact count — depends on the input alone.

References
----------
J. Misra, D. Gries, "Finding repeated elements", Science of Computer Programming 2 (1982) 143-152.
P. K. Agarwal, G. Cormode, Z. Huang, J. M. Phillips, Z. Wei, K. Yi, "Mergeable summaries", PODS 2012.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import numpy as np
from numba import njit, uint64

from hashaudit.errors import MergeError
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats import _hooks
from hashaudit.stats._hooks import Fingerprint

DEFAULT_CAPACITY = 1000


@njit(cache=True, nogil=True)
def _aggregate(prints, weights, old_prints, old_counts, keys, sums, first, used):  # pragma: no cover - compiled
    """Sum the weights of equal prints (the summary's entries first, marked ``first = -1``) in an open-addressing
    table whose slots are all empty (``first == -2``) on entry; return how many distinct prints it holds and
    list their slots in ``used``. The caller empties the used slots again."""
    mask = uint64(keys.shape[0] - 1)
    count = 0
    total = old_prints.shape[0] + prints.shape[0]
    for j in range(total):
        if j < old_prints.shape[0]:
            p = old_prints[j]
            w = old_counts[j]
            origin = -1
        else:
            i = j - old_prints.shape[0]
            p = prints[i]
            w = weights[i]
            origin = i
        slot = (p * uint64(0x9E3779B97F4A7C15)) >> uint64(40)
        slot &= mask
        while True:
            if first[slot] == -2:
                keys[slot] = p
                sums[slot] = w
                first[slot] = origin
                used[count] = slot
                count += 1
                break
            if keys[slot] == p:
                sums[slot] += w
                break
            slot = (slot + uint64(1)) & mask
    return count


@njit(cache=True, nogil=True)
def _place(prints, slots):  # pragma: no cover - compiled
    """Index ``prints`` in the open-addressing table ``slots`` (-1 = empty; linear probing)."""
    mask = uint64(slots.shape[0] - 1)
    for i in range(prints.shape[0]):
        slot = ((prints[i] * uint64(0x9E3779B97F4A7C15)) >> uint64(40)) & mask
        while slots[slot] != -1:
            slot = (slot + uint64(1)) & mask
        slots[slot] = i


@njit(cache=True, nogil=True)
def _count(prints, weights, weighted, kept, slots, counts):  # pragma: no cover - compiled
    """Add 1 (or the weight) to ``counts[j]`` for every print equal to ``kept[j]``."""
    mask = uint64(slots.shape[0] - 1)
    for i in range(prints.shape[0]):
        p = prints[i]
        slot = ((p * uint64(0x9E3779B97F4A7C15)) >> uint64(40)) & mask
        while True:
            j = slots[slot]
            if j == -1:
                break
            if kept[j] == p:
                counts[j] += weights[i] if weighted else 1.0
                break
            slot = (slot + uint64(1)) & mask


class HeavyKeys:
    """Misra–Gries summary of the heaviest keys.

    Parameters
    ----------
    capacity : int
        Counters kept; keys heavier than 1/(capacity + 1) of the total are never missed.
    fingerprint : callable, optional
        ``batch -> uint64[n]``, the 64-bit fingerprint that identifies a key; default
        ``hashaudit.hashes.fingerprint.heavy_fingerprints``. Two summaries merge only when they share it.
    """

    def __init__(self, capacity: int = DEFAULT_CAPACITY, fingerprint: Fingerprint | None = None) -> None:
        self.capacity = int(capacity)
        self.fingerprint = _hooks.resolve(_hooks.HEAVY, fingerprint)
        self.prints_ = np.zeros(0, dtype=np.uint64)
        self.counts_ = np.zeros(0, dtype=np.float64)
        self.keys_: dict[int, bytes] = {}
        self.total_ = 0.0
        self.error_ = 0.0
        self.floor_ = 0.0  # once settled: every key above this count is listed, with its exact count
        self._keys = np.zeros(0, dtype=np.uint64)
        self._sums = np.zeros(0, dtype=np.float64)
        self._first = np.zeros(0, dtype=np.int64)
        self._used = np.zeros(0, dtype=np.int64)

    def update(self, batch: KeyBatch, weights: np.ndarray | None = None) -> HeavyKeys:
        """Count the keys of ``batch`` (each occurrence counts 1, or its weight)."""
        if len(batch) == 0:
            return self
        prints = self.fingerprint(batch)
        w = np.ones(len(prints)) if weights is None else np.ascontiguousarray(weights, dtype=np.float64)
        self.total_ += float(w.sum())
        self._absorb(prints, w, lambda i: _key_bytes(batch, i))
        return self

    def _absorb(self, prints: np.ndarray, counts: np.ndarray, key_of) -> None:  # type: ignore[no-untyped-def]
        """Merge (print, count) pairs into the summary; ``key_of(i)`` gives the bytes of the key of ``prints[i]``."""
        need = 2 * (len(prints) + len(self.prints_))
        if len(self._first) < need:
            size = 1 << max(16, (need - 1).bit_length())
            self._keys = np.zeros(size, dtype=np.uint64)
            self._sums = np.zeros(size, dtype=np.float64)
            self._first = np.full(size, -2, dtype=np.int64)
            self._used = np.zeros(size, dtype=np.int64)
        n = _aggregate(prints, counts, self.prints_, self.counts_, self._keys, self._sums, self._first, self._used)
        slots = self._used[:n]
        merged_prints = self._keys[slots].copy()
        merged_counts = self._sums[slots].copy()
        merged_source = self._first[slots].copy()
        self._first[slots] = -2  # empty the table for the next batch
        if len(merged_prints) > self.capacity:
            cut = np.partition(merged_counts, len(merged_counts) - self.capacity - 1)[
                len(merged_counts) - self.capacity - 1
            ]
            merged_counts = merged_counts - cut
            keep = merged_counts > 0
            merged_prints, merged_counts, merged_source = merged_prints[keep], merged_counts[keep], merged_source[keep]
            self.error_ += float(cut)
        kept = set(merged_prints.tolist())
        self.keys_ = {p: k for p, k in self.keys_.items() if p in kept}
        for p, i in zip(merged_prints.tolist(), merged_source.tolist(), strict=True):
            if p not in self.keys_ and i >= 0:
                self.keys_[p] = key_of(i)
        order = np.argsort(merged_prints)  # a canonical order: the summary does not depend on the table's layout
        self.prints_, self.counts_ = merged_prints[order], merged_counts[order]

    def merge(self, other: HeavyKeys) -> HeavyKeys:
        """Combine two summaries (Agarwal et al. 2012: the error bounds add up)."""
        if not isinstance(other, HeavyKeys) or other.capacity != self.capacity:
            raise MergeError("cannot merge heavy-key summaries of different capacities")
        if other.fingerprint is not self.fingerprint:
            raise MergeError("cannot merge heavy-key summaries whose fingerprints come from different functions")
        theirs = other.prints_.tolist()
        self.total_ += other.total_
        self.error_ += other.error_
        self._absorb(other.prints_, other.counts_, lambda i: other.keys_[theirs[i]])
        return self

    def top(self, k: int) -> list[tuple[bytes, float]]:
        """The ``k`` heaviest keys with their (lower-bound) counts, heaviest first."""
        order = np.argsort(-self.counts_, kind="stable")[:k]
        return [(self.keys_[int(self.prints_[i])], float(self.counts_[i])) for i in order]

    @property
    def exact(self) -> bool:
        """True when every kept count is exact: none was ever cut, or a further pass settled them."""
        return self.error_ == 0

    def prune(self) -> bool:
        """Drop the keys that cannot be heavier than W / (capacity + 1) (a kept count is low by at most ``error_``);
        True when some remain, whose exact counts a further read must take."""
        keep = self.counts_ + self.error_ > self.total_ / (self.capacity + 1)
        if not keep.all():
            self.prints_, self.counts_ = self.prints_[keep], self.counts_[keep]
            kept = set(self.prints_.tolist())
            self.keys_ = {p: k for p, k in self.keys_.items() if p in kept}
        return bool(len(self.prints_))

    def settle(self, counted: HeavyCounts) -> HeavyKeys:
        """Replace the lower bounds with the exact counts of a further pass over the same input, keeping the keys
        heavier than W / (capacity + 1); a summary that never cut a count is left as it is."""
        if self.exact:
            return self
        if not np.array_equal(counted.prints_, self.prints_):
            raise MergeError("the exact counts are not those of this summary's keys")
        floor = self.total_ / (self.capacity + 1)
        keep = counted.counts_ > floor
        self.prints_, self.counts_ = self.prints_[keep], counted.counts_[keep].copy()
        kept = set(self.prints_.tolist())
        self.keys_ = {p: k for p, k in self.keys_.items() if p in kept}
        self.error_, self.floor_ = 0.0, floor
        return self


class HeavyCounts:
    """Exact occurrences (or weights) of the keys a :class:`HeavyKeys` summary kept, counted in a further pass over
    the input (keys identified by the summary's fingerprint function); merges like every accumulator (the counts
    add up)."""

    def __init__(self, summary: HeavyKeys, counts: np.ndarray | None = None) -> None:
        self.fingerprint = summary.fingerprint
        self.prints_ = summary.prints_.copy()  # sorted: HeavyKeys keeps its prints in ascending order
        self.counts_ = np.zeros(len(self.prints_), dtype=np.float64)
        if counts is not None:  # counted elsewhere, in the order of ``summary.prints_``
            self.counts_ += counts
        self._slots: np.ndarray | None = None  # an open-addressing index of the prints, made on first use

    def update(self, batch: KeyBatch, weights: np.ndarray | None = None) -> HeavyCounts:
        """Add the occurrences (or weights) in ``batch`` of the counted keys."""
        if len(batch) == 0 or len(self.prints_) == 0:
            return self
        if self._slots is None:
            size = 1 << max(4, (4 * len(self.prints_) - 1).bit_length())  # load at most 1/4: short probes
            self._slots = np.full(size, -1, dtype=np.int64)
            _place(self.prints_, self._slots)
        prints = self.fingerprint(batch)
        w = np.ones(0) if weights is None else np.ascontiguousarray(weights, dtype=np.float64)
        _count(prints, w, weights is not None, self.prints_, self._slots, self.counts_)
        return self

    def merge(self, other: HeavyCounts) -> HeavyCounts:
        if (
            not isinstance(other, HeavyCounts)
            or other.fingerprint is not self.fingerprint
            or not np.array_equal(other.prints_, self.prints_)
        ):
            raise MergeError("cannot merge exact counts of different keys")
        self.counts_ += other.counts_
        return self


def _key_bytes(batch: KeyBatch, i: int) -> bytes:
    return batch.data[batch.offsets[i] : batch.offsets[i + 1]].tobytes()
