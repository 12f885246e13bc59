"""JVM placements of string keys: ``String.hashCode``, the ``Math.abs(h % n)`` selector, ``HashMap`` buckets.

``String.hashCode`` is ``s[0]*31^(n-1) + s[1]*31^(n-2) + ... + s[n-1]`` on Java ``int`` (wrapping modulo
2^32), where ``s[i]`` are the string's UTF-16 code units. A key arrives here as bytes; the JVM would first
decode them (``new String(bytes, UTF_8)``), so the kernel decodes UTF-8 on the fly and iterates over the
UTF-16 code units of the result: a code point up to U+FFFF is one unit, a code point above is the
surrogate pair ``0xD800 + (v >> 10)``, ``0xDC00 + (v & 0x3FF)`` with ``v = cp - 0x10000``.

Invalid UTF-8 decodes exactly as Python's ``bytes.decode("utf-8", "replace")``: one U+FFFD per *maximal
subpart* of an ill-formed sequence (the Unicode Standard's recommended practice). Reading a lead byte, the
decoder checks the following bytes against the ranges of the well-formed sequences (Unicode Table 3-7:
after E0 only A0..BF, after ED only 80..9F, after F0 only 90..BF, after F4 only 80..8F, else 80..BF). At
the first byte that does not fit, or at the end of the key, the lead byte and the continuation bytes
accepted so far become one U+FFFD, and decoding resumes *at* the byte that did not fit. A byte that
cannot start a sequence (80..C1, F5..FF) is one U+FFFD on its own. So ``E2 82`` at the end of a key is one
U+FFFD, an encoded surrogate ``ED A0 80`` is three, and the overlong ``C0 AF`` is two. The JVM's decoder
also replaces ill-formed input with U+FFFD; this rule is the Unicode Standard's recommended practice, and a
JVM that grouped ill-formed bytes differently would give other hash codes for those keys only (keys that are
well-formed UTF-8 are unaffected).

``java.util.HashMap`` does not use the hash code directly: it XORs the high half into the low half
(``h ^ (h >>> 16)``) and takes the low bits, ``(table_size - 1) & spread``, for a power-of-two table.

References
----------
Java SE API Specification, ``java.lang.String.hashCode`` (the formula over the ``char`` values) and
``java.lang.String(byte[], Charset)`` (malformed input is replaced with the charset's replacement string).
OpenJDK, ``java.util.HashMap.hash`` and ``HashMap.getNode`` (JDK 8 and later: spread and bucket index).
The Unicode Standard, chapter 3, section 3.9, Table 3-7 "Well-Formed UTF-8 Byte Sequences" and "U+FFFD
Substitution of Maximal Subparts"; RFC 3629 (UTF-8); chapter 3 "UTF-16" (surrogate pairs).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import operator

import numpy as np
from numba import njit, uint32

from hashaudit.keys.batch import KeyBatch

REPLACEMENT = 0xFFFD
_MULTIPLIER = 31


@njit(cache=True, nogil=True)
def _next_code_point(data, p, stop):  # pragma: no cover - compiled
    # (code point, next position) of the character at p; U+FFFD for a maximal ill-formed subpart
    b0 = data[p]
    if b0 < 0x80:
        return np.int64(b0), p + 1
    # the number of continuation bytes and the range allowed for the first of them (Unicode Table 3-7);
    # the other continuation bytes are always 80..BF
    if 0xC2 <= b0 <= 0xDF:
        need, lo, hi, cp = 1, 0x80, 0xBF, np.int64(b0 & 0x1F)
    elif b0 == 0xE0:
        need, lo, hi, cp = 2, 0xA0, 0xBF, np.int64(b0 & 0x0F)
    elif b0 == 0xED:  # excludes the encoded surrogates D800..DFFF
        need, lo, hi, cp = 2, 0x80, 0x9F, np.int64(b0 & 0x0F)
    elif 0xE1 <= b0 <= 0xEF:
        need, lo, hi, cp = 2, 0x80, 0xBF, np.int64(b0 & 0x0F)
    elif b0 == 0xF0:
        need, lo, hi, cp = 3, 0x90, 0xBF, np.int64(b0 & 0x07)
    elif 0xF1 <= b0 <= 0xF3:
        need, lo, hi, cp = 3, 0x80, 0xBF, np.int64(b0 & 0x07)
    elif b0 == 0xF4:  # excludes code points above U+10FFFF
        need, lo, hi, cp = 3, 0x80, 0x8F, np.int64(b0 & 0x07)
    else:  # a continuation byte, or a lead byte of an overlong or out-of-range form
        return np.int64(REPLACEMENT), p + 1
    q = p + 1
    for _ in range(need):
        if q >= stop or data[q] < lo or data[q] > hi:
            # the bytes read so far are one maximal subpart; the offending byte starts the next character
            return np.int64(REPLACEMENT), q
        cp = (cp << 6) | np.int64(data[q] & 0x3F)
        q += 1
        lo, hi = 0x80, 0xBF
    return cp, q


@njit(cache=True, nogil=True)
def _hashcode_kernel(data, offsets, out):  # pragma: no cover - compiled
    m = uint32(_MULTIPLIER)
    for i in range(len(offsets) - 1):
        p = offsets[i]
        stop = offsets[i + 1]
        h = uint32(0)
        while p < stop:
            cp, p = _next_code_point(data, p, stop)
            if cp < 0x10000:
                h = uint32(h * m + uint32(cp))
            else:
                v = cp - 0x10000
                h = uint32(h * m + uint32(0xD800 + (v >> 10)))
                h = uint32(h * m + uint32(0xDC00 + (v & 0x3FF)))
        out[i] = h


def string_hashcode(batch: KeyBatch) -> np.ndarray:
    """``java.lang.String.hashCode`` of every key decoded as UTF-8.

    Parameters
    ----------
    batch : KeyBatch
        The keys, UTF-8 encoded; ill-formed sequences decode to U+FFFD as ``bytes.decode("utf-8", "replace")``
        does (see the module notes).

    Returns
    -------
    numpy.ndarray of int32, shape (n,)
        The Java ``int`` hash code, signed.

    References
    ----------
    Java SE API Specification, ``java.lang.String.hashCode``.
    The Unicode Standard, section 3.9, "U+FFFD Substitution of Maximal Subparts".
    """
    out = np.empty(len(batch), dtype=np.uint32)
    _hashcode_kernel(batch.data, batch.offsets, out)
    return out.view(np.int32)


def hashcode_mod(batch: KeyBatch, n: int) -> np.ndarray:
    """``Math.abs(key.hashCode() % n)`` for every key, with Java's ``%``.

    Java's ``%`` truncates (the remainder takes the sign of the dividend), so a negative hash code gives a
    remainder in ``(-n, 0]`` and the absolute value folds it onto ``[0, n)``: hash codes ``h`` and ``-h``
    always share a partition, so the partitions are not those of ``h mod n``.

    Parameters
    ----------
    batch : KeyBatch
        The keys, UTF-8 encoded.
    n : int
        Number of partitions, from 1 to 2^31 - 1 (a Java ``int``).

    Returns
    -------
    numpy.ndarray of int64, shape (n_keys,)
        Values in ``[0, n)``.

    Raises
    ------
    ValueError
        When ``n`` is not in ``[1, 2^31 - 1]``.

    References
    ----------
    Java SE Language Specification, section 15.17.3 "Remainder Operator %".
    Java SE API Specification, ``java.lang.String.hashCode`` and ``java.lang.Math.abs(int)``.
    """
    n = operator.index(n)
    if not 1 <= n <= 0x7FFFFFFF:
        raise ValueError(f"n must be a positive Java int (got {n})")
    h = string_hashcode(batch).astype(np.int64)
    # in int64, |h % n| (truncated) equals |h| % n, and |h| cannot overflow even for h = -2^31
    return np.abs(h) % np.int64(n)


def hashmap_spread(batch: KeyBatch) -> np.ndarray:
    """``java.util.HashMap``'s hash of every key: ``h ^ (h >>> 16)`` of ``String.hashCode``.

    Parameters
    ----------
    batch : KeyBatch
        The keys, UTF-8 encoded.

    Returns
    -------
    numpy.ndarray of uint32, shape (n,)
        The spread hash, as unsigned bits (``.view(numpy.int32)`` gives the Java ``int``).

    References
    ----------
    OpenJDK, ``java.util.HashMap.hash(Object)`` (JDK 8 and later).
    """
    h = string_hashcode(batch).view(np.uint32)
    return h ^ (h >> np.uint32(16))


def hashmap_bucket(batch: KeyBatch, table_size: int) -> np.ndarray:
    """The bucket of every key in a ``java.util.HashMap`` of ``table_size`` buckets.

    Parameters
    ----------
    batch : KeyBatch
        The keys, UTF-8 encoded.
    table_size : int
        The table length, a power of two (the map keeps it so; 16 by default, doubling on resize).

    Returns
    -------
    numpy.ndarray of int64, shape (n,)
        ``spread & (table_size - 1)``.

    Raises
    ------
    ValueError
        When ``table_size`` is not a power of two from 1 to 2^30 (the map's maximum capacity).

    References
    ----------
    OpenJDK, ``java.util.HashMap.getNode`` / ``putVal`` (index ``(n - 1) & hash``) and ``MAXIMUM_CAPACITY``.
    """
    table_size = operator.index(table_size)
    if table_size < 1 or table_size > 1 << 30 or table_size & (table_size - 1):
        raise ValueError(f"table_size must be a power of two from 1 to 2^30 (got {table_size})")
    return (hashmap_spread(batch) & np.uint32(table_size - 1)).astype(np.int64)
