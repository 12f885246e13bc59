"""The cluster key-value store's placement: hash tags, CRC16 and 16384 hash slots.

A key goes to hash slot ``CRC16(hashed part) mod 16384``. The hashed part is the whole key unless the key
holds a *hash tag*: find the first ``{``; find the first ``}`` after it; when both exist and at least one
byte lies between them, only those bytes are hashed. Otherwise (no ``{``, no ``}`` after it, or ``{}``
right after the first ``{``) the whole key is hashed. Only the first ``{`` counts: ``foo{}{bar}`` hashes the
whole key and ``foo{{bar}}`` hashes ``{bar``. Keys sharing a tag share a slot, which is what makes
multi-key operations possible, and also what lets a few popular tags crowd a few slots.

CRC16 is the XMODEM variant: polynomial 0x1021, register preset to 0, no reflection of input or output,
no final XOR; its check value on ``123456789`` is 0x31C3. Slots are the low 14 bits, so ``% 16384`` and
``& 0x3FFF`` agree.

References
----------
Redis Cluster Specification, "Key distribution model" and "Hash tags" (the slot rule and the tag rule).
Redis Cluster Specification, appendix "CRC16 reference code" (CCITT/XMODEM, check value 0x31C3).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import numpy as np
from numba import njit, uint16

from hashaudit.keys.batch import KeyBatch

SLOTS = 16384
CRC16_POLY = 0x1021
_OPEN = 0x7B  # "{"
_CLOSE = 0x7D  # "}"


def _crc16_table(poly: int = CRC16_POLY) -> np.ndarray:
    """The byte-wise table of a non-reflected 16-bit CRC: entry ``b`` is the register after shifting in ``b``."""
    table = np.arange(256, dtype=np.uint32) << np.uint32(8)
    for _ in range(8):
        table = np.where(table & np.uint32(0x8000), (table << np.uint32(1)) ^ np.uint32(poly), table << np.uint32(1))
    return (table & np.uint32(0xFFFF)).astype(np.uint16)


_TABLE = _crc16_table()


@njit(cache=True, nogil=True)
def _tag_span(data, start, stop):  # pragma: no cover - compiled
    # absolute [from, to) of the hashed part of data[start:stop]; only the first "{" is looked at
    for p in range(start, stop):
        if data[p] == _OPEN:
            for q in range(p + 1, stop):
                if data[q] == _CLOSE:
                    if q > p + 1:
                        return p + 1, q
                    return start, stop
            return start, stop
    return start, stop


@njit(cache=True, nogil=True)
def _spans_kernel(data, offsets, lo, hi):  # pragma: no cover - compiled
    for i in range(len(offsets) - 1):
        a, b = _tag_span(data, offsets[i], offsets[i + 1])
        lo[i] = a - offsets[i]
        hi[i] = b - offsets[i]


@njit(cache=True, nogil=True)
def _crc16_kernel(data, offsets, table, out, hash_tags):  # pragma: no cover - compiled
    for i in range(len(offsets) - 1):
        if hash_tags:
            a, b = _tag_span(data, offsets[i], offsets[i + 1])
        else:
            a, b = offsets[i], offsets[i + 1]
        crc = uint16(0)
        for p in range(a, b):
            # MSB-first: the top byte of the register meets the next input byte
            crc = uint16((crc << uint16(8)) ^ table[((crc >> uint16(8)) ^ data[p]) & 0xFF])
        out[i] = crc


def hash_tag_spans(batch: KeyBatch) -> tuple[np.ndarray, np.ndarray]:
    """Where the hashed part of every key starts and stops, by the cluster's hash-tag rule.

    Parameters
    ----------
    batch : KeyBatch
        The keys.

    Returns
    -------
    start, stop : numpy.ndarray of int64, shape (n,)
        Positions *within each key*: the hashed part of key ``i`` is ``batch.key(i)[start[i]:stop[i]]``.
        A key without a usable tag gives ``(0, len(key))``; a tag gives the bytes strictly between the
        first ``{`` and the first ``}`` after it (never empty).

    References
    ----------
    Redis Cluster Specification, "Hash tags".
    """
    n = len(batch)
    start = np.empty(n, dtype=np.int64)
    stop = np.empty(n, dtype=np.int64)
    _spans_kernel(batch.data, batch.offsets, start, stop)
    return start, stop


def crc16(batch: KeyBatch, hash_tags: bool = True) -> np.ndarray:
    """CRC16 (CCITT polynomial 0x1021, XMODEM parameters) of the hashed part of every key.

    Parameters
    ----------
    batch : KeyBatch
        The keys.
    hash_tags : bool, default True
        Apply the hash-tag rule (what the cluster does); False: the CRC16 of the whole key.

    Returns
    -------
    numpy.ndarray of uint16, shape (n,)
        ``binascii.crc_hqx(part, 0)`` of each key's hashed part.

    References
    ----------
    Redis Cluster Specification, "Key distribution model" and appendix "CRC16 reference code".
    """
    out = np.empty(len(batch), dtype=np.uint16)
    _crc16_kernel(batch.data, batch.offsets, _TABLE, out, bool(hash_tags))
    return out


def slot(batch: KeyBatch) -> np.ndarray:
    """The hash slot of every key: ``CRC16(hashed part) mod 16384``.

    Parameters
    ----------
    batch : KeyBatch
        The keys.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)
        Slots in ``[0, 16384)``.

    References
    ----------
    Redis Cluster Specification, "Key distribution model" (``HASH_SLOT = CRC16(key) mod 16384``) and
    "Hash tags".
    """
    return crc16(batch).astype(np.int64) % SLOTS
