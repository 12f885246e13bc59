"""CRC-32 (the zlib / IEEE 802.3 polynomial) and CRC-32C (Castagnoli), table-driven, slicing-by-8.

Both are reflected CRCs with the register preset to all ones and inverted at the end. The seed is the
*starting value* in the sense of ``zlib.crc32(data, value)``: the CRC of whatever came before, so
``crc32(b, crc32(a))`` equals the CRC of ``a + b``. Seed 0 gives the standard CRC.

Slicing-by-8 consumes eight bytes per step through eight 256-entry tables: ``table[0]`` is the classic
byte-wise table and ``table[k][b]`` is the register contribution of byte ``b`` followed by ``k`` zero
bytes, so the eight lookups of one step are independent and can overlap in the CPU.

References
----------
ISO/IEC 3309, ITU-T V.42 and IEEE 802.3 (CRC-32, polynomial 0x04C11DB7, reflected 0xEDB88320).
G. Castagnoli, S. Braeuer, M. Herrmann, "Optimization of cyclic redundancy-check codes with 24 and 32
parity bits", IEEE Trans. Communications 41(6), 1993; RFC 3720 (iSCSI) section 12.1 (CRC-32C, polynomial
0x1EDC6F41, reflected 0x82F63B78).
M. E. Kounavis, F. L. Berry, "A systematic approach to building high performance software-based CRC
generators", ISCC 2005 (slicing-by-8).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import numpy as np
from numba import njit, uint32, uint64

from hashaudit.keys.batch import KeyBatch

CRC32_POLY_REFLECTED = 0xEDB88320
CRC32C_POLY_REFLECTED = 0x82F63B78
_SEED_MASK = 0xFFFFFFFF


def slicing_tables(poly_reflected: int) -> np.ndarray:
    """The eight 256-entry tables of a reflected 32-bit CRC for slicing-by-8.

    Parameters
    ----------
    poly_reflected : int
        The generator polynomial in reflected (LSB-first) form, e.g. ``0xEDB88320``.

    Returns
    -------
    numpy.ndarray of uint32, shape (8, 256)
        ``[0]`` is the byte-wise table; ``[k][b]`` is ``[k-1][b]`` advanced by one zero byte.
    """
    poly = np.uint32(poly_reflected)
    table = np.arange(256, dtype=np.uint32)
    for _ in range(8):
        table = np.where(table & np.uint32(1), (table >> np.uint32(1)) ^ poly, table >> np.uint32(1))
    tables = np.empty((8, 256), dtype=np.uint32)
    tables[0] = table
    for k in range(1, 8):
        prev = tables[k - 1]
        tables[k] = (prev >> np.uint32(8)) ^ table[prev & np.uint32(0xFF)]
    return tables


_CRC32_TABLES = slicing_tables(CRC32_POLY_REFLECTED)
_CRC32C_TABLES = slicing_tables(CRC32C_POLY_REFLECTED)


@njit(cache=True, nogil=True)
def _crc_kernel(data, offsets, out, tables, seed):  # pragma: no cover - compiled
    mask = uint32(0xFF)
    for i in range(len(offsets) - 1):
        p = offsets[i]
        end = offsets[i + 1]
        crc = uint32(~seed)
        while end - p >= 8:
            # reflected CRC: the first byte sits in the low bits, so the words are read little-endian
            lo = crc ^ (
                uint32(data[p])
                | (uint32(data[p + 1]) << uint32(8))
                | (uint32(data[p + 2]) << uint32(16))
                | (uint32(data[p + 3]) << uint32(24))
            )
            hi = (
                uint32(data[p + 4])
                | (uint32(data[p + 5]) << uint32(8))
                | (uint32(data[p + 6]) << uint32(16))
                | (uint32(data[p + 7]) << uint32(24))
            )
            crc = uint32(
                tables[7, lo & mask]
                ^ tables[6, (lo >> uint32(8)) & mask]
                ^ tables[5, (lo >> uint32(16)) & mask]
                ^ tables[4, (lo >> uint32(24)) & mask]
                ^ tables[3, hi & mask]
                ^ tables[2, (hi >> uint32(8)) & mask]
                ^ tables[1, (hi >> uint32(16)) & mask]
                ^ tables[0, (hi >> uint32(24)) & mask]
            )
            p += 8
        while p < end:
            crc = uint32(tables[0, (crc ^ uint32(data[p])) & mask] ^ (crc >> uint32(8)))
            p += 1
        out[i] = uint64(uint32(~crc))


def _run(batch: KeyBatch, seed: int, tables: np.ndarray) -> np.ndarray:
    out = np.empty(len(batch), dtype=np.uint64)
    _crc_kernel(batch.data, batch.offsets, out, tables, np.uint32(seed & _SEED_MASK))
    return out


def crc32(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """CRC-32 (zlib, IEEE 802.3) of every key.

    Parameters
    ----------
    batch : KeyBatch
        The keys.
    seed : int, default 0
        Starting value modulo 2^32, as the ``value`` argument of ``zlib.crc32``.

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
        ``zlib.crc32(key, seed % 2**32)`` for every key.

    References
    ----------
    IEEE 802.3 / ITU-T V.42 CRC-32; Kounavis & Berry, ISCC 2005 (slicing-by-8).
    """
    return _run(batch, seed, _CRC32_TABLES)


def crc32c(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """CRC-32C (Castagnoli) of every key.

    Parameters
    ----------
    batch : KeyBatch
        The keys.
    seed : int, default 0
        Starting value modulo 2^32, as the ``value`` argument of ``crc32c.crc32c`` (the CRC of
        preceding data; 0 gives the standard CRC-32C).

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
        ``crc32c.crc32c(key, seed % 2**32)`` for every key.

    References
    ----------
    Castagnoli, Braeuer, Herrmann, IEEE Trans. Commun. 41(6), 1993; RFC 3720 section 12.1.
    """
    return _run(batch, seed, _CRC32C_TABLES)
