"""MD5 of every key of a batch, as a numba kernel (the ketama ring hashes keys and point labels with it).

MD5 pads the message with one ``0x80`` byte, zeros up to 56 bytes modulo 64 and the message length in bits as a
little-endian 64-bit number, then runs 64 steps per 64-byte block on four 32-bit words ``A, B, C, D`` (initially
``67452301 efcdab89 98badcfe 10325476``): four rounds of 16 steps with the functions ``F, G, H, I``, the additive
constants ``T[i] = floor(2^32 · |sin(i)|)`` and the per-step rotations. The digest is ``A, B, C, D``, each
little-endian. Used here as the ring's hash, not for security.

References
----------
R. Rivest, "The MD5 Message-Digest Algorithm", RFC 1321 (1992), sections 3.1-3.5.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import numpy as np
from numba import njit, uint32

from hashaudit.hashes.murmur import _load32  # little-endian 4-byte words at any alignment
from hashaudit.keys.batch import KeyBatch

# RFC 1321, section 3.4: T[i] = floor(4294967296 * abs(sin(i))) for i = 1..64 (i in radians); double precision
# reproduces the RFC's table (the tests compare every digest with hashlib)
_SINES = np.floor(np.abs(np.sin(np.arange(1, 65, dtype=np.float64))) * 4294967296.0).astype(np.uint32)
# RFC 1321, section 3.4: the rotations of the four rounds
_SHIFTS = np.array([7, 12, 17, 22] * 4 + [5, 9, 14, 20] * 4 + [4, 11, 16, 23] * 4 + [6, 10, 15, 21] * 4, np.uint32)
_INITIAL = np.array([0x67452301, 0xEFCDAB89, 0x98BADCFE, 0x10325476], dtype=np.uint32)  # RFC 1321, section 3.3
_ONES = 0xFFFFFFFF


@njit(cache=True, nogil=True)
def _compress(state, data, p, sines, shifts):  # pragma: no cover - compiled
    # one 64-byte block at data[p:p + 64] into state (RFC 1321, section 3.4)
    a, b, c, d = state[0], state[1], state[2], state[3]
    ones = uint32(_ONES)
    for i in range(64):
        if i < 16:
            f = (b & c) | ((b ^ ones) & d)
            g = i
        elif i < 32:
            f = (d & b) | ((d ^ ones) & c)
            g = (5 * i + 1) & 15
        elif i < 48:
            f = b ^ c ^ d
            g = (3 * i + 5) & 15
        else:
            f = c ^ (b | (d ^ ones))
            g = (7 * i) & 15
        f = uint32(uint32(f) + a + sines[i] + _load32(data, p + 4 * g))
        s = shifts[i]
        a, d, c = d, c, b
        b = uint32(b + uint32((f << s) | (f >> uint32(32 - s))))
    state[0] = uint32(state[0] + a)
    state[1] = uint32(state[1] + b)
    state[2] = uint32(state[2] + c)
    state[3] = uint32(state[3] + d)


@njit(cache=True, nogil=True)
def _md5_kernel(data, offsets, initial, sines, shifts, out):  # pragma: no cover - compiled
    tail = np.zeros(128, dtype=np.uint8)
    state = np.empty(4, dtype=np.uint32)
    for i in range(len(offsets) - 1):
        start = offsets[i]
        length = offsets[i + 1] - start
        state[:] = initial
        block_end = start + (length & ~63)
        p = start
        while p < block_end:
            _compress(state, data, p, sines, shifts)
            p += 64
        # the padded last one or two blocks: the remaining bytes, 0x80, zeros, the length in bits
        rem = length & 63
        blocks = 1 if rem < 56 else 2
        tail[:] = 0
        for t in range(rem):
            tail[t] = data[block_end + t]
        tail[rem] = 0x80
        bits = np.uint64(length) << np.uint64(3)
        for t in range(8):
            tail[64 * blocks - 8 + t] = np.uint8((bits >> np.uint64(8 * t)) & np.uint64(0xFF))
        for q in range(blocks):
            _compress(state, tail, 64 * q, sines, shifts)
        out[i, :] = state


def md5_words(batch: KeyBatch) -> np.ndarray:
    """MD5 of every key, as the digest's four little-endian 32-bit words.

    Parameters
    ----------
    batch : KeyBatch
        The keys.

    Returns
    -------
    numpy.ndarray of uint32, shape (n, 4)
        Row ``i`` is ``A, B, C, D`` of key ``i``'s digest: word ``j`` is
        ``int.from_bytes(hashlib.md5(key).digest()[4 * j : 4 * j + 4], "little")``.

    References
    ----------
    R. Rivest, "The MD5 Message-Digest Algorithm", RFC 1321 (1992).
    """
    out = np.empty((len(batch), 4), dtype=np.uint32)
    _md5_kernel(batch.data, batch.offsets, _INITIAL, _SINES, _SHIFTS, out)
    return out


def md5_digests(batch: KeyBatch) -> np.ndarray:
    """MD5 digest of every key, as 16 bytes per row (``hashlib.md5(key).digest()``).

    Parameters
    ----------
    batch : KeyBatch
        The keys.

    Returns
    -------
    numpy.ndarray of uint8, shape (n, 16)

    References
    ----------
    R. Rivest, "The MD5 Message-Digest Algorithm", RFC 1321 (1992), section 3.5 (the digest's byte order).
    """
    return md5_words(batch).astype("<u4").view(np.uint8).reshape(len(batch), 16)
