"""SipHash-2-4: a keyed 64-bit PRF, the hash-flooding-resistant choice of many language runtimes.

The 128-bit key comes from the seed: ``seed % 2**128`` written as 16 little-endian bytes, so
``k0`` is the low 64 bits and ``k1`` the high 64 bits. Seed 0 is the all-zero key.

References
----------
J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012, LNCS 7668
(initialisation constants, SipRound, two compression and four finalisation rounds, length byte).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import numpy as np
from numba import njit, uint64

from hashaudit.hashes.murmur import _load64
from hashaudit.keys.batch import KeyBatch

_MASK64 = (1 << 64) - 1
_MASK128 = (1 << 128) - 1


@njit(cache=True, nogil=True)
def _rotl64(x, r):  # pragma: no cover - compiled
    return (x << uint64(r)) | (x >> uint64(64 - r))


@njit(cache=True, nogil=True)
def _sipround(v0, v1, v2, v3):  # pragma: no cover - compiled
    v0 += v1
    v1 = _rotl64(v1, 13) ^ v0
    v0 = _rotl64(v0, 32)
    v2 += v3
    v3 = _rotl64(v3, 16) ^ v2
    v0 += v3
    v3 = _rotl64(v3, 21) ^ v0
    v2 += v1
    v1 = _rotl64(v1, 17) ^ v2
    v2 = _rotl64(v2, 32)
    return v0, v1, v2, v3


@njit(cache=True, nogil=True)
def _sip_init(k0, k1):  # pragma: no cover - compiled
    """The state before any message word: the key mixed with "somepseudorandomlygeneratedbytes", the paper's
    initialisation constants."""
    return (
        k0 ^ uint64(0x736F6D6570736575),
        k1 ^ uint64(0x646F72616E646F6D),
        k0 ^ uint64(0x6C7967656E657261),
        k1 ^ uint64(0x7465646279746573),
    )


@njit(cache=True, nogil=True)
def _siphash24_kernel(data, offsets, out, k0, k1):  # pragma: no cover - compiled
    init0, init1, init2, init3 = _sip_init(k0, k1)
    for i in range(len(offsets) - 1):
        start = offsets[i]
        length = offsets[i + 1] - start
        block_end = start + (length & ~7)
        v0 = init0
        v1 = init1
        v2 = init2
        v3 = init3
        p = start
        while p < block_end:
            m = _load64(data, p)  # little-endian, at any alignment
            v3 ^= m
            v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
            v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
            v0 ^= m
            p += 8
        # last word: the remaining bytes, with the length modulo 256 in the top byte
        m = uint64(length & 0xFF) << uint64(56)
        for t in range(length & 7):
            m |= uint64(data[block_end + t]) << uint64(8 * t)
        v3 ^= m
        v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
        v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
        v0 ^= m
        v2 ^= uint64(0xFF)
        v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
        v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
        v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
        v0, v1, v2, v3 = _sipround(v0, v1, v2, v3)
        out[i] = v0 ^ v1 ^ v2 ^ v3


def siphash24(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """SipHash-2-4 of every key under the 128-bit key derived from ``seed``.

    Parameters
    ----------
    batch : KeyBatch
        The keys (messages).
    seed : int, default 0
        Taken modulo 2^128 and written as 16 little-endian bytes: ``k0 = seed & (2**64 - 1)``,
        ``k1 = (seed >> 64) & (2**64 - 1)``.

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
        The 64-bit SipHash-2-4 output of every key, read as a little-endian integer.

    References
    ----------
    J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012.
    """
    key = seed & _MASK128
    out = np.empty(len(batch), dtype=np.uint64)
    _siphash24_kernel(batch.data, batch.offsets, out, np.uint64(key & _MASK64), np.uint64(key >> 64))
    return out
