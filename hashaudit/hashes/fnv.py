"""FNV-1 / FNV-1a (32 and 64 bit) and the classic multiply-add string hashes poly31, djb2 and sdbm.

References
----------
Fowler, Noll, Vo; Eastlake et al., "The FNV Non-Cryptographic Hash Algorithm", IETF draft
draft-eastlake-fnv (offset bases and primes). poly31 is ``h = 31*h + byte`` (the string hash of Java's
``String.hashCode`` over bytes); djb2 is D. J. Bernstein's ``h = 33*h + byte`` from 5381; sdbm is the
hash of the sdbm database library, ``h = byte + (h << 6) + (h << 16) - h``. All three are 32-bit here.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import numpy as np
from numba import njit, uint32, uint64

from hashaudit.keys.batch import KeyBatch

FNV32_OFFSET = 0x811C9DC5
FNV32_PRIME = 0x01000193
FNV64_OFFSET = 0xCBF29CE484222325
FNV64_PRIME = 0x100000001B3


@njit(cache=True, nogil=True)
def _fnv32_kernel(data, offsets, out, variant_a):  # pragma: no cover - compiled
    prime = uint32(FNV32_PRIME)
    for i in range(len(offsets) - 1):
        h = uint32(FNV32_OFFSET)
        for j in range(offsets[i], offsets[i + 1]):
            if variant_a:
                h = uint32((h ^ uint32(data[j])) * prime)
            else:
                h = uint32(h * prime) ^ uint32(data[j])
        out[i] = uint64(h)


@njit(cache=True, nogil=True)
def _fnv64_kernel(data, offsets, out, variant_a):  # pragma: no cover - compiled
    prime = uint64(FNV64_PRIME)
    for i in range(len(offsets) - 1):
        h = uint64(FNV64_OFFSET)
        for j in range(offsets[i], offsets[i + 1]):
            if variant_a:
                h = (h ^ uint64(data[j])) * prime
            else:
                h = (h * prime) ^ uint64(data[j])
        out[i] = h


@njit(cache=True, nogil=True)
def _multiply_add32_kernel(data, offsets, out, start, multiplier):  # pragma: no cover - compiled
    for i in range(len(offsets) - 1):
        h = uint32(start)
        for j in range(offsets[i], offsets[i + 1]):
            h = uint32(h * uint32(multiplier) + uint32(data[j]))
        out[i] = uint64(h)


@njit(cache=True, nogil=True)
def _sdbm_kernel(data, offsets, out):  # pragma: no cover - compiled
    for i in range(len(offsets) - 1):
        h = uint32(0)
        for j in range(offsets[i], offsets[i + 1]):
            h = uint32(uint32(data[j]) + (h << uint32(6)) + (h << uint32(16)) - h)
        out[i] = uint64(h)


def _out(batch: KeyBatch) -> np.ndarray:
    return np.empty(len(batch), dtype=np.uint64)


def fnv1_32(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """FNV-1 32-bit of every key."""
    out = _out(batch)
    _fnv32_kernel(batch.data, batch.offsets, out, False)
    return out


def fnv1a_32(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """FNV-1a 32-bit of every key."""
    out = _out(batch)
    _fnv32_kernel(batch.data, batch.offsets, out, True)
    return out


def fnv1_64(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """FNV-1 64-bit of every key."""
    out = _out(batch)
    _fnv64_kernel(batch.data, batch.offsets, out, False)
    return out


def fnv1a_64(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """FNV-1a 64-bit of every key."""
    out = _out(batch)
    _fnv64_kernel(batch.data, batch.offsets, out, True)
    return out


def poly31(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """``h = 31*h + byte`` from 0, modulo 2^32."""
    out = _out(batch)
    _multiply_add32_kernel(batch.data, batch.offsets, out, 0, 31)
    return out


def djb2(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """``h = 33*h + byte`` from 5381, modulo 2^32."""
    out = _out(batch)
    _multiply_add32_kernel(batch.data, batch.offsets, out, 5381, 33)
    return out


def sdbm(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """``h = byte + (h << 6) + (h << 16) - h`` from 0, modulo 2^32."""
    out = _out(batch)
    _sdbm_kernel(batch.data, batch.offsets, out)
    return out
