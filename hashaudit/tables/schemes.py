"""Bucketing schemes: pure functions from hash values and a table size ``m`` to bucket indices.

``mod``    ``h mod m`` (any m)
``mask``   ``h & (m - 1)``: the low bits (m a power of two)
``high``   the top ``log2 m`` bits of the ``width``-bit value (m a power of two)
``range``  multiply-high range reduction ``(h * m) >> width`` (any m)

Every scheme also has a fused numba kernel that adds the keys of a batch to a count array without building
the index array, which is what the accumulators use.

References
----------
D. E. Knuth, The Art of Computer Programming, vol. 3, 2nd ed., §6.4 (division and multiplicative methods).
D. Lemire, "Fast random integer generation in an interval", ACM TOMACS 29(1), 2019 (multiply-high reduction).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import numpy as np
from numba import njit, uint64

from hashaudit.errors import UsageError
from hashaudit.settings import SettingError

SCHEMES = ("mod", "mask", "high", "range")
MAX_BUCKETS = 1 << 32


def is_power_of_two(m: int) -> bool:
    """True when ``m`` is a positive power of two."""
    return m > 0 and (m & (m - 1)) == 0


def check_scheme(scheme: str, buckets: int) -> None:
    """Raise ``UsageError`` when ``scheme`` cannot bucket into ``buckets`` slots."""
    if scheme not in SCHEMES:
        raise UsageError(f"unknown scheme {scheme!r}; choose one of {', '.join(SCHEMES)}")
    if not isinstance(buckets, (int, np.integer)) or isinstance(buckets, bool) or buckets < 1:
        raise SettingError("buckets", f"must be a positive integer, not {buckets!r}")
    if buckets > MAX_BUCKETS:
        raise SettingError("buckets", f"{buckets} is above the supported maximum 2^32")
    if scheme in ("mask", "high") and not is_power_of_two(int(buckets)):
        raise SettingError("schemes", f"{scheme} needs a power-of-two table size; {buckets} is not (try mod or range)")


@njit(cache=True, nogil=True)
def _mulhi64(a, b):  # pragma: no cover - compiled
    """High 64 bits of the 128-bit product of two uint64 values."""
    mask32 = uint64(0xFFFFFFFF)
    a_lo = a & mask32
    a_hi = a >> uint64(32)
    b_lo = b & mask32
    b_hi = b >> uint64(32)
    lo_lo = a_lo * b_lo
    hi_lo = a_hi * b_lo
    lo_hi = a_lo * b_hi
    hi_hi = a_hi * b_hi
    cross = (lo_lo >> uint64(32)) + (hi_lo & mask32) + lo_hi
    return (hi_lo >> uint64(32)) + (cross >> uint64(32)) + hi_hi


@njit(cache=True, nogil=True)
def _index_kernel(hashes, kind, m, width, out):  # pragma: no cover - compiled
    mm = uint64(m)
    w = uint64(width)
    if kind == 0:
        for i in range(hashes.shape[0]):
            out[i] = hashes[i] % mm
    elif kind == 1:
        mask = mm - uint64(1)
        for i in range(hashes.shape[0]):
            out[i] = hashes[i] & mask
    elif kind == 2:
        bits = uint64(0)
        while (uint64(1) << bits) < mm:
            bits += uint64(1)
        if bits == 0:
            for i in range(hashes.shape[0]):
                out[i] = 0
        else:
            shift = w - bits
            for i in range(hashes.shape[0]):
                out[i] = hashes[i] >> shift
    else:
        if width == 64:
            for i in range(hashes.shape[0]):
                out[i] = _mulhi64(hashes[i], mm)
        else:
            # a w-bit value times m < 2^32 fits in 64 bits; larger m go through the 128-bit product
            lift = uint64(64) - w
            for i in range(hashes.shape[0]):
                out[i] = _mulhi64(hashes[i] << lift, mm)


@njit(cache=True, nogil=True)
def _count_kernel(hashes, kind, m, width, counts):  # pragma: no cover - compiled
    mm = uint64(m)
    w = uint64(width)
    if kind == 0:
        for i in range(hashes.shape[0]):
            counts[hashes[i] % mm] += 1
    elif kind == 1:
        mask = mm - uint64(1)
        for i in range(hashes.shape[0]):
            counts[hashes[i] & mask] += 1
    elif kind == 2:
        bits = uint64(0)
        while (uint64(1) << bits) < mm:
            bits += uint64(1)
        if bits == 0:
            counts[0] += hashes.shape[0]
        else:
            shift = w - bits
            for i in range(hashes.shape[0]):
                counts[hashes[i] >> shift] += 1
    else:
        lift = uint64(64) - w
        for i in range(hashes.shape[0]):
            counts[_mulhi64(hashes[i] << lift, mm)] += 1


_KIND = {"mod": 0, "mask": 1, "high": 2, "range": 3}


def _prepare(hashes: np.ndarray, width: int) -> np.ndarray:
    if hashes.ndim == 2:  # 128-bit: tables use the low 64-bit word
        hashes = hashes[:, 0]
    if width not in (32, 64, 128):
        raise UsageError(f"hash width must be 32, 64 or 128, not {width}")
    values = np.ascontiguousarray(hashes, dtype=np.uint64)
    if width == 32 and len(values) and int(values.max()) >> 32:
        raise UsageError("hash values wider than the declared 32 bits: bucket indices would leave the table")
    return values


def bucket_index(hashes: np.ndarray, scheme: str, buckets: int, width: int = 64) -> np.ndarray:
    """Bucket index of every hash value.

    Parameters
    ----------
    hashes : numpy.ndarray of uint64
        Hash values (``uint64[n]``; for 128-bit functions ``uint64[n, 2]``, of which the low word is used).
    scheme : {"mod", "mask", "high", "range"}
    buckets : int
        Table size m.
    width : int
        Output width of the hash in bits (``high`` and ``range`` read the top of a ``width``-bit value).

    Returns
    -------
    numpy.ndarray of uint64, values in ``[0, m)``.
    """
    check_scheme(scheme, buckets)
    values = _prepare(hashes, width)
    out = np.empty(len(values), dtype=np.uint64)
    _index_kernel(values, _KIND[scheme], int(buckets), min(width, 64), out)
    return out


def add_counts(hashes: np.ndarray, scheme: str, buckets: int, width: int, counts: np.ndarray) -> None:
    """Add one to ``counts[bucket]`` for every hash value (``counts``: uint32 or int64, of length ``buckets``)."""
    values = _prepare(hashes, width)
    _count_kernel(values, _KIND[scheme], int(buckets), min(width, 64), counts)
