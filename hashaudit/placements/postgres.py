"""PostgreSQL hash partitioning of a ``text`` key: ``hashtextextended`` with the partitioning seed, modulo the modulus.

A row of a table ``PARTITION BY HASH (k)`` goes to the partition whose remainder equals the row's hash modulo the
modulus. The row's hash is ``compute_partition_hash_value``: for each partition key column that is not null, the
column's extended hash support function is called with the seed ``HASH_PARTITION_SEED`` (``0x7A5B22367996DCFD``)
and folded into a 64-bit value by ``hash_combine64``, starting from 0. With one column ``rowHash =
hash_combine64(0, h) = h + 0x49A0F4DD15E5A8E3`` modulo 2^64, and the row goes to the partition of remainder
``rowHash % modulus`` (unsigned). ``satisfies_hash_partition`` checks the same value.

For ``text`` and ``varchar`` under a deterministic collation (the default, ``C`` and every libc collation),
``hashtextextended`` hashes the stored bytes: ``hash_bytes_extended(bytes, length, seed)``. A nondeterministic
(ICU) collation hashes a sort key instead, so that equal strings spelled differently share a hash: this rule does
not model it. ``bytea`` keys (``hashvarlenaextended``) hash their bytes the same way, which is how the rule places
keys that cannot be ``text`` (not valid in the database encoding, or holding a NUL byte): as the bytes given, the
partition a ``bytea`` key of those bytes would get. A key is hashed in the database's encoding: the rule's bytes
must be those the server stores (UTF-8 keys for a UTF-8 database).

``hash_bytes_extended`` is Bob Jenkins' lookup3 ``hashlittle`` adapted by PostgreSQL: the three 32-bit state
words start at ``0x9e3779b9 + length + 3923095``; a non-zero 64-bit seed adds its high word to ``a`` and its low
word to ``b`` followed by one ``mix``; the key is read in little-endian 12-byte blocks, each added to ``a``,
``b``, ``c`` and mixed; the last 0 to 11 bytes are added to ``a``, ``b`` and ``c`` (the lowest byte of ``c``
never receives key bytes); ``final`` runs even for a key of no bytes, and the result is ``(b << 32) | c``.
The server reads aligned keys a word at a time and unaligned ones byte by byte; on a little-endian machine both
give these values (on a big-endian one the server's values differ: the rule reproduces little-endian servers,
by far the common case).

References
----------
PostgreSQL, ``src/common/hashfn.c`` (``hash_bytes_extended``, the ``mix`` and ``final`` macros) and
``src/include/common/hashfn.h`` (``hash_combine64``); ``src/backend/partitioning/partbounds.c``
(``compute_partition_hash_value``, ``get_partition_for_tuple``, ``satisfies_hash_partition``);
``src/include/catalog/partition.h`` (``HASH_PARTITION_SEED``); ``src/backend/utils/adt/varlena.c``
(``hashtextextended``, ``hashvarlenaextended``). PostgreSQL documentation, section 5.11 "Table Partitioning"
(hash partitioning by modulus and remainder) and 24.2.2.4 "Nondeterministic Collations".
R. J. Jenkins Jr., "lookup3.c", public domain (2006): ``hashlittle``, ``mix`` and ``final``.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import operator

import numpy as np
from numba import njit, uint32, uint64

from hashaudit.hashes.murmur import _load32, _rotl32
from hashaudit.keys.batch import KeyBatch

HASH_PARTITION_SEED = 0x7A5B22367996DCFD
COMBINE_CONSTANT = 0x49A0F4DD15E5A8E3  # hash_combine64's "64bit random data"
_GOLDEN = 0x9E3779B9
_LENGTH_OFFSET = 3923095
_MASK64 = (1 << 64) - 1


@njit(cache=True, nogil=True)
def _mix(a, b, c):  # pragma: no cover - compiled
    a = uint32(a - c)
    a = uint32(a ^ _rotl32(c, 4))
    c = uint32(c + b)
    b = uint32(b - a)
    b = uint32(b ^ _rotl32(a, 6))
    a = uint32(a + c)
    c = uint32(c - b)
    c = uint32(c ^ _rotl32(b, 8))
    b = uint32(b + a)
    a = uint32(a - c)
    a = uint32(a ^ _rotl32(c, 16))
    c = uint32(c + b)
    b = uint32(b - a)
    b = uint32(b ^ _rotl32(a, 19))
    a = uint32(a + c)
    c = uint32(c - b)
    c = uint32(c ^ _rotl32(b, 4))
    b = uint32(b + a)
    return a, b, c


@njit(cache=True, nogil=True)
def _final(a, b, c):  # pragma: no cover - compiled
    c = uint32(c ^ b)
    c = uint32(c - _rotl32(b, 14))
    a = uint32(a ^ c)
    a = uint32(a - _rotl32(c, 11))
    b = uint32(b ^ a)
    b = uint32(b - _rotl32(a, 25))
    c = uint32(c ^ b)
    c = uint32(c - _rotl32(b, 16))
    a = uint32(a ^ c)
    a = uint32(a - _rotl32(c, 4))
    b = uint32(b ^ a)
    b = uint32(b - _rotl32(a, 14))
    c = uint32(c ^ b)
    c = uint32(c - _rotl32(b, 24))
    return a, b, c


@njit(cache=True, nogil=True)
def _tail(data, p, n):  # pragma: no cover - compiled
    # the last n < 12 bytes as three little-endian words, zero-padded: what the server's switch adds
    w0 = uint32(0)
    w1 = uint32(0)
    w2 = uint32(0)
    for j in range(n):
        byte = uint32(data[p + j])
        if j < 4:
            w0 = uint32(w0 | (byte << uint32(8 * j)))
        elif j < 8:
            w1 = uint32(w1 | (byte << uint32(8 * (j - 4))))
        else:
            w2 = uint32(w2 | (byte << uint32(8 * (j - 8) + 8)))  # c's lowest byte is reserved for the length
    return w0, w1, w2


@njit(cache=True, nogil=True)
def _hash_bytes_extended_kernel(data, offsets, seed, out):  # pragma: no cover - compiled
    seed_high = uint32(seed >> uint64(32))
    seed_low = uint32(seed & uint64(0xFFFFFFFF))
    for i in range(len(offsets) - 1):
        p = offsets[i]
        length = offsets[i + 1] - p
        a = uint32(uint32(_GOLDEN) + uint32(length & 0xFFFFFFFF) + uint32(_LENGTH_OFFSET))
        b = a
        c = a
        if seed != 0:
            a = uint32(a + seed_high)
            b = uint32(b + seed_low)
            a, b, c = _mix(a, b, c)
        left = length
        while left >= 12:
            a = uint32(a + _load32(data, p))
            b = uint32(b + _load32(data, p + 4))
            c = uint32(c + _load32(data, p + 8))
            a, b, c = _mix(a, b, c)
            p += 12
            left -= 12
        w0, w1, w2 = _tail(data, p, left)
        a = uint32(a + w0)
        b = uint32(b + w1)
        c = uint32(c + w2)
        a, b, c = _final(a, b, c)
        out[i] = (uint64(b) << uint64(32)) | uint64(c)


def hash_bytes_extended(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """PostgreSQL's ``hash_bytes_extended`` of every key: what ``hashtextextended`` (deterministic collations) and
    ``hashvarlenaextended`` (``bytea``) return for the key's bytes.

    Parameters
    ----------
    batch : KeyBatch
        The keys, as the server stores them.
    seed : int
        The 64-bit seed (a ``bigint`` in SQL; negative values are taken modulo 2^64, as the server casts them).

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
        The hash, unsigned (``.view(numpy.int64)`` gives the ``bigint`` SQL shows).

    References
    ----------
    PostgreSQL, ``src/common/hashfn.c``, ``hash_bytes_extended``.
    R. J. Jenkins Jr., "lookup3.c" (2006), ``hashlittle``.
    """
    seed = operator.index(seed) & _MASK64
    out = np.empty(len(batch), dtype=np.uint64)
    _hash_bytes_extended_kernel(batch.data, batch.offsets, np.uint64(seed), out)
    return out


def partition_hash(batch: KeyBatch) -> np.ndarray:
    """The row hash of a table hash-partitioned by one ``text`` (or ``bytea``) column holding the key.

    Parameters
    ----------
    batch : KeyBatch
        The keys, as the server stores them.

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
        ``hash_combine64(0, hash_bytes_extended(key, HASH_PARTITION_SEED))``, which is the extended hash plus
        ``0x49A0F4DD15E5A8E3`` modulo 2^64.

    References
    ----------
    PostgreSQL, ``src/backend/partitioning/partbounds.c``, ``compute_partition_hash_value``;
    ``src/include/common/hashfn.h``, ``hash_combine64``; ``src/include/catalog/partition.h``,
    ``HASH_PARTITION_SEED``.
    """
    # hash_combine64(a, b) = a ^ (b + C + (a << 54) + (a >> 7)), which is b + C for a = 0 (wrapping)
    return hash_bytes_extended(batch, HASH_PARTITION_SEED) + np.uint64(COMBINE_CONSTANT)


def partition(batch: KeyBatch, modulus: int) -> np.ndarray:
    """The remainder of the partition every key goes to in a table ``PARTITION BY HASH`` of modulus ``modulus``.

    Parameters
    ----------
    batch : KeyBatch
        The keys, as the server stores them.
    modulus : int
        The partitions' modulus (``FOR VALUES WITH (MODULUS modulus, REMAINDER r)``), a positive ``int``.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)
        ``partition_hash(key) % modulus``, in ``[0, modulus)``.

    Raises
    ------
    ValueError
        When ``modulus`` is not in ``[1, 2^31 - 1]``.

    References
    ----------
    PostgreSQL, ``src/backend/partitioning/partbounds.c``, ``get_partition_for_tuple`` (hash strategy).
    """
    modulus = operator.index(modulus)
    if not 1 <= modulus <= 0x7FFFFFFF:
        raise ValueError(f"modulus must be a positive int (got {modulus})")
    return (partition_hash(batch) % np.uint64(modulus)).astype(np.int64)
