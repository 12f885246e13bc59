"""The JVM client's ``Utils.murmur2`` and keyed-record partitioner, bit for bit.

Reference: kafka-python (``kafka.partitioner.default``), a pure-Python port of the JVM client's
``Utils.murmur2`` and default partitioner. Its per-key loop runs at about 20 us per key, so the bulk
comparison uses every fifth key of the shared set (20,000 keys, every kind included) to keep the suite fast.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from hashaudit.keys.batch import KeyBatch
from hashaudit.placements import kafka

with warnings.catch_warnings():
    # kafka-python 3.x imports its protocol schemas with a deprecated importlib.resources call
    warnings.simplefilter("ignore", DeprecationWarning)
    kafka_default = pytest.importorskip("kafka.partitioner.default", reason="kafka-python is the reference")

STRIDE = 5  # every fifth key: 20,000 of the 100,000
PARTITION_COUNTS = [1, 2, 3, 7, 12, 50, 1000, 2**31 - 1]

# Apache Kafka, clients/src/test/java/org/apache/kafka/common/utils/UtilsTest.java, testMurmur2
KAFKA_UTILS_TEST_VECTORS = [
    (b"21", -973932308),
    (b"foobar", -790332482),
    (b"a-little-bit-long-string", -985981536),
    (b"a-little-bit-longer-string", -1486304829),
    (b"lkjh234lh9fiuh90y23oiuhsafujhadof229phr9h19h89h8", -58897971),
    (b"abc", 479470107),
]


class _OneTopicCluster:
    """Just enough cluster metadata for kafka-python's ``DefaultPartitioner``: one topic, all partitions up."""

    def __init__(self, partitions: int) -> None:
        self._partitions = set(range(partitions))

    def topics(self) -> set[str]:
        return {"t"}

    def partitions_for_topic(self, topic: str) -> set[int]:
        return self._partitions

    def available_partitions_for_topic(self, topic: str) -> set[int]:
        return self._partitions


@pytest.fixture(scope="module")
def subset(placement_keys: list[bytes]) -> list[bytes]:
    return placement_keys[::STRIDE]


@pytest.fixture(scope="module")
def reference_murmur2(subset: list[bytes]) -> list[int]:
    # kafka-python returns the 32 bits unsigned
    return [kafka_default.murmur2(k) for k in subset]


def test_murmur2_matches_kafka_python(placement_batch: KeyBatch, reference_murmur2: list[int]) -> None:
    out = kafka.murmur2(placement_batch)
    assert out.dtype == np.int32 and out.shape == (len(placement_batch),)
    assert out[::STRIDE].view(np.uint32).tolist() == reference_murmur2


@pytest.mark.parametrize("partitions", PARTITION_COUNTS)
def test_partition_matches_the_partitioner_rule(
    placement_batch: KeyBatch, reference_murmur2: list[int], partitions: int
) -> None:
    out = kafka.partition(placement_batch, partitions)
    assert out.dtype == np.int64
    # the rule of kafka-python's DefaultPartitioner.partition on its own murmur2
    assert out[::STRIDE].tolist() == [(h & 0x7FFFFFFF) % partitions for h in reference_murmur2]


@pytest.mark.parametrize("partitions", [1, 3, 12, 100])
def test_partition_matches_default_partitioner_object(subset: list[bytes], partitions: int) -> None:
    keys = subset[:2000]  # the partitioner object sorts the partition list on every call
    partitioner, cluster = kafka_default.DefaultPartitioner(), _OneTopicCluster(partitions)
    expected = [partitioner.partition("t", None, k, None, None, cluster) for k in keys]
    assert kafka.partition(KeyBatch.from_keys(keys), partitions).tolist() == expected


def test_murmur2_published_vectors() -> None:
    keys = [k for k, _ in KAFKA_UTILS_TEST_VECTORS]
    expected = [v for _, v in KAFKA_UTILS_TEST_VECTORS]
    assert kafka.murmur2(KeyBatch.from_keys(keys)).tolist() == expected
    assert [kafka_default.murmur2(k) for k in keys] == [v & 0xFFFFFFFF for v in expected]  # the two references agree


def test_every_tail_length_and_a_slice(placement_keys: list[bytes]) -> None:
    # lengths 0..40 cover every tail of the 4-byte blocks; a slice reads from the middle of the buffer
    keys = [bytes(range(200, 200 - n, -1)) for n in range(41)]
    batch = KeyBatch.from_keys(keys)
    assert kafka.murmur2(batch).view(np.uint32).tolist() == [kafka_default.murmur2(k) for k in keys]
    assert kafka.murmur2(batch.slice(7, 30)).tolist() == kafka.murmur2(batch)[7:30].tolist()


def test_empty_batch_and_bad_partition_counts() -> None:
    empty = KeyBatch.from_keys([])
    assert kafka.murmur2(empty).dtype == np.int32 and len(kafka.murmur2(empty)) == 0
    assert kafka.partition(empty, 3).dtype == np.int64 and len(kafka.partition(empty, 3)) == 0
    batch = KeyBatch.from_keys([b"k"])
    for bad in (0, -4):
        with pytest.raises(ValueError, match="partitions"):
            kafka.partition(batch, bad)
    with pytest.raises(TypeError):
        kafka.partition(batch, 2.5)  # type: ignore[arg-type]
