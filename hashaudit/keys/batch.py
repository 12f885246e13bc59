"""``KeyBatch``: a batch of keys in Arrow's binary layout (one byte buffer plus n+1 int64 offsets)."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class KeyBatch:
    """Keys ``i`` is ``data[offsets[i]:offsets[i + 1]]``.

    Parameters
    ----------
    data : numpy.ndarray of uint8
        All key bytes, back to back.
    offsets : numpy.ndarray of int64, length n + 1
        Start of each key in ``data``; ``offsets[0]`` need not be 0 (a slice of a larger buffer).
    weights : numpy.ndarray of float64, optional
        A weight per key (requests, bytes) from a source's weight column; None: every key weighs one.
    """

    data: np.ndarray
    offsets: np.ndarray
    weights: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.data.dtype != np.uint8 or self.data.ndim != 1:
            raise TypeError("KeyBatch.data must be a 1-d uint8 array")
        if self.offsets.dtype != np.int64 or self.offsets.ndim != 1 or len(self.offsets) < 1:
            raise TypeError("KeyBatch.offsets must be a 1-d int64 array of length n + 1")
        if self.weights is not None and (self.weights.dtype != np.float64 or self.weights.shape != (len(self),)):
            raise TypeError("KeyBatch.weights must be a float64 array with one weight per key")

    def __len__(self) -> int:
        return len(self.offsets) - 1

    @property
    def nbytes(self) -> int:
        """Bytes of key data in this batch."""
        return int(self.offsets[-1] - self.offsets[0])

    def lengths(self) -> np.ndarray:
        """Length of every key, as int64."""
        return np.diff(self.offsets)

    def key(self, i: int) -> bytes:
        """Key ``i`` as bytes (for tests and reference paths; never on the fast path)."""
        return self.data[self.offsets[i] : self.offsets[i + 1]].tobytes()

    def to_list(self) -> list[bytes]:
        """Every key as bytes (slow; for tests and per-key reference hashes)."""
        buf = self.data.tobytes()
        offs = self.offsets.tolist()
        return [buf[offs[i] : offs[i + 1]] for i in range(len(offs) - 1)]

    def slice(self, start: int, stop: int) -> KeyBatch:
        """Keys ``start`` to ``stop`` (zero-copy)."""
        weights = None if self.weights is None else self.weights[start:stop]
        return KeyBatch(self.data, self.offsets[start : stop + 1], weights)

    def take(self, positions: np.ndarray | Sequence[int]) -> KeyBatch:
        """The keys at ``positions``, in that order, copied back to back; weights follow their keys.

        Parameters
        ----------
        positions : array_like of int
            Indices of keys of this batch, in any order; an index may repeat, a negative one counts from the end.

        Returns
        -------
        KeyBatch
            A compact batch (offsets from 0) of ``len(positions)`` keys.
        """
        # the copy kernel of the key readers; imported here so that importing KeyBatch does not load numba
        from hashaudit.keys._kernels import gather

        positions = np.asarray(positions, dtype=np.int64).reshape(-1)
        if len(positions) and int(positions.min()) < 0:  # count from the end, as sequences do
            positions = np.where(positions < 0, positions + len(self), positions)
            if int(positions.min()) < 0:
                raise IndexError(f"a key position is out of range for a batch of {len(self)} keys")
        starts, stops = self.offsets[positions], self.offsets[positions + 1]
        data = np.empty(int(np.sum(stops - starts)), dtype=np.uint8)
        offsets = np.empty(len(positions) + 1, dtype=np.int64)
        gather(self.data, starts, stops, data, offsets)
        weights = None if self.weights is None else self.weights[positions]
        return KeyBatch(data, offsets, weights)

    def compact(self) -> KeyBatch:
        """A copy holding only this batch's own keys: ``data`` is exactly their bytes and offsets start at 0.

        A slice of a large buffer keeps the whole buffer alive; its compact copy does not.
        """
        start, stop = int(self.offsets[0]), int(self.offsets[-1])
        weights = None if self.weights is None else self.weights.copy()
        return KeyBatch(self.data[start:stop].copy(), self.offsets - start, weights)

    @classmethod
    def concat(cls, batches: Sequence[KeyBatch]) -> KeyBatch:
        """The keys of ``batches`` back to back, as one compact batch.

        Parameters
        ----------
        batches : sequence of KeyBatch
            Any batches (slices of larger buffers too).

        Returns
        -------
        KeyBatch
            Weighted when any batch is: a batch without weights contributes weight 1 per key (what no weights
            means); None when no batch has weights.
        """
        batches = list(batches)
        data = [b.data[int(b.offsets[0]) : int(b.offsets[-1])] for b in batches]
        lengths = [np.diff(b.offsets) for b in batches]
        offsets = np.zeros(sum(len(b) for b in batches) + 1, dtype=np.int64)
        np.cumsum(np.concatenate(lengths) if lengths else np.zeros(0, dtype=np.int64), out=offsets[1:])
        joined = np.concatenate(data) if data else np.zeros(0, dtype=np.uint8)
        weights = None
        if any(b.weights is not None for b in batches):
            weights = np.concatenate([np.ones(len(b)) if b.weights is None else b.weights for b in batches])
        return cls(joined, offsets, weights)

    def words_le64(self, length: int | None = None) -> np.ndarray:
        """Every key read as little-endian 64-bit words, when all keys have one length, a multiple of 8 bytes.

        Parameters
        ----------
        length : int, optional
            The length every key must have; default: that of the first key (8 for an empty batch).

        Returns
        -------
        numpy.ndarray of uint64, shape (n, length / 8)
            A fresh native-order array; row i holds the words of key i, its first bytes first.

        Raises
        ------
        ValueError
            When a key has another length, or the length is not a positive multiple of 8.
        """
        lengths = np.diff(self.offsets)
        width = int(length if length is not None else lengths[0] if len(lengths) else 8)
        if width <= 0 or width % 8 or not bool(np.all(lengths == width)):
            raise ValueError(f"words_le64 needs keys of one length, a positive multiple of 8 bytes (asked: {width})")
        start = int(self.offsets[0])
        words = self.data[start : start + width * len(self)].view("<u8")
        return words.astype(np.uint64, copy=True).reshape(len(self), width // 8)

    @classmethod
    def from_keys(cls, keys: Sequence[bytes] | Iterable[bytes]) -> KeyBatch:
        """Build a batch from Python bytes objects (for tests and small inputs)."""
        keys = list(keys)
        lengths = np.fromiter((len(k) for k in keys), dtype=np.int64, count=len(keys))
        offsets = np.zeros(len(keys) + 1, dtype=np.int64)
        np.cumsum(lengths, out=offsets[1:])
        data = np.frombuffer(b"".join(keys), dtype=np.uint8).copy()
        return cls(data, offsets)

    @classmethod
    def from_uint64(cls, values: np.ndarray) -> KeyBatch:
        """Integer keys as 8-byte little-endian words, the way integer-keyed tables see them."""
        values = np.ascontiguousarray(values, dtype="<u8")
        data = values.view(np.uint8)
        offsets = np.arange(0, 8 * len(values) + 1, 8, dtype=np.int64)
        return cls(data, offsets)

    @classmethod
    def from_arrow(cls, array) -> KeyBatch:  # type: ignore[no-untyped-def]
        """Zero-copy view of a pyarrow ``binary``/``large_binary``/``string`` array without nulls."""
        import pyarrow as pa

        if array.null_count:
            raise ValueError("KeyBatch.from_arrow: the array has nulls; drop them first")
        if pa.types.is_binary(array.type) or pa.types.is_string(array.type):
            array = array.cast(pa.large_binary())
        elif pa.types.is_large_string(array.type):
            array = array.view(pa.large_binary())
        _, offsets_buf, data_buf = array.buffers()
        offsets = np.frombuffer(offsets_buf, dtype=np.int64)[array.offset : array.offset + len(array) + 1]
        data = np.frombuffer(data_buf, dtype=np.uint8) if data_buf is not None else np.zeros(0, np.uint8)
        return cls(data, offsets)
