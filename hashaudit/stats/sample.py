"""``KeySample``: a deterministic, mergeable uniform sample of the distinct keys of a stream (a bottom-k sample).

Every key gets a priority from a keyed PRF (by default SipHash-2-4 under a key derived from the sample seed,
``hashaudit.hashes.fingerprint.sample_priorities``) and the ``size`` distinct keys with the smallest priorities are
kept. The sample is therefore a uniform sample of the distinct keys, depends only on the set of keys and the seed
(never on batch boundaries or order), and two samples merge exactly into the sample of the union (Cohen & Kaplan
2007). The avalanche, neighbour and seed checks run on it.

References
----------
E. Cohen, H. Kaplan, "Summarizing data using bottom-k sketches", PODC 2007, 225-234.
J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import numpy as np
from numba import njit

from hashaudit.errors import MergeError, UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats import _hooks
from hashaudit.stats._hooks import Priority

DEFAULT_SAMPLE_SIZE = 4096
LONG_KEY_END_BYTES = 1024
"""The deep checks see a sampled key longer than twice this as its first and last this many bytes."""


# ---------------------------------------------------------------------------------------------------------
# Kernels


@njit(cache=True, nogil=True)
def _key_compare(data_a, start_a, len_a, data_b, start_b, len_b):  # pragma: no cover - compiled
    """-1, 0 or 1: lexicographic order of two byte strings (a proper prefix sorts first)."""
    common = min(len_a, len_b)
    for t in range(common):
        x = data_a[start_a + t]
        y = data_b[start_b + t]
        if x != y:
            return -1 if x < y else 1
    if len_a == len_b:
        return 0
    return -1 if len_a < len_b else 1


@njit(cache=True, nogil=True)
def _bottom_k_kernel(data, offsets, priorities, order, limit, out):  # pragma: no cover - compiled
    """Walk keys in priority order (``order``), drop repeated keys, order keys sharing a priority by their bytes,
    and write the first ``limit`` distinct keys (whole priority runs) to ``out``; returns how many were written."""
    n = order.shape[0]
    written = 0
    i = 0
    while i < n and written < limit:
        run_priority = priorities[order[i]]
        j = i
        run_start = written
        while j < n and priorities[order[j]] == run_priority:
            k = order[j]
            s = offsets[k]
            length = offsets[k + 1] - s
            # insertion into out[run_start:written], sorted by bytes; equal bytes = a repeat of a kept key
            position = written
            duplicate = False
            for q in range(run_start, written):
                other = out[q]
                c = _key_compare(data, s, length, data, offsets[other], offsets[other + 1] - offsets[other])
                if c == 0:
                    duplicate = True
                    break
                if c < 0:
                    position = q
                    break
            if not duplicate:
                for q in range(written, position, -1):
                    out[q] = out[q - 1]
                out[position] = k
                written += 1
            j += 1
        i = j
    return written


# ---------------------------------------------------------------------------------------------------------
# Bottom-k selection


def _bottom_k(batch: KeyBatch, priorities: np.ndarray, limit: int) -> np.ndarray:
    """Indices of the ``limit`` distinct keys with the smallest (priority, bytes), in that order."""
    order = np.argsort(priorities, kind="stable").astype(np.int64)
    out = np.empty(len(batch), dtype=np.int64)  # whole priority runs are written: room for every key
    written = _bottom_k_kernel(batch.data, batch.offsets, priorities, order, limit, out)
    return out[: min(written, limit)]


def _priority_bound(priorities: np.ndarray, size: int) -> int:
    """A value t such that at least ``size`` distinct priorities are <= t (or the largest priority)."""
    count = 2 * size
    while count < len(priorities):
        kth = np.partition(priorities, count - 1)[count - 1]
        distinct = np.unique(priorities[priorities <= kth])
        if len(distinct) >= size:
            return int(distinct[size - 1])
        count *= 4
    distinct = np.unique(priorities)
    return int(distinct[min(size, len(distinct)) - 1])


# ---------------------------------------------------------------------------------------------------------
# The sample


class KeySample:
    """A deterministic, mergeable uniform sample of the distinct keys of a stream (a bottom-k sample).

    Every key gets a 64-bit priority, by default SipHash-2-4 of its bytes under a key derived from ``seed``; the
    sample is the ``size`` distinct keys with the smallest (priority, bytes). It depends only on the set of keys seen
    and the seed: not on the order of the keys, on how they were split into batches, or on repeats. Only the
    sampled keys' bytes are kept.

    Follows the accumulator contract of the project: ``update(batch)``, ``merge(other)`` (exact: the merge of
    two samples is the sample of the union), ``copy()``, equality and pickling; ``keys()`` (also ``result()``)
    returns the sample as a ``KeyBatch`` in priority order.

    Parameters
    ----------
    size : int, default 4096
        Keys to keep.
    seed : int, default 0
        Seed of the priorities (non-negative; taken modulo 2^128). Record it: the same seed and keys give the
        same sample.
    priority : callable, optional
        ``(batch, seed) -> uint64[n]``, the priority of every key; default
        ``hashaudit.hashes.fingerprint.sample_priorities`` (provided through ``hashaudit.stats._hooks``). Two
        samples merge only when they share it.

    References
    ----------
    E. Cohen, H. Kaplan, "Summarizing data using bottom-k sketches", PODC 2007.
    J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012.
    """

    def __init__(self, size: int = DEFAULT_SAMPLE_SIZE, seed: int = 0, priority: Priority | None = None) -> None:
        if int(size) != size or size < 1:
            raise UsageError(f"the key sample size must be a positive integer, not {size!r}")
        if int(seed) != seed or seed < 0:
            raise UsageError(f"the key sample seed must be a non-negative integer, not {seed!r}")
        self.size = int(size)
        self.seed = int(seed)
        self.priority = _hooks.resolve(_hooks.PRIORITY, priority)
        self.data_ = np.zeros(0, dtype=np.uint8)
        self.offsets_ = np.zeros(1, dtype=np.int64)
        self.priorities_ = np.zeros(0, dtype=np.uint64)
        self.keys_seen_ = 0

    def settings(self) -> tuple[int, int]:
        """The settings two samples must share to be merged."""
        return (self.size, self.seed)

    def __len__(self) -> int:
        return len(self.priorities_)

    def _absorb(self, batch: KeyBatch, priorities: np.ndarray) -> None:
        """Keep the bottom ``size`` of the current sample plus the candidates ``batch``."""
        combined = KeyBatch.concat([KeyBatch(self.data_, self.offsets_), batch])
        combined_priorities = np.concatenate([self.priorities_, priorities])
        chosen = _bottom_k(combined, combined_priorities, self.size)
        kept = combined.take(chosen)
        self.data_, self.offsets_ = kept.data, kept.offsets
        self.priorities_ = combined_priorities[chosen]

    def update(self, batch: KeyBatch) -> KeySample:
        """Offer every key of ``batch`` to the sample."""
        if len(batch) == 0:
            return self
        priorities = self.priority(batch, self.seed)
        if len(self) >= self.size:
            # ties with the current largest priority may still enter (they are ordered by bytes)
            candidates = np.flatnonzero(priorities <= self.priorities_[-1])
        else:
            candidates = np.arange(len(batch))
        if len(candidates) > 2 * self.size:
            bound = _priority_bound(priorities[candidates], self.size)
            candidates = candidates[priorities[candidates] <= np.uint64(bound)]
        if len(candidates):
            # the sample keeps keys, not their weights
            self._absorb(KeyBatch(batch.data, batch.offsets).take(candidates), priorities[candidates])
        self.keys_seen_ += len(batch)
        return self

    def merge(self, other: KeySample) -> KeySample:
        """Make this the sample of the union of both streams (in place); size and seed must match."""
        if not isinstance(other, KeySample) or other.settings() != self.settings():
            theirs = other.settings() if isinstance(other, KeySample) else type(other).__name__
            raise MergeError(f"cannot merge key sample {theirs} into {self.settings()}: size or seed differ")
        if other.priority is not self.priority:
            raise MergeError("cannot merge key samples whose priorities come from different functions")
        self._absorb(KeyBatch(other.data_, other.offsets_), other.priorities_)
        self.keys_seen_ += other.keys_seen_
        return self

    def copy(self) -> KeySample:
        """An independent copy."""
        twin = KeySample(self.size, self.seed, self.priority)
        twin.data_, twin.offsets_ = self.data_.copy(), self.offsets_.copy()
        twin.priorities_ = self.priorities_.copy()
        twin.keys_seen_ = self.keys_seen_
        return twin

    def cut_long_keys(self, end_bytes: int = LONG_KEY_END_BYTES) -> tuple[KeySample, int]:
        """This sample with every key longer than ``2 * end_bytes`` cut to its first and last ``end_bytes`` bytes,
        and how many keys were cut (``self`` unchanged when none was).

        The avalanche, neighbour and seed checks copy each sampled key hundreds of times: a multi-megabyte key
        would make their memory follow key length. The cut keys keep the sample's order and priorities.
        """
        lengths = np.diff(self.offsets_)
        long = np.flatnonzero(lengths > 2 * end_bytes)
        if not len(long):
            return self, 0
        new_lengths = np.minimum(lengths, 2 * end_bytes)
        offsets = np.zeros(len(lengths) + 1, dtype=np.int64)
        np.cumsum(new_lengths, out=offsets[1:])
        data = np.empty(int(offsets[-1]), dtype=np.uint8)
        for i in range(len(lengths)):  # a few thousand keys at most: not the fast path
            start, stop = int(self.offsets_[i]), int(self.offsets_[i + 1])
            if stop - start > 2 * end_bytes:
                head = self.data_[start : start + end_bytes]
                tail = self.data_[stop - end_bytes : stop]
                data[offsets[i] : offsets[i + 1]] = np.concatenate([head, tail])
            else:
                data[offsets[i] : offsets[i + 1]] = self.data_[start:stop]
        cut = self.copy()
        cut.data_, cut.offsets_ = data, offsets
        return cut, len(long)

    def keys(self) -> KeyBatch:
        """The sampled keys, in order of increasing (priority, bytes)."""
        return KeyBatch(self.data_.copy(), self.offsets_.copy())

    def result(self) -> KeyBatch:
        """Same as :meth:`keys` (the accumulator contract's name)."""
        return self.keys()

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, KeySample):
            return NotImplemented
        return (
            self.settings() == other.settings()
            and self.priority is other.priority
            and self.keys_seen_ == other.keys_seen_
            and bool(np.array_equal(self.priorities_, other.priorities_))
            and bool(np.array_equal(self.offsets_, other.offsets_))
            and bool(np.array_equal(self.data_, other.data_))
        )

    def __repr__(self) -> str:
        return f"KeySample(size={self.size}, seed={self.seed}, sampled={len(self)}, keys_seen={self.keys_seen_})"
