"""``DistinctKeys``: tells first occurrences of keys from repeats, so the hash is judged on distinct keys.

A key repeated in a dump is not the hash's fault (DESIGN.md, "Judge the hash on distinct keys"). Each key is
identified by a 64-bit fingerprint (XXH3-64 under a fixed seed that no audit uses) kept in an open-addressing
set: 8-byte slots kept between three eighths and three quarters full (linear probing stays within a cache line or
two at that load), so 10.7 to 21 bytes per distinct key (1.5 times that while the set doubles). Two distinct keys
share a fingerprint with probability about d^2 / 2^65 over d distinct keys (2.7e-4 for d = 10^8, by the birthday
bound), so a false "repeat" is negligible; the report states the count either way.

The set grows with the number of distinct keys; a memory budget stops the audit with a clear message rather
than exhausting the machine (``--all-keys`` counts every occurrence instead and needs no set).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import numpy as np
from numba import njit, uint64

from hashaudit.errors import MergeError, UsageError
from hashaudit.keys.batch import KeyBatch

FINGERPRINT_SEED = 0x5EED_D157_1C70_0001
DEFAULT_MEMORY_BYTES = 2 << 30


@njit(cache=True, nogil=True)
def _insert_kernel(table, fingerprints, first):  # pragma: no cover - compiled
    """Insert each fingerprint; ``first[i]`` is True when it was not in the set yet. Returns how many were new."""
    mask = uint64(table.shape[0] - 1)
    added = 0
    for i in range(fingerprints.shape[0]):
        f = fingerprints[i]
        if f == 0:
            f = uint64(1)  # 0 marks an empty slot
        slot = (f * uint64(0x9E3779B97F4A7C15)) >> uint64(32)
        slot &= mask
        while True:
            current = table[slot]
            if current == 0:
                table[slot] = f
                first[i] = True
                added += 1
                break
            if current == f:
                first[i] = False
                break
            slot = (slot + uint64(1)) & mask
    return added


@njit(cache=True, nogil=True)
def _rehash_kernel(old, new):  # pragma: no cover - compiled
    mask = uint64(new.shape[0] - 1)
    for j in range(old.shape[0]):
        f = old[j]
        if f != 0:
            slot = ((f * uint64(0x9E3779B97F4A7C15)) >> uint64(32)) & mask
            while new[slot] != 0:
                slot = (slot + uint64(1)) & mask
            new[slot] = f


class DistinctKeys:
    """Stream filter marking the first occurrence of every key.

    Parameters
    ----------
    memory_bytes : int
        Largest size of the fingerprint set; past it ``update`` raises ``UsageError``.
    """

    def __init__(self, memory_bytes: int = DEFAULT_MEMORY_BYTES) -> None:
        if memory_bytes < 1 << 16:
            raise UsageError(f"the distinct-key memory budget must be at least 64 KiB, not {memory_bytes} bytes")
        self.memory_bytes = int(memory_bytes)
        start = 1 << min(16, (int(memory_bytes) // 8).bit_length() - 1)  # within the budget from the start
        self.table_ = np.zeros(start, dtype=np.uint64)
        self.keys_seen_ = 0
        self.distinct_ = 0

    def _grow_for(self, incoming: int) -> None:
        size = len(self.table_)
        while 4 * (self.distinct_ + incoming) > 3 * size:  # load factor at most 3/4
            size *= 2
        if size == len(self.table_):
            return
        if size * 8 > self.memory_bytes:
            raise UsageError(
                f"more than {self.distinct_:,} distinct keys need over {self.memory_bytes >> 20} MiB to tell repeats "
                "apart; raise --distinct-memory, or use --all-keys to count every occurrence"
            )
        bigger = np.zeros(size, dtype=np.uint64)
        _rehash_kernel(self.table_, bigger)
        self.table_ = bigger

    def reserve(self, keys: int) -> None:
        """Size the set for about ``keys`` distinct keys at once (within the budget), so it does not grow step by
        step: each doubling rehashes every fingerprint and touches fresh memory."""
        size = len(self.table_)
        while 4 * keys > 3 * size and size * 16 <= self.memory_bytes:
            size *= 2
        if size > len(self.table_):
            bigger = np.zeros(size, dtype=np.uint64)
            _rehash_kernel(self.table_, bigger)
            self.table_ = bigger

    def update(self, batch: KeyBatch) -> np.ndarray:
        """Mark the keys of ``batch`` seen for the first time (in stream order); returns a bool array."""
        from hashaudit.hashes.xxh import xxh3_64

        fingerprints = xxh3_64(batch, FINGERPRINT_SEED)
        self._grow_for(len(fingerprints))
        first = np.empty(len(fingerprints), dtype=np.bool_)
        self.distinct_ += int(_insert_kernel(self.table_, fingerprints, first))
        self.keys_seen_ += len(fingerprints)
        return first

    @property
    def repeats(self) -> int:
        """Occurrences that repeated an earlier key."""
        return self.keys_seen_ - self.distinct_

    def merge(self, other: DistinctKeys) -> DistinctKeys:
        """Union of two sets (counts of occurrences add up)."""
        if not isinstance(other, DistinctKeys):
            raise MergeError(f"cannot merge {type(other).__name__} into DistinctKeys")
        live = other.table_[other.table_ != 0]
        self._grow_for(len(live))
        first = np.empty(len(live), dtype=np.bool_)
        self.distinct_ += int(_insert_kernel(self.table_, live, first))
        self.keys_seen_ += other.keys_seen_
        return self
