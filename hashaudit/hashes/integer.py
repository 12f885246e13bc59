"""Hashes defined on 64-bit integer keys: ``identity`` and ``fibonacci`` (multiplicative hashing).

A key is read as a little-endian unsigned integer of up to 8 bytes (shorter keys are zero-padded; longer
keys use their first 8 bytes), which is what ``--key-format int`` produces.

References
----------
D. E. Knuth, The Art of Computer Programming, vol. 3, 2nd ed., §6.4 (multiplicative hashing with
A/w close to the golden ratio, 2^64/phi = 11400714819323198485).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import numpy as np
from numba import njit, uint64

from hashaudit.keys.batch import KeyBatch

GOLDEN_MULTIPLIER = 11400714819323198485  # floor(2^64 / phi), odd


@njit(cache=True, nogil=True)
def _read_le64_kernel(data, offsets, out):  # pragma: no cover - compiled
    for i in range(len(offsets) - 1):
        start = offsets[i]
        length = min(offsets[i + 1] - start, 8)
        v = uint64(0)
        for j in range(length):
            v |= uint64(data[start + j]) << uint64(8 * j)
        out[i] = v


def _as_integers(batch: KeyBatch) -> np.ndarray:
    lengths = batch.lengths()
    if len(batch) and bool(np.all(lengths == 8)):
        return batch.words_le64(8).reshape(len(batch))
    out = np.empty(len(batch), dtype=np.uint64)
    _read_le64_kernel(batch.data, batch.offsets, out)
    return out


def identity(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """The integer key itself."""
    return _as_integers(batch)


def fibonacci(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """``key * 11400714819323198485 mod 2^64``; take the *high* bits for a table index."""
    with np.errstate(over="ignore"):
        return _as_integers(batch) * np.uint64(GOLDEN_MULTIPLIER)
