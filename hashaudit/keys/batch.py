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

    def take(self, positions: np.ndarray) -> KeyBatch:
        """The keys at ``positions`` (increasing, no repeats), copied back to back; weights follow their keys."""
        positions = np.asarray(positions, dtype=np.int64)
        lengths = np.diff(self.offsets)
        wanted = np.zeros(len(self), dtype=bool)
        wanted[positions] = True
        data = self.data[int(self.offsets[0]) : int(self.offsets[-1])][np.repeat(wanted, lengths)]
        offsets = np.zeros(len(positions) + 1, dtype=np.int64)
        np.cumsum(lengths[positions], out=offsets[1:])
        weights = None if self.weights is None else self.weights[positions]
        return KeyBatch(data, offsets, weights)

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
