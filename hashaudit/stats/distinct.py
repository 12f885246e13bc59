"""``DistinctKeys``: tells first occurrences of keys from repeats, so the hash is judged on distinct keys.

A key repeated in a dump is not the hash's fault (DESIGN.md, "Judge the hash on distinct keys"). Each key is
identified by a 128-bit fingerprint — by default MurmurHash3 x64_128 under a fixed seed that no audit uses
(``hashaudit.hashes.fingerprint.key_fingerprints_128``, passed in by the hash layer) — so two distinct
keys are taken for one with probability about d^2 / 2^129 over d distinct keys (4e-23 for d = 10^9, by the birthday
bound): never, in practice. Only the fingerprint is kept, 16 bytes, not the key.

The fingerprints sit in an ordered hash table (Amble & Knuth, "Ordered hash tables", The Computer Journal 17(2),
1974): linear probing where every run of occupied slots is kept sorted, and the home slot is the fingerprint's
position in the table's range (``high half × m / 2^64``), which is monotone — so the whole table is sorted, a
lookup stops at the first larger fingerprint, and the table can grow by any factor in place: growing moves every
fingerprint forward, never back, so it is done from the end of a ``realloc``-ed array (which the C library serves
with ``mremap`` at these sizes) without a second copy. The table grows by half when four fifths full, so it holds
16 bytes per slot at load 0.53 to 0.8: 20 to 30 bytes per distinct key; sized up front when the key count is
known (``reserve``).

A memory budget stops the audit with a clear message rather than exhausting the machine (``--all-keys`` counts
every occurrence instead and needs no store).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import numpy as np
from numba import njit, uint64

from hashaudit._prefetch import prefetch_row
from hashaudit.errors import MergeError, UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats import _hooks
from hashaudit.stats._hooks import Fingerprint

DEFAULT_MEMORY_BYTES = 640 << 20  # 30 M distinct keys in one read; more are read in parts
_MIN_SLOTS = 1 << 16
_MAX_LOAD = 4 / 5
BYTES_PER_DISTINCT = 16 / _MAX_LOAD  # at the largest load, after which the table grows
_GROWTH = 3 / 2
_BLOCK = 4096
_AHEAD = 16  # keys between a home slot's prefetch and its use


@njit(cache=True, nogil=True, inline="always")
def _home(hi, slots):  # pragma: no cover - compiled
    return ((hi >> uint64(32)) * uint64(slots)) >> uint64(32)


@njit(cache=True, nogil=True, inline="always")
def _less(ahi, alo, bhi, blo):  # pragma: no cover - compiled
    return ahi < bhi or (ahi == bhi and alo < blo)


@njit(cache=True, nogil=True)
def _insert_kernel(table, slots, drop, prints, first, room):  # pragma: no cover - compiled
    """Insert fingerprints in order until ``room`` new ones went in or a run reached the table's end; marks
    ``first[i]``. Returns (keys handled, new ones). ``prints[i, 0]`` is the low half, ``prints[i, 1]`` the high
    half; (0, 0) marks an empty slot, so that fingerprint is read as (0, 1)."""
    end = table.shape[0]
    n = prints.shape[0]
    added = 0
    for i in range(n):
        if added == room:
            return i, added
        if i + _AHEAD < n:
            # start loading the home slot of a key further on, so its cache miss overlaps this key's probing
            prefetch_row(table, np.int64(_home(prints[i + _AHEAD, 1] << drop, slots)))
        hi = prints[i, 1]
        lo = prints[i, 0]
        if hi == 0 and lo == 0:
            lo = uint64(1)
        p = np.int64(_home(hi << drop, slots))
        while p < end:
            sh = table[p, 0]
            sl = table[p, 1]
            if sh == 0 and sl == 0:
                break
            if sh == hi and sl == lo:
                break
            if _less(hi, lo, sh, sl):
                break
            p += 1
        if p < end and table[p, 0] == hi and table[p, 1] == lo:
            first[i] = False
            continue
        q = p
        while q < end and (table[q, 0] != 0 or table[q, 1] != 0):
            q += 1
        if q == end:
            return i, added  # the run would leave the table: grow first
        while q > p:  # shift the rest of the run one slot on, to keep it sorted
            table[q, 0] = table[q - 1, 0]
            table[q, 1] = table[q - 1, 1]
            q -= 1
        table[p, 0] = hi
        table[p, 1] = lo
        first[i] = True
        added += 1
    return n, added


@njit(cache=True, nogil=True)
def _grow_in_place(table, old_end, slots, drop, block):  # pragma: no cover - compiled
    """Re-lay the fingerprints in slots [0, old_end) for a table of ``slots`` home slots (more than before).

    In the canonical layout each fingerprint sits at max(its home, the previous one's slot + 1); with larger homes
    every new slot is at or after the old one, so moving them from the last to the first never overwrites one not
    yet moved. The new slot of a fingerprint depends on all before it, so a first pass records the layout's state
    every ``block`` fingerprints and the second pass recomputes one block at a time, backwards."""
    n_blocks = 0
    count = 0
    for s in range(old_end):
        if table[s, 0] != 0 or table[s, 1] != 0:
            count += 1
    n_blocks = (count + block - 1) // block
    starts = np.empty(n_blocks + 1, dtype=np.int64)  # slot of each block's first fingerprint
    before = np.empty(n_blocks + 1, dtype=np.int64)  # new slot of the fingerprint before the block
    last = np.int64(-1)
    k = 0
    for s in range(old_end):
        if table[s, 0] != 0 or table[s, 1] != 0:
            if k % block == 0:
                starts[k // block] = s
                before[k // block] = last
            home = np.int64(_home(table[s, 0] << drop, slots))
            last = home if home > last + 1 else last + 1
            k += 1
    starts[n_blocks] = old_end
    new_slot = np.empty(block, dtype=np.int64)
    old_slot = np.empty(block, dtype=np.int64)
    for b in range(n_blocks - 1, -1, -1):
        last = before[b]
        m = 0
        for s in range(starts[b], starts[b + 1]):
            if table[s, 0] != 0 or table[s, 1] != 0:
                home = np.int64(_home(table[s, 0] << drop, slots))
                last = home if home > last + 1 else last + 1
                new_slot[m] = last
                old_slot[m] = s
                m += 1
        for j in range(m - 1, -1, -1):
            s = old_slot[j]
            t = new_slot[j]
            if t != s:
                table[t, 0] = table[s, 0]
                table[t, 1] = table[s, 1]
                table[s, 0] = 0
                table[s, 1] = 0
    return last


class DistinctBudgetError(UsageError):
    """The distinct keys need more memory than the budget allows. ``distinct`` and ``keys_seen`` say how far the
    store got, so a caller that can read its input again can choose how many partitions to split it into."""

    def __init__(self, message: str, distinct: int, keys_seen: int) -> None:
        super().__init__(message)
        self.distinct = distinct
        self.keys_seen = keys_seen


class DistinctKeys:
    """Stream filter marking the first occurrence of every key, by 128-bit fingerprint.

    Parameters
    ----------
    memory_bytes : int
        Largest size of the fingerprint table; past it ``update`` raises ``DistinctBudgetError``.
    part, parts : int
        Keep only the keys whose fingerprint's top bits are ``part`` out of ``parts`` (a power of two); the others
        are marked not first. Reading the input once per part finds every distinct key exactly once in a
        ``parts``-th of the memory: how an input with more distinct keys than the budget is handled.
    fingerprint : callable, optional
        ``batch -> uint64[n, 2]``, the 128-bit fingerprint of every key (low half, high half); default
        ``hashaudit.hashes.fingerprint.key_fingerprints_128``. Two stores merge only when they share it.
    """

    def __init__(
        self,
        memory_bytes: int = DEFAULT_MEMORY_BYTES,
        part: int = 0,
        parts: int = 1,
        fingerprint: Fingerprint | None = None,
    ) -> None:
        if memory_bytes < 1 << 22:
            raise UsageError(f"the distinct-key memory budget must be at least 4 MiB, not {memory_bytes} bytes")
        if parts < 1 or parts & (parts - 1) or not 0 <= part < parts:
            raise UsageError(f"part {part} of {parts}: parts must be a power of two and part below it")
        self.memory_bytes = int(memory_bytes)
        self.part, self.parts = int(part), int(parts)
        self.fingerprint = _hooks.resolve(_hooks.DISTINCT, fingerprint)
        self._drop = np.uint64(parts.bit_length() - 1)  # the top bits, equal within a part, do not place a key
        self.slots_ = _MIN_SLOTS
        self.table_ = np.zeros((self._length(self.slots_), 2), dtype=np.uint64)  # rows of (high, low)
        self.keys_seen_ = 0
        self.distinct_ = 0

    @staticmethod
    def _length(slots: int) -> int:
        """Home slots plus a tail where the last runs may spill (no wrap-around keeps the table sorted)."""
        return slots + max(1024, slots >> 8)

    @property
    def memory_in_use(self) -> int:
        """Bytes of the fingerprint table."""
        return self.table_.nbytes

    def _grow(self, slots: int) -> None:
        length = self._length(slots)
        if 16 * length > self.memory_bytes:
            raise DistinctBudgetError(
                f"more than {self.distinct_:,} distinct keys need over {self.memory_bytes >> 20} MiB to tell repeats "
                "apart; raise --distinct-memory, or use --all-keys to count every occurrence",
                self.distinct_,
                self.keys_seen_,
            )
        old_end = len(self.table_)
        # in place: realloc grows a large block with mremap, so neither a copy nor a second table is needed
        self.table_.resize((length, 2), refcheck=False)
        _grow_in_place(self.table_, old_end, slots, self._drop, _BLOCK)
        self.slots_ = slots

    def reserve(self, keys: int) -> None:
        """Size the table for about ``keys`` distinct keys at once (within the budget), so it does not grow step
        by step."""
        slots = int(keys / (_MAX_LOAD * 0.98))
        while 16 * self._length(slots) > self.memory_bytes:
            slots = slots * 3 // 4
        if slots > self.slots_:
            self._grow(slots)

    def _insert(self, prints: np.ndarray, first: np.ndarray) -> None:
        start = 0
        while start < len(prints):
            room = int(self.slots_ * _MAX_LOAD) - self.distinct_
            if room > 0:
                done, added = _insert_kernel(self.table_, self.slots_, self._drop, prints[start:], first[start:], room)
                self.distinct_ += int(added)
                start += int(done)
                if start == len(prints):
                    break
            self._grow(max(int(self.slots_ * _GROWTH), self.slots_ + 1024))

    def update(self, batch: KeyBatch, prints: np.ndarray | None = None) -> np.ndarray:
        """Mark the keys of ``batch`` seen for the first time (in stream order); returns a bool array.

        ``prints``, when given, are the batch's fingerprints, ``self.fingerprint(batch)``, already taken (on
        another thread, say)."""
        if prints is None:
            prints = self.fingerprint(batch)
        elif prints.shape != (len(batch), 2):
            raise UsageError(f"{prints.shape} fingerprints for a batch of {len(batch)} keys")
        if self.parts == 1:
            first = np.empty(len(prints), dtype=np.bool_)
            self._insert(prints, first)
        else:
            mine = (prints[:, 1] >> np.uint64(64 - int(self._drop))) == np.uint64(self.part)
            picked = np.ascontiguousarray(prints[mine])
            marks = np.empty(len(picked), dtype=np.bool_)
            self._insert(picked, marks)
            first = np.zeros(len(prints), dtype=np.bool_)
            first[mine] = marks
        self.keys_seen_ += len(prints)
        return first

    @property
    def repeats(self) -> int:
        """Occurrences that repeated an earlier key (of this part's keys when the store keeps one part)."""
        return self.keys_seen_ - self.distinct_

    def fingerprints(self) -> np.ndarray:
        """Every distinct fingerprint, sorted, as an (n, 2) array of (high, low) halves."""
        return self.table_[(self.table_[:, 0] | self.table_[:, 1]) != 0]

    def merge(self, other: DistinctKeys) -> DistinctKeys:
        """Union of two stores of the same part (counts of occurrences add up)."""
        if not isinstance(other, DistinctKeys) or (other.part, other.parts) != (self.part, self.parts):
            what = type(other).__name__ if not isinstance(other, DistinctKeys) else f"part {other.part}/{other.parts}"
            raise MergeError(f"cannot merge {what} into DistinctKeys part {self.part}/{self.parts}")
        if other.fingerprint is not self.fingerprint:
            raise MergeError("cannot merge DistinctKeys whose fingerprints come from different functions")
        theirs = other.fingerprints()[:, ::-1].copy()  # as (low, high), the layout of the fingerprint function
        self.reserve(self.distinct_ + len(theirs))
        self._insert(theirs, np.empty(len(theirs), dtype=np.bool_))
        self.keys_seen_ += other.keys_seen_
        return self
