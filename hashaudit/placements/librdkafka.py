"""The message broker's C client placement: the partitioners of ``librdkafka`` for keyed messages.

Most producers outside the JVM (the C/C++, Python, Go, .NET and Node.js clients built on ``librdkafka``) pick a
partition with one of the C client's built-in partitioners, chosen by the ``partitioner`` property:

``consistent_random`` (the default)
    ``crc32(key) % partition_cnt``: CRC-32 (zlib / IEEE 802.3) of the key bytes as an unsigned 32-bit value.
    A message with a null *or empty* key (``keylen == 0``) goes to a random partition instead.
``murmur2_random``
    ``(murmur2(key) & 0x7fffffff) % partition_cnt``: the JVM client's ``Utils.murmur2`` with its sign bit
    cleared, so a keyed message lands where the JVM producer puts it. Only a *null* key is random; an empty key
    is hashed like any other (``murmur2`` of zero bytes).
``fnv1a_random``
    ``abs(fnv1a(key)) % partition_cnt``: FNV-1a 32 of the key bytes read as a signed 32-bit integer, its absolute
    value taken *before* the unsigned modulus (written to agree with a widely used Go client's hash
    partitioner). ``-2^31`` has no positive counterpart and stays ``2^31`` once cast back to unsigned. Only a
    null key is random. ``|h| % n`` equals ``|h % n|`` with a truncating ``%``, so the partitions are those of
    ``Math.abs(h % n)`` (:class:`hashaudit.placements.rules.JavaAbsModLayout`).

Keys read from files are never null. An empty key is placed as the C client places an *empty* (not null) key:
hashed by ``murmur2_random`` and ``fnv1a_random``; under ``consistent_random`` the client sends it to a random
partition, which no rule can reproduce, so :func:`partition` puts it where CRC-32 of zero bytes (0) puts it,
partition 0, the choice of the client's non-random ``consistent`` partitioner. The tests check every one of these
statements on the client's built-in mock cluster.

References
----------
librdkafka, ``src/rdkafka_msg.c`` (``rd_kafka_msg_partitioner_consistent_random``, ``..._murmur2_random``,
``..._fnv1a_random``), ``src/rdcrc32.h``, ``src/rdmurmur2.c``, ``src/rdfnv1a.c``; ``CONFIGURATION.md``, the
``partitioner`` property.
IEEE 802.3 / ITU-T V.42 (CRC-32). Fowler, Noll, Vo; Eastlake et al., "The FNV Non-Cryptographic Hash Algorithm",
IETF draft (FNV-1a). Apache Kafka, ``org.apache.kafka.common.utils.Utils.murmur2`` and ``Utils.toPositive``.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import operator

import numpy as np

from hashaudit.keys.batch import KeyBatch

PARTITIONERS = ("consistent_random", "murmur2_random", "fnv1a_random")
DEFAULT_PARTITIONER = "consistent_random"
_POSITIVE = 0x7FFFFFFF


def partitioner_hash(batch: KeyBatch, partitioner: str = DEFAULT_PARTITIONER) -> np.ndarray:
    """The value a partitioner reduces modulo the partition count, for every key.

    Parameters
    ----------
    batch : KeyBatch
        The serialized keys.
    partitioner : {"consistent_random", "murmur2_random", "fnv1a_random"}
        The producer's ``partitioner`` property.

    Returns
    -------
    numpy.ndarray of uint64, shape (n,)
        ``crc32(key)`` (32 bits), ``murmur2(key) & 0x7fffffff`` (31 bits) or ``abs(int32(fnv1a(key)))``
        (from 0 to 2^31), as unsigned values.

    Raises
    ------
    ValueError
        For another partitioner.

    References
    ----------
    librdkafka, ``src/rdkafka_msg.c`` (the partitioners), ``src/rdfnv1a.c`` (the absolute value).
    """
    if partitioner == "consistent_random":
        from hashaudit.hashes.crc import crc32

        return crc32(batch)
    if partitioner == "murmur2_random":
        from hashaudit.placements.kafka import murmur2

        return (murmur2(batch).astype(np.int64) & _POSITIVE).astype(np.uint64)
    if partitioner == "fnv1a_random":
        return np.abs(fnv1a_signed(batch).astype(np.int64)).astype(np.uint64)
    raise ValueError(f"partitioner must be one of {', '.join(PARTITIONERS)} (got {partitioner!r})")


def fnv1a_signed(batch: KeyBatch) -> np.ndarray:
    """FNV-1a 32 of every key as the C client holds it, a signed 32-bit integer.

    Parameters
    ----------
    batch : KeyBatch
        The serialized keys.

    Returns
    -------
    numpy.ndarray of int32, shape (n,)
        The bits of FNV-1a 32 (offset basis 0x811C9DC5, prime 0x01000193), signed.

    References
    ----------
    Fowler, Noll, Vo; Eastlake et al., "The FNV Non-Cryptographic Hash Algorithm", IETF draft (FNV-1a).
    librdkafka, ``src/rdfnv1a.c``.
    """
    from hashaudit.hashes.fnv import fnv1a_32

    return fnv1a_32(batch).astype(np.uint32).view(np.int32)


def partition(batch: KeyBatch, partitions: int, partitioner: str = DEFAULT_PARTITIONER) -> np.ndarray:
    """The partition the C client's partitioner picks for every key (an empty key as the module notes say).

    Parameters
    ----------
    batch : KeyBatch
        The serialized keys.
    partitions : int
        Number of partitions of the topic, from 1 to 2^31 - 1.
    partitioner : {"consistent_random", "murmur2_random", "fnv1a_random"}
        The producer's ``partitioner`` property (default ``consistent_random``, the client's default).

    Returns
    -------
    numpy.ndarray of int64, shape (n,)
        Values in ``[0, partitions)``.

    Raises
    ------
    ValueError
        When ``partitions`` is not in ``[1, 2^31 - 1]`` or the partitioner is unknown.

    References
    ----------
    librdkafka, ``src/rdkafka_msg.c`` (``rd_kafka_msg_partitioner_*``).
    """
    partitions = operator.index(partitions)
    if not 1 <= partitions <= _POSITIVE:
        raise ValueError(f"partitions must be a positive 32-bit int (got {partitions})")
    # every value is below 2^32, so the unsigned modulus is exact in int64
    return partitioner_hash(batch, partitioner).astype(np.int64) % np.int64(partitions)
