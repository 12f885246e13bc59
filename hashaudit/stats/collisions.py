"""``FullCollisions``: distinct keys that share a full hash value (32, 64 or 128 bits), against the birthday bound.

A system that uses the whole hash as a key's identity (deduplication, content addressing, hash joins that
compare hashes first) pays for every pair of distinct keys with the same hash value. Under uniform hashing the
number of such pairs among d distinct keys with b-bit values has mean C(d, 2) / 2^b (the birthday problem) and is
nearly Poisson distributed; ``collision_tests`` compares the observed count with that law.

How the values are kept
-----------------------
The accumulator stores every hash value it is given (the engine passes only those of first occurrences, so one
value per distinct key: 4 bytes per key for 32-bit functions, 8 for 64-bit ones, 16 for 128-bit ones) in slabs of
at most 16 MiB. While the slabs
stay within ``memory_bytes`` everything is sorted in memory at the end. Past the budget the slabs are
*spilled*: each is split into 256 partitions (a counting sort) and appended to one file per partition (raw
little-endian ``uint64``; ``(low, high)`` word pairs for 128-bit values) in a private folder (``hashaudit-spill-``
and a random suffix, made with ``tempfile.mkdtemp``: only this user may enter it) under ``spill_dir``. The
partition of a value is the top 8 bits of the value times the golden-ratio constant 0x9E3779B97F4A7C15 (Knuth's
multiplicative hashing), not the top 8 bits of the value itself: a function under audit may well leave its top bits
constant (a 32-bit function declared 64-bit, a 64-bit one widened to 128), and the partitions must stay small all
the same. Equal values always land in the same
partition, so ``result()`` sorts and counts one partition at a time: its working set is one partition (about
1/256 of the values) rather than all of them. Values that never left memory are partitioned the same way, slab
by slab, at the end. The folder is removed when the result is computed, when the accumulator is closed, when it is
garbage-collected, and, as a safety net, when the interpreter exits (an :mod:`atexit` hook removes every spill
folder of the process still on disk). That covers a normal end, an exception, Ctrl-C, and SIGTERM once the command
line turns it into ``SystemExit``; only SIGKILL or a crash leaves a folder behind.

``result()`` is the last step, like closing a file: it consumes the stored values (freeing their memory and
disk space), keeps the result, and returns the same result when called again; ``update`` and ``merge`` then
refuse. Take a ``copy()`` first to keep accumulating.

Memory: with the default 1 GiB budget, 10^8 distinct 64-bit values (800 MB) stay in memory, or 2 x 10^8 32-bit
ones; at the end each slab is replaced by its partitioned copy (in the slab's width), so the peak is about the
values plus one slab plus one partition. Larger
sets spill, and the final peak is one partition plus its sort workspace (a 64-bit partition is sorted in place;
for 128-bit values only the high words are sorted, and the few rows whose high word repeats are then sorted in
full). Only a hash that gives many keys the same value defeats the partitions: all of them land in one.

References
----------
W. Feller, An Introduction to Probability Theory and Its Applications, vol. 1, 3rd ed. (1968), ch. II.3 (the
birthday problem).
T. H. Cormen, C. E. Leiserson, R. L. Rivest, C. Stein, Introduction to Algorithms, 3rd ed. (2009), §5.4.1
(expected number of pairs with the same birthday: C(n, 2) / m).
R. Arratia, L. Goldstein, L. Gordon, "Two moments suffice for Poisson approximations: the Chen-Stein method",
Ann. Probab. 17 (1989) 9-25 (the Poisson law of the number of coincident pairs).
D. E. Knuth, The Art of Computer Programming, vol. 3, 2nd ed. (1998), §5.2 (distribution counting), §5.4
(external sorting: work on one part of the data at a time) and §6.4 (multiplicative hashing with the golden
ratio).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import atexit
import errno
import math
import os
import shutil
import sys
import tempfile
import weakref
from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
from numba import njit, uint64

from hashaudit.errors import MergeError, ResourceError, UsageError
from hashaudit.stats.outcome import FitTest
from hashaudit.stats.tails import colliding_pairs_test

DEFAULT_MEMORY_BYTES = 1 << 30
PARTITIONS = 256  # partitions, chosen by the top 8 bits of the value times GOLDEN
GOLDEN = 0x9E3779B97F4A7C15  # 2^64 / golden ratio, odd (Knuth, TAOCP vol. 3, §6.4)
LARGEST_GROUPS = 10  # how many of the biggest groups a result keeps
SLAB_BYTES = 16 << 20  # largest in-memory slab; above glibc's largest mmap threshold, so freeing returns it
MIN_SLAB_BYTES = 1 << 20
FIRST_SLAB_BYTES = 256 << 10  # slabs start small and double: a store of a few thousand values stays small
WIDTHS = (32, 64, 128)
SMALL_ROWS = 1 << 20  # equality compares sets up to this size in one piece
SPILL_PREFIX = "hashaudit-spill-"

# Spill folders that may still be on disk, with the id of the process that made each: a child forked while they
# exist inherits this table and its copies of the accumulators, and must not remove its parent's folders. A dict's
# item assignment, pop and copy are atomic under the GIL, so threads need no lock (nor can the exit hook wait on
# one that a dying thread holds).
_LIVE_FOLDERS: dict[str, int] = {}


def _remove_folder(folder: str) -> None:
    """Remove a spill folder this process made, with everything in it (nothing if it is gone), and forget it."""
    if _LIVE_FOLDERS.get(folder, os.getpid()) != os.getpid():
        return
    shutil.rmtree(folder, ignore_errors=True)
    _LIVE_FOLDERS.pop(folder, None)


@atexit.register
def _remove_leftover_folders() -> None:
    """At interpreter exit, remove the spill folders no ``close()``, result or garbage collection removed.

    The command line turns SIGTERM into ``SystemExit``; the exception may leave accumulators referenced from its
    traceback until the very end, so their folders are removed here. Threads that write spill files are not daemon
    threads: the interpreter has joined them before atexit hooks run, so no file appears during the removal.
    """
    for folder in _LIVE_FOLDERS.copy():
        _remove_folder(folder)


# --------------------------------------------------------------------------------------------------------
# Kernels. Values are rows of a C-contiguous uint64[n, w] array: w = 1 (32/64-bit) or 2 ((low, high) words).
# --------------------------------------------------------------------------------------------------------


@njit(cache=True, nogil=True)
def _partition_kernel(rows, out, bounds):  # pragma: no cover - compiled
    """Counting sort of ``rows`` by partition into ``out`` (stable); ``bounds[p]:bounds[p + 1]`` is partition p.
    The partition of a value v is the top 8 bits of v·GOLDEN; of (low, high) it is that of high·GOLDEN xor low."""
    n = rows.shape[0]
    w = rows.shape[1]
    golden = uint64(GOLDEN)
    shift = uint64(56)
    parts = np.empty(n, dtype=np.uint8)
    counts = np.zeros(bounds.shape[0] - 1, dtype=np.int64)
    for i in range(n):
        v = rows[i, 0] if w == 1 else (rows[i, 1] * golden) ^ rows[i, 0]
        p = (v * golden) >> shift
        parts[i] = p
        counts[p] += 1
    bounds[0] = 0
    for p in range(counts.shape[0]):
        bounds[p + 1] = bounds[p] + counts[p]
    position = bounds[:-1].copy()
    for i in range(n):
        p = parts[i]
        j = position[p]
        for k in range(w):
            out[j, k] = rows[i, k]
        position[p] = j + 1


@njit(cache=True, nogil=True)
def _count_groups_kernel(rows, top_sizes, top_rows):  # pragma: no cover - compiled
    """Runs of equal rows in sorted ``rows``: returns (colliding pairs, keys in groups of 2 or more, groups) and
    fills ``top_sizes`` / ``top_rows`` (zeroed by the caller) with the largest groups, by size then value."""
    n = rows.shape[0]
    w = rows.shape[1]
    slots = top_sizes.shape[0]
    pairs = 0
    keys = 0
    groups = 0
    i = 0
    while i < n:
        j = i + 1
        while j < n:
            same = True
            for k in range(w):
                if rows[j, k] != rows[i, k]:
                    same = False
                    break
            if not same:
                break
            j += 1
        size = j - i
        if size > 1:
            pairs += size * (size - 1) // 2
            keys += size
            groups += 1
            # rows come in increasing order, so an equal size never displaces an earlier (smaller) value
            if size > top_sizes[slots - 1]:
                slot = slots - 1
                while slot > 0 and top_sizes[slot - 1] < size:
                    top_sizes[slot] = top_sizes[slot - 1]
                    for k in range(w):
                        top_rows[slot, k] = top_rows[slot - 1, k]
                    slot -= 1
                top_sizes[slot] = size
                for k in range(w):
                    top_rows[slot, k] = rows[i, k]
        i = j
    return pairs, keys, groups


def _sort_rows(rows: np.ndarray) -> np.ndarray:
    """Rows sorted as unsigned integers (in place for w = 1; a sorted copy for w = 2)."""
    if rows.shape[1] == 1:
        rows.reshape(-1).sort()
        return rows
    return rows[np.lexsort((rows[:, 0], rows[:, 1]))]


def _count_groups(rows: np.ndarray, top_sizes: np.ndarray, top_rows: np.ndarray) -> tuple[int, int, int]:
    """(colliding pairs, keys in collisions, groups) of one partition; the largest groups go to ``top_*``."""
    if rows.shape[1] == 2:
        # equal 128-bit values have equal high words: sort the high words alone (in place, fast), then sort in
        # full only the rows whose high word repeats (a handful for any decent hash)
        high = rows[:, 1].copy()
        high.sort()
        repeated = np.unique(high[1:][high[1:] == high[:-1]])
        del high
        if len(repeated) == 0:
            return 0, 0, 0
        rows = rows[np.isin(rows[:, 1], repeated)]
    found = _count_groups_kernel(_sort_rows(rows), top_sizes, top_rows)
    return int(found[0]), int(found[1]), int(found[2])


def _partitioned(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A copy of ``rows`` grouped by partition, with the partition bounds."""
    out = np.empty_like(rows)
    bounds = np.empty(PARTITIONS + 1, dtype=np.int64)
    _partition_kernel(rows, out, bounds)
    return out, bounds


def _row_value(row: np.ndarray) -> int:
    """A row as a Python int (the high word above the low word for 128-bit values)."""
    return int(row[0]) if row.shape[0] == 1 else (int(row[1]) << 64) | int(row[0])


# --------------------------------------------------------------------------------------------------------
# Results
# --------------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CollisionGroup:
    """One hash value shared by several distinct keys.

    Attributes
    ----------
    hash_value : int
        The full hash value (128-bit values as one integer: high word above low word).
    keys : int
        Distinct keys that have it.
    """

    hash_value: int
    keys: int

    def hex(self, width: int) -> str:
        """The hash value as ``0x`` and ``width / 4`` hex digits."""
        return f"0x{self.hash_value:0{width // 4}x}"


@dataclass(frozen=True)
class FullCollisionsResult:
    """What a ``FullCollisions`` accumulator found.

    Attributes
    ----------
    hash_name, seed, width : the settings the values belong to.
    keys : int
        Distinct keys counted (hash values given to the accumulator).
    colliding_pairs : int
        Pairs of distinct keys with the same full hash value: Σ C(g, 2) over groups of g ≥ 2 equal values.
    keys_in_collisions : int
        Keys whose hash value at least one other key shares.
    groups : int
        Hash values shared by two keys or more.
    largest : tuple of CollisionGroup
        Up to ``LARGEST_GROUPS`` largest groups, by size (descending) then hash value (ascending).
    """

    hash_name: str
    seed: int
    width: int
    keys: int
    colliding_pairs: int
    keys_in_collisions: int
    groups: int
    largest: tuple[CollisionGroup, ...]

    @property
    def expected_pairs(self) -> float:
        """Colliding pairs expected under uniform hashing: C(d, 2) / 2^b (exact, then rounded)."""
        return math.comb(self.keys, 2) / (1 << self.width)


# --------------------------------------------------------------------------------------------------------
# The accumulator
# --------------------------------------------------------------------------------------------------------


class FullCollisions:
    """Distinct keys sharing a full hash value, for one hash function and seed.

    ``update(hashes)`` adds the hash values of distinct keys (``uint64[n]``, or ``uint64[n, 2]`` low/high words
    for 128-bit functions); ``merge(other)`` adds another accumulator's values (associative and commutative);
    ``result()`` sorts and counts, then releases the stored values (see the module notes). Results do not depend
    on batch boundaries, on merging order or on whether values were spilled to disk.

    Parameters
    ----------
    hash_name : str
    seed : int
    width : {32, 64, 128}
        Output width of the hash in bits.
    memory_bytes : int
        Largest size of the values held in memory; past it they are spilled to disk.
    spill_dir : str, optional
        Folder in which the private spill folder is made (default: the system's temporary folder).

    Notes
    -----
    Learned state: ``keys_seen_`` (values given), ``spilled_bytes_`` (bytes this object has written to its spill
    folder; informational, not part of equality) and ``result_`` (set by ``result()``). Equality compares the
    multisets of stored values (in one piece for up to 2^20 values, else partition by partition; a sort of both
    sides, meant for tests); pickling writes every stored value into the pickle. Each accumulator has its own
    budget: several of them (one per hash, or per thread) need several budgets.
    """

    def __init__(
        self,
        hash_name: str,
        seed: int,
        width: int,
        memory_bytes: int = DEFAULT_MEMORY_BYTES,
        spill_dir: str | None = None,
    ) -> None:
        if width not in WIDTHS:
            raise UsageError(f"hash {hash_name!r}: width must be 32, 64 or 128, not {width!r}")
        if not isinstance(memory_bytes, int | np.integer) or memory_bytes < 0:
            raise UsageError(f"the collision memory budget must be a whole number of bytes, not {memory_bytes!r}")
        if spill_dir is not None and not os.path.isdir(spill_dir):
            raise UsageError(f"the spill folder {spill_dir!r} does not exist")
        self.hash_name = hash_name
        self.seed = int(seed)
        self.width = int(width)
        self.memory_bytes = int(memory_bytes)
        self.spill_dir = None if spill_dir is None else os.fspath(spill_dir)
        self.keys_seen_ = 0
        self.spilled_bytes_ = 0
        self.result_: FullCollisionsResult | None = None
        self._words = 2 if self.width == 128 else 1
        # 32-bit values are kept in 4 bytes in memory (half the memory, so twice the keys before a spill); they
        # are widened to 8 wherever they are partitioned, written or counted, so results and spill files are the same
        self._dtype = np.dtype(np.uint32 if self.width == 32 else np.uint64)
        row_bytes = self._row_bytes = self._dtype.itemsize * self._words
        self._slab_rows = max(1, min(SLAB_BYTES, max(MIN_SLAB_BYTES, self.memory_bytes)) // row_bytes)
        self._slabs: list[np.ndarray] = []  # all full except the last, which holds _fill rows
        self._fill = 0
        self._memory_rows = 0
        self._folder: str | None = None
        self._finalizer: weakref.finalize | None = None
        self._disk_rows = np.zeros(PARTITIONS, dtype=np.int64)
        self._closed = False

    # ---- settings and state -----------------------------------------------------------------------------

    def settings(self) -> tuple[str, int, int]:
        """The settings two accumulators must share to be merged."""
        return (self.hash_name, self.seed, self.width)

    @property
    def memory_bytes_used(self) -> int:
        """Bytes of hash values held in memory now."""
        return self._memory_rows * self._row_bytes

    @property
    def spilled(self) -> bool:
        """Whether some values are on disk now."""
        return self._folder is not None

    def _check_open(self, action: str) -> None:
        if self.result_ is not None:
            raise UsageError(
                f"cannot {action}: the full-collision count of {self.hash_name!r} already produced its result"
            )
        if self._closed:
            raise UsageError(f"cannot {action}: the full-collision count of {self.hash_name!r} is closed")

    # ---- adding values ------------------------------------------------------------------------------------

    def update(self, hashes: np.ndarray) -> FullCollisions:
        """Add the hash values of distinct keys (``uint64[n]``, or ``uint64[n, 2]`` for 128-bit functions)."""
        self._check_open("update")
        values = np.asarray(hashes)
        if values.dtype != np.uint64:
            if values.dtype.kind != "u":
                raise UsageError(f"hash values must be unsigned integers (uint64), not {values.dtype}")
            values = values.astype(np.uint64)
        shape_ok = values.ndim == 2 and values.shape[1] == 2 if self._words == 2 else values.ndim == 1
        if not shape_ok:
            wanted = "uint64[n, 2] (low, high words)" if self._words == 2 else "uint64[n]"
            raise UsageError(f"{self.width}-bit hash values must be {wanted}, not an array of shape {values.shape}")
        if self.width == 32 and values.size and int(values.max()) >> 32:
            raise UsageError(f"hash {self.hash_name!r} is declared 32-bit but gave a value of 2^32 or more")
        self._add_rows(values.reshape(-1, self._words))
        self.keys_seen_ += int(values.shape[0])
        return self

    def _add_rows(self, rows: np.ndarray) -> None:
        """Copy rows into the slabs, spilling whenever the budget is exceeded."""
        start, n = 0, rows.shape[0]
        while start < n:
            if not self._slabs or self._fill == self._slabs[-1].shape[0]:
                last = self._slabs[-1].shape[0] if self._slabs else FIRST_SLAB_BYTES // self._row_bytes // 2
                rows_next = min(self._slab_rows, 2 * last)
                self._slabs.append(np.empty((rows_next, self._words), dtype=self._dtype))
                self._fill = 0
            slab = self._slabs[-1]
            take = min(n - start, slab.shape[0] - self._fill)
            slab[self._fill : self._fill + take] = rows[start : start + take]
            self._fill += take
            self._memory_rows += take
            start += take
            if self.memory_bytes_used > self.memory_bytes:
                self._spill()

    def _memory_parts(self) -> list[np.ndarray]:
        """Views of the rows held in memory (``uint32`` rows for 32-bit values; see ``_wide``)."""
        return [slab if i < len(self._slabs) - 1 else slab[: self._fill] for i, slab in enumerate(self._slabs)]

    @staticmethod
    def _wide(rows: np.ndarray) -> np.ndarray:
        """``rows`` as ``uint64`` (a new array for 32-bit rows, the same one otherwise)."""
        return rows if rows.dtype == np.uint64 else rows.astype(np.uint64)

    def _partitioned_rows(self, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """A copy of the memory rows ``rows`` grouped by partition, in the rows' own width, with the bounds."""
        out, bounds = _partitioned(self._wide(rows))
        return (out if out.dtype == rows.dtype else out.astype(rows.dtype)), bounds

    # ---- disk ---------------------------------------------------------------------------------------------

    def _ensure_folder(self) -> str:
        if self._folder is None:
            if self.spill_dir is not None and not os.path.isdir(self.spill_dir):
                raise UsageError(f"the spill folder {self.spill_dir!r} does not exist")
            folder = tempfile.mkdtemp(prefix=SPILL_PREFIX, dir=self.spill_dir)
            # Registered before any file is written in it: a signal in between could leave an empty folder at worst.
            _LIVE_FOLDERS[folder] = os.getpid()
            self._folder = folder
            self._finalizer = weakref.finalize(self, _remove_folder, folder)
        return self._folder

    def _path(self, partition: int) -> str:
        assert self._folder is not None
        return os.path.join(self._folder, f"partition-{partition:02x}.u64")

    def _spill(self) -> None:
        """Move every row held in memory to the partition files, one slab at a time."""
        if self._memory_rows == 0:
            return
        self._ensure_folder()
        parts = self._memory_parts()
        self._slabs, self._fill, self._memory_rows = [], 0, 0
        while parts:
            self._append_partitioned(self._wide(parts.pop(0)))  # the slab is freed as soon as it is written

    def _append_partitioned(self, rows: np.ndarray) -> None:
        out, bounds = _partitioned(rows)
        for p in np.flatnonzero(np.diff(bounds)):
            self._write(int(p), out[bounds[p] : bounds[p + 1]])

    def _write(self, partition: int, rows: np.ndarray) -> None:
        try:
            with open(self._path(partition), "ab") as f:
                rows.astype("<u8", copy=False).tofile(f)
        except OSError as exc:  # numpy's own message for a full disk is "N requested and 0 written"
            raise ResourceError(self._write_failure(exc, rows.nbytes)) from None
        self._disk_rows[partition] += rows.shape[0]
        self.spilled_bytes_ += rows.nbytes

    def _write_failure(self, exc: OSError, wanted: int) -> str:
        """One line on a spill write that failed: where, why, and the way out."""
        where = self.spill_dir if self.spill_dir is not None else tempfile.gettempdir()
        try:
            free = shutil.disk_usage(self._folder or where).free
        except OSError:
            free = None
        if exc.errno == errno.ENOSPC or (free is not None and free < wanted):
            why = "the disk is full" + (f" ({free:,} bytes free)" if free is not None else "")
        else:
            why = exc.strerror or "the write failed"
        return (
            f"cannot write the collision check's spill files in {where!r}: {why}; give --spill-dir on a disk with "
            f"room (about 8 bytes per distinct key per hash function) or a larger --collision-memory"
        )

    def _read(self, partition: int) -> np.ndarray:
        values = np.fromfile(self._path(partition), dtype="<u8")
        if sys.byteorder != "little":  # pragma: no cover - big-endian hosts
            values = values.astype(np.uint64)
        return values.reshape(-1, self._words)

    def _release(self) -> None:
        """Drop every stored value, in memory and on disk."""
        self._slabs, self._fill, self._memory_rows = [], 0, 0
        if self._finalizer is not None:
            self._finalizer()  # removes the folder (once)
        self._folder, self._finalizer = None, None
        self._disk_rows[:] = 0

    def close(self) -> None:
        """Release the stored values and the spill folder; a computed result stays available."""
        self._release()
        if self.result_ is None:
            self._closed = True

    def __enter__(self) -> FullCollisions:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    # ---- merging and copying ------------------------------------------------------------------------------

    def merge(self, other: FullCollisions) -> FullCollisions:
        """Add ``other``'s values to this accumulator (in place); settings must match, ``other`` is unchanged."""
        if not isinstance(other, FullCollisions) or other.settings() != self.settings():
            mine = self.settings()
            theirs = other.settings() if isinstance(other, FullCollisions) else type(other).__name__
            raise MergeError(f"cannot merge full collisions {theirs} into {mine}: settings differ")
        for acc in (self, other):
            if acc.result_ is not None or acc._closed:
                raise MergeError(
                    f"cannot merge full collisions of {acc.hash_name!r}: it already produced its result or was closed"
                )
        keys = other.keys_seen_
        memory = [part.copy() for part in other._memory_parts()] if other is self else other._memory_parts()
        if other._folder is not None:
            self._ensure_folder()
            for p in np.flatnonzero(other._disk_rows.copy()):
                self._write(int(p), other._read(int(p)))
        for part in memory:
            self._add_rows(part)
        self.keys_seen_ += keys
        return self

    def copy(self) -> FullCollisions:
        """An independent copy (with its own spill folder when this one has spilled)."""
        twin = FullCollisions(self.hash_name, self.seed, self.width, self.memory_bytes, self.spill_dir)
        twin.keys_seen_, twin.result_, twin._closed = self.keys_seen_, self.result_, self._closed
        if self._folder is not None:
            twin._ensure_folder()
            for p in np.flatnonzero(self._disk_rows):
                shutil.copyfile(self._path(int(p)), twin._path(int(p)))
            twin._disk_rows = self._disk_rows.copy()
            twin.spilled_bytes_ = int(self._disk_rows.sum()) * 8 * self._words
        for part in self._memory_parts():
            twin._add_rows(part)
        return twin

    # ---- results ------------------------------------------------------------------------------------------

    def _take_partitions(self) -> Iterator[np.ndarray]:
        """Consume the stored rows, one partition at a time (each a fresh array the caller may sort in place)."""
        if self._folder is not None:
            self._spill()
            for p in range(PARTITIONS):
                if self._disk_rows[p]:
                    yield self._read_and_remove(p)
            self._release()
            return
        parts = self._memory_parts()
        self._slabs, self._fill, self._memory_rows = [], 0, 0
        if len(parts) == 1:  # one slab (at most 16 MiB): sorted as a whole, partitions would only cost time
            yield self._wide(parts.pop())
            return
        pieces = []
        while parts:
            pieces.append(self._partitioned_rows(parts.pop(0)))  # each slab is freed once partitioned
        for p in range(PARTITIONS):
            chunks = [rows[bounds[p] : bounds[p + 1]] for rows, bounds in pieces if bounds[p + 1] > bounds[p]]
            if chunks:
                yield self._wide(chunks[0] if len(chunks) == 1 else np.concatenate(chunks))

    def _read_and_remove(self, partition: int) -> np.ndarray:
        rows = self._read(partition)
        os.remove(self._path(partition))
        self._disk_rows[partition] = 0
        return rows

    def _peek_partitions(self, whole: bool = False) -> Iterator[np.ndarray]:
        """Copies of the stored rows of each partition, in partition order, or of all of them at once when
        ``whole`` (leaves the state as it is)."""
        if whole:
            disk = [self._read(int(p)) for p in np.flatnonzero(self._disk_rows)]
            memory = [self._wide(part) for part in self._memory_parts()]
            yield np.concatenate([np.empty((0, self._words), dtype=np.uint64), *disk, *memory])
            return
        pieces = [self._partitioned_rows(part) for part in self._memory_parts()]
        for p in range(PARTITIONS):
            chunks = [self._read(p)] if self._disk_rows[p] else []
            chunks += [self._wide(rows[bounds[p] : bounds[p + 1]]) for rows, bounds in pieces]
            yield np.concatenate([np.empty((0, self._words), dtype=np.uint64), *chunks])

    def _summarize(self, partitions: Iterator[np.ndarray]) -> FullCollisionsResult:
        pairs = keys = groups = 0
        candidates: list[CollisionGroup] = []
        top_sizes = np.zeros(LARGEST_GROUPS, dtype=np.int64)
        top_rows = np.zeros((LARGEST_GROUPS, self._words), dtype=np.uint64)
        for rows in partitions:
            top_sizes[:] = 0
            found = _count_groups(rows, top_sizes, top_rows)
            del rows
            pairs, keys, groups = pairs + found[0], keys + found[1], groups + found[2]
            candidates += [
                CollisionGroup(_row_value(top_rows[i]), int(top_sizes[i])) for i in np.flatnonzero(top_sizes)
            ]
        candidates.sort(key=lambda g: (-g.keys, g.hash_value))
        return FullCollisionsResult(
            self.hash_name,
            self.seed,
            self.width,
            self.keys_seen_,
            pairs,
            keys,
            groups,
            tuple(candidates[:LARGEST_GROUPS]),
        )

    def result(self) -> FullCollisionsResult:
        """Sort, count the groups of equal values, release the stored values and return the result.

        Called again, it returns the same result. ``update`` and ``merge`` refuse afterwards.
        """
        if self.result_ is None:
            self._check_open("compute the result")
            try:
                self.result_ = self._summarize(self._take_partitions())
            finally:
                self._release()
        return self.result_

    def _peek_result(self) -> FullCollisionsResult:
        return self.result_ if self.result_ is not None else self._summarize(self._peek_partitions())

    # ---- equality and pickling ----------------------------------------------------------------------------

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, FullCollisions):
            return NotImplemented
        if self is other:
            return True
        if self.settings() != other.settings() or self.keys_seen_ != other.keys_seen_:
            return False
        if self._closed or other._closed:
            return False
        if self.result_ is not None or other.result_ is not None:
            return self._peek_result() == other._peek_result()
        whole = self.keys_seen_ <= SMALL_ROWS  # small sets compare at once; large ones a partition at a time
        for mine, theirs in zip(self._peek_partitions(whole), other._peek_partitions(whole), strict=True):
            if not np.array_equal(_sort_rows(mine), _sort_rows(theirs)):
                return False
        return True

    __hash__ = None  # type: ignore[assignment]  # mutable

    def __getstate__(self) -> dict:
        rows = None
        if self.result_ is None and not self._closed:
            (rows,) = self._peek_partitions(whole=True)
        return {
            "settings": (self.hash_name, self.seed, self.width, self.memory_bytes, self.spill_dir),
            "keys_seen": self.keys_seen_,
            "result": self.result_,
            "closed": self._closed,
            "rows": rows,
        }

    def __setstate__(self, state: dict) -> None:
        hash_name, seed, width, memory_bytes, spill_dir = state["settings"]
        if spill_dir is not None and not os.path.isdir(spill_dir):
            spill_dir = None  # unpickled on a machine without that folder: use the system's temporary folder
        self.__init__(hash_name, seed, width, memory_bytes, spill_dir)  # type: ignore[misc]
        if state["rows"] is not None:
            self._add_rows(state["rows"])
        self.keys_seen_, self.result_, self._closed = state["keys_seen"], state["result"], state["closed"]

    def __repr__(self) -> str:
        where = "spilled" if self.spilled else "in memory"
        return (
            f"FullCollisions({self.hash_name!r}, seed={self.seed}, width={self.width}, keys={self.keys_seen_}, {where})"
        )


# --------------------------------------------------------------------------------------------------------
# The test of fit
# --------------------------------------------------------------------------------------------------------


def collision_tests(result: FullCollisionsResult) -> list[FitTest]:
    """The ``full_collisions`` test: colliding pairs of distinct keys against the birthday expectation.

    Parameters
    ----------
    result : FullCollisionsResult

    Returns
    -------
    list of FitTest
        One test (none when no key was counted). ``statistic`` and ``observed`` are the colliding pairs,
        ``expected`` is C(d, 2) / 2^b for d distinct keys and b-bit values; ``p_upper`` = P(X ≥ observed),
        ``p_lower`` = P(X ≤ observed) with X Poisson of that mean. The effect ``collision_excess`` is the
        number of colliding pairs above the birthday expectation, divided by that expectation or by one pair,
        whichever is larger: 0.1 means 10 % more colliding pairs than an ideal hash gives when pairs are
        expected (a 32-bit hash over millions of keys), 1 means one pair more than expected when fewer than one
        is (64- and 128-bit hashes). ``details`` has the width, the number of groups, the keys in collisions and
        the largest groups (hash values in hex with their sizes) — never a key.

    Notes
    -----
    The number of colliding pairs is a sum of C(d, 2) pairwise independent indicators, each of probability
    2^-b; its mean is C(d, 2) / 2^b and its variance that mean times (1 - 2^-b). Chen-Stein bounds make it
    Poisson in the limit when d^3 / 2^2b is small (Arratia, Goldstein & Gordon 1989); beyond, the Poisson law
    keeps the exact mean and (to a relative 2^-b) the exact variance, i.e. the right normal limit. The Poisson
    tails are computed exactly for any count by the regularized incomplete gamma function (``pdtrc``,
    ``pdtr``), so with 128-bit values, where about 10^-23 pairs are expected for 10^8 keys, a single
    collision has a p-value near 10^-23.

    References
    ----------
    Cormen et al., Introduction to Algorithms, 3rd ed., §5.4.1 (C(n, 2) / m); Feller, vol. 1, ch. II.3;
    R. Arratia, L. Goldstein, L. Gordon, Ann. Probab. 17 (1989) 9-25.
    """
    d, b = result.keys, result.width
    if d == 0:
        return []
    details = {
        "width": b,
        "distinct_keys": d,
        "groups": result.groups,
        "keys_in_collisions": result.keys_in_collisions,
        "largest_groups": [{"hash": g.hex(b), "keys": g.keys} for g in result.largest],
    }
    method = "Poisson law of the colliding pairs (birthday problem)"
    counted = "colliding pairs of distinct keys (same full hash value)"
    return [
        colliding_pairs_test("full_collisions", result.colliding_pairs, result.expected_pairs, counted, method, details)
    ]
