"""The message broker's JVM client placement: ``Utils.murmur2`` and the default partitioner for keyed records.

``Utils.murmur2`` is MurmurHash2 (32-bit) with the fixed seed ``0x9747b28c``, written in Java on ``int``: the
state wraps modulo 2^32, ``>>>`` is the unsigned shift and the result is returned as a signed ``int``. The
body reads the key in little-endian 4-byte blocks; the 1 to 3 tail bytes fall through a ``switch`` into ``h``
(byte 2 at bits 16-23, byte 1 at bits 8-15, byte 0 at bits 0-7) and one multiplication by ``m``, as in
the original MurmurHash2. A keyed record goes to partition ``toPositive(murmur2(key)) % numPartitions``,
where ``toPositive`` clears the sign bit (``& 0x7fffffff``) rather than taking an absolute value.

References
----------
Apache Kafka, ``org.apache.kafka.common.utils.Utils.murmur2`` and ``Utils.toPositive`` (clients module).
Apache Kafka, ``org.apache.kafka.clients.producer.internals.BuiltInPartitioner.partitionForKey`` (the
default partitioner of the Java producer for records with a key).
A. Appleby, MurmurHash2 (public-domain reference implementation ``MurmurHash2.cpp``).
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import operator

import numpy as np
from numba import njit, uint32

from hashaudit.hashes.murmur import (
    _load32,
)  # little-endian 4-byte blocks at any alignment, as the JVM client reads them
from hashaudit.keys.batch import KeyBatch

SEED = 0x9747B28C
_M = 0x5BD1E995
_R = 24
_POSITIVE = 0x7FFFFFFF


@njit(cache=True, nogil=True)
def _murmur2_kernel(data, offsets, out):  # pragma: no cover - compiled
    m = uint32(_M)
    for i in range(len(offsets) - 1):
        start = offsets[i]
        length = offsets[i + 1] - start
        block_end = start + (length & ~3)
        # the JVM client mixes in the length as a Java int
        h = uint32(uint32(SEED) ^ uint32(length & 0xFFFFFFFF))
        p = start
        while p < block_end:
            k = uint32(_load32(data, p) * m)
            k = uint32(k ^ (k >> uint32(_R)))
            k = uint32(k * m)
            h = uint32(uint32(h * m) ^ k)
            p += 4
        # the Java switch falls through from case 3 to case 1; only case 1 multiplies
        rem = length & 3
        if rem >= 3:
            h = uint32(h ^ (uint32(data[block_end + 2]) << uint32(16)))
        if rem >= 2:
            h = uint32(h ^ (uint32(data[block_end + 1]) << uint32(8)))
        if rem >= 1:
            h = uint32(h ^ uint32(data[block_end]))
            h = uint32(h * m)
        h = uint32(h ^ (h >> uint32(13)))
        h = uint32(h * m)
        h = uint32(h ^ (h >> uint32(15)))
        out[i] = h


def murmur2(batch: KeyBatch) -> np.ndarray:
    """``Utils.murmur2`` of every key, as the broker's JVM client computes it.

    Parameters
    ----------
    batch : KeyBatch
        The serialized keys (the bytes the producer's key serializer wrote).

    Returns
    -------
    numpy.ndarray of int32, shape (n,)
        The Java ``int`` result, signed; ``.view(numpy.uint32)`` gives the same bits unsigned (what the
        kafka-python client's ``murmur2`` returns).

    References
    ----------
    Apache Kafka, ``org.apache.kafka.common.utils.Utils.murmur2``.
    A. Appleby, MurmurHash2 (``MurmurHash2.cpp``): constants ``m = 0x5bd1e995``, ``r = 24``.
    """
    out = np.empty(len(batch), dtype=np.uint32)
    _murmur2_kernel(batch.data, batch.offsets, out)
    return out.view(np.int32)


def partition(batch: KeyBatch, partitions: int) -> np.ndarray:
    """The partition the JVM client's default partitioner picks for every keyed record.

    Parameters
    ----------
    batch : KeyBatch
        The serialized keys.
    partitions : int
        Number of partitions of the topic, at least 1.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)
        ``(murmur2(key) & 0x7fffffff) % partitions``, in ``[0, partitions)``.

    Raises
    ------
    ValueError
        When ``partitions`` is below 1.

    References
    ----------
    Apache Kafka, ``org.apache.kafka.common.utils.Utils.toPositive`` and
    ``org.apache.kafka.clients.producer.internals.BuiltInPartitioner.partitionForKey``.
    """
    partitions = operator.index(partitions)
    if partitions < 1:
        raise ValueError(f"partitions must be at least 1 (got {partitions})")
    # toPositive clears the sign bit; the value is then below 2^31, so int64 arithmetic is exact
    positive = murmur2(batch).astype(np.int64) & _POSITIVE
    return positive % np.int64(partitions)
