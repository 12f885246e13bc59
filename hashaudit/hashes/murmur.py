"""MurmurHash3: the x86 32-bit variant and the x64 128-bit variant.

Both read the key in little-endian blocks (4 and 16 bytes), mix each block into the state, fold in the
tail and the length, and end with a finalisation mix (``fmix32`` / ``fmix64``). The seed is 32 bits in
both variants (the x64 variant starts both 64-bit halves at the seed), so ``seed`` is taken modulo 2^32.

References
----------
A. Appleby, MurmurHash3 (public-domain reference implementation ``MurmurHash3.cpp``, 2011): constants,
block mix, tail handling and finalisers ``fmix32`` / ``fmix64``.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import numpy as np
from numba import njit, uint32, uint64

from hashaudit.keys.batch import KeyBatch

_C1_32 = 0xCC9E2D51
_C2_32 = 0x1B873593
_C1_64 = 0x87C37B91114253D5
_C2_64 = 0x4CF5AD432745937F
_SEED_MASK = 0xFFFFFFFF


@njit(cache=True, nogil=True)
def _rotl32(x, r):  # pragma: no cover - compiled
    # the widened shift may carry bits above 32; the outer cast drops them
    return uint32((x << uint32(r)) | (x >> uint32(32 - r)))


@njit(cache=True, nogil=True)
def _rotl64(x, r):  # pragma: no cover - compiled
    return (x << uint64(r)) | (x >> uint64(64 - r))


@njit(cache=True, nogil=True)
def _load32(data, p):  # pragma: no cover - compiled
    # byte by byte: keys start at any alignment; LLVM fuses this into one load
    return (
        uint32(data[p])
        | (uint32(data[p + 1]) << uint32(8))
        | (uint32(data[p + 2]) << uint32(16))
        | (uint32(data[p + 3]) << uint32(24))
    )


@njit(cache=True, nogil=True)
def _load64(data, p):  # pragma: no cover - compiled
    return (
        uint64(data[p])
        | (uint64(data[p + 1]) << uint64(8))
        | (uint64(data[p + 2]) << uint64(16))
        | (uint64(data[p + 3]) << uint64(24))
        | (uint64(data[p + 4]) << uint64(32))
        | (uint64(data[p + 5]) << uint64(40))
        | (uint64(data[p + 6]) << uint64(48))
        | (uint64(data[p + 7]) << uint64(56))
    )


@njit(cache=True, nogil=True)
def _fmix64(k):  # pragma: no cover - compiled
    k ^= k >> uint64(33)
    k *= uint64(0xFF51AFD7ED558CCD)
    k ^= k >> uint64(33)
    k *= uint64(0xC4CEB9FE1A85EC53)
    k ^= k >> uint64(33)
    return k


@njit(cache=True, nogil=True)
def _murmur3_32_kernel(data, offsets, out, seed):  # pragma: no cover - compiled
    c1 = uint32(_C1_32)
    c2 = uint32(_C2_32)
    for i in range(len(offsets) - 1):
        start = offsets[i]
        length = offsets[i + 1] - start
        block_end = start + (length & ~3)
        h = uint32(seed)
        p = start
        while p < block_end:
            k = uint32(_load32(data, p) * c1)
            k = uint32(_rotl32(k, 15) * c2)
            h = _rotl32(h ^ k, 13)
            h = uint32(h * uint32(5) + uint32(0xE6546B64))
            p += 4
        rem = length & 3
        if rem:
            k = uint32(0)
            for t in range(rem):
                k |= uint32(data[block_end + t]) << uint32(8 * t)
            k = uint32(k * c1)
            k = uint32(_rotl32(k, 15) * c2)
            h ^= k
        # the reference mixes in the length as a 32-bit int
        h ^= uint32(length & 0xFFFFFFFF)
        h ^= h >> uint32(16)
        h = uint32(h * uint32(0x85EBCA6B))
        h ^= h >> uint32(13)
        h = uint32(h * uint32(0xC2B2AE35))
        h ^= h >> uint32(16)
        out[i] = uint64(h)


@njit(cache=True, nogil=True)
def _murmur3_128_kernel(data, offsets, out, seed):  # pragma: no cover - compiled
    c1 = uint64(_C1_64)
    c2 = uint64(_C2_64)
    for i in range(len(offsets) - 1):
        start = offsets[i]
        length = offsets[i + 1] - start
        block_end = start + (length & ~15)
        h1 = uint64(seed)
        h2 = uint64(seed)
        p = start
        while p < block_end:
            k1 = _load64(data, p)
            k2 = _load64(data, p + 8)
            k1 = _rotl64(k1 * c1, 31) * c2
            h1 ^= k1
            h1 = _rotl64(h1, 27) + h2
            h1 = h1 * uint64(5) + uint64(0x52DCE729)
            k2 = _rotl64(k2 * c2, 33) * c1
            h2 ^= k2
            h2 = _rotl64(h2, 31) + h1
            h2 = h2 * uint64(5) + uint64(0x38495AB5)
            p += 16
        rem = length & 15
        if rem:
            # tail bytes 0..7 go to k1, 8..14 to k2, little-endian, as in the reference's switch
            k1 = uint64(0)
            k2 = uint64(0)
            for t in range(rem):
                if t < 8:
                    k1 |= uint64(data[block_end + t]) << uint64(8 * t)
                else:
                    k2 |= uint64(data[block_end + t]) << uint64(8 * (t - 8))
            if rem > 8:
                h2 ^= _rotl64(k2 * c2, 33) * c1
            h1 ^= _rotl64(k1 * c1, 31) * c2
        h1 ^= uint64(length)
        h2 ^= uint64(length)
        h1 += h2
        h2 += h1
        h1 = _fmix64(h1)
        h2 = _fmix64(h2)
        h1 += h2
        h2 += h1
        out[i, 0] = h1
        out[i, 1] = h2


def murmur3_32(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """MurmurHash3 x86_32 of every key.

    Parameters
    ----------
    batch : KeyBatch
        The keys.
    seed : int, default 0
        Taken modulo 2^32 (the function has a 32-bit seed).

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
        Hash values below 2^32; key ``i`` gives ``mmh3.hash(key, seed % 2**32, signed=False)``.

    References
    ----------
    A. Appleby, MurmurHash3 reference implementation (``MurmurHash3_x86_32``), 2011.
    """
    out = np.empty(len(batch), dtype=np.uint64)
    _murmur3_32_kernel(batch.data, batch.offsets, out, np.uint32(seed & _SEED_MASK))
    return out


def murmur3_128(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """MurmurHash3 x64_128 of every key.

    Parameters
    ----------
    batch : KeyBatch
        The keys.
    seed : int, default 0
        Taken modulo 2^32 (the reference takes a 32-bit seed and starts both halves at it).

    Returns
    -------
    numpy.ndarray of uint64, shape (n, 2)
        Column 0 is the first 64-bit output word (the low half of ``mmh3.hash128(key, seed, x64arch=True)``),
        column 1 the second (the high half).

    References
    ----------
    A. Appleby, MurmurHash3 reference implementation (``MurmurHash3_x64_128``), 2011.
    """
    out = np.empty((len(batch), 2), dtype=np.uint64)
    _murmur3_128_kernel(batch.data, batch.offsets, out, np.uint64(seed & _SEED_MASK))
    return out
