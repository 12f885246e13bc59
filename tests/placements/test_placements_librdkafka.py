"""The C client's partitioners (``consistent_random``, ``murmur2_random``, ``fnv1a_random``), bit for bit.

Reference: ``confluent-kafka``'s Producer writing to librdkafka's built-in mock cluster (``librdkafka_mock``): the
partition of every delivered message, read from its delivery report. The fast tests send every 25th key of the
shared set (4,000 keys, every kind included) per partitioner and partition count; the slow one sends all 100,000.
"""

from __future__ import annotations

import zlib
from collections.abc import Iterator

import numpy as np
import pytest
from librdkafka_mock import MockCluster

from hashaudit.keys.batch import KeyBatch
from hashaudit.placements import librdkafka
from hashaudit.placements.rules import parse_placement

STRIDE = 25  # 4,000 of the 100,000 keys
PARTITION_COUNTS = [7, 12, 1000]
# b"eljuO\x06" has FNV-1a 32 = 0x80000000 = -2^31 as a signed int, which has no positive counterpart; found by
# inverting the last two FNV-1a steps over four-letter prefixes (checked below by a plain-Python FNV-1a)
FNV_MINIMUM_KEY = b"eljuO\x06"


def _fnv1a_32(key: bytes) -> int:
    """FNV-1a 32 as Fowler, Noll and Vo define it (offset basis 0x811C9DC5, prime 0x01000193)."""
    h = 0x811C9DC5
    for byte in key:
        h = ((h ^ byte) * 0x01000193) & 0xFFFFFFFF
    return h


@pytest.fixture(scope="module")
def cluster() -> Iterator[MockCluster]:
    mock = MockCluster()
    yield mock
    mock.close()


@pytest.fixture(scope="module")
def subset(placement_keys: list[bytes]) -> list[bytes]:
    return placement_keys[::STRIDE]


def _rule_partitions(keys: list[bytes], partitions: int, partitioner: str) -> list[int]:
    """The placement rule as the audit runs it: the subject's values through its layout."""
    placement = parse_placement(f"librdkafka:partitions={partitions},partitioner={partitioner}")
    values = placement.hash_batch(KeyBatch.from_keys(keys))
    return placement.layout.assign(values, placement.width).tolist()


@pytest.mark.parametrize("partitions", PARTITION_COUNTS)
@pytest.mark.parametrize("partitioner", librdkafka.PARTITIONERS)
def test_partitions_equal_the_mock_cluster(
    cluster: MockCluster, subset: list[bytes], placement_batch: KeyBatch, partitioner: str, partitions: int
) -> None:
    # consistent_random sends empty keys at random (tested below): the others are compared key by key
    keys = [k for k in subset if k] if partitioner == "consistent_random" else subset
    assert len(keys) > 3_900 and any(not k for k in subset)
    expected = cluster.partitions_of(keys, partitions, partitioner)  # confluent-kafka delivery reports
    assert _rule_partitions(keys, partitions, partitioner) == expected
    out = librdkafka.partition(KeyBatch.from_keys(keys), partitions, partitioner)
    assert out.dtype == np.int64 and out.tolist() == expected


def test_consistent_random_is_crc32_of_the_key(subset: list[bytes]) -> None:
    # zlib.crc32 (the standard library's CRC-32) modulo the partitions: librdkafka's rd_kafka_msg_partitioner_consistent
    out = librdkafka.partition(KeyBatch.from_keys(subset), 12, "consistent_random")
    assert out.tolist() == [zlib.crc32(k) % 12 for k in subset]


def test_fnv1a_minimum_keeps_its_absolute_value(cluster: MockCluster) -> None:
    assert _fnv1a_32(FNV_MINIMUM_KEY) == 0x80000000
    # 2^31 % 7 == 2: the C client casts abs(-2^31) == -2^31 back to unsigned 2^31 (masking the sign would give 0)
    assert cluster.partitions_of([FNV_MINIMUM_KEY], 7, "fnv1a_random") == [2]  # confluent-kafka delivery report
    assert _rule_partitions([FNV_MINIMUM_KEY], 7, "fnv1a_random") == [2]
    assert librdkafka.partition(KeyBatch.from_keys([FNV_MINIMUM_KEY]), 7, "fnv1a_random").tolist() == [2]


@pytest.mark.parametrize("partitioner", librdkafka.PARTITIONERS)
def test_empty_and_null_keys(cluster: MockCluster, partitioner: str) -> None:
    """Null keys are random under every partitioner; an empty key is hashed except under ``consistent_random``."""
    empty = cluster.partitions_of([b""] * 100, 12, partitioner, sticky_ms=0)  # confluent-kafka delivery reports
    null = cluster.partitions_of([None] * 100, 12, partitioner, sticky_ms=0)
    assert len(set(null)) > 1  # 100 draws over 12 partitions: all alike has probability 12^-99
    ruled = _rule_partitions([b""], 12, partitioner)
    if partitioner == "consistent_random":
        assert len(set(empty)) > 1
        assert ruled == [0]  # the documented stand-in: CRC-32 of no bytes is 0
    else:
        # murmur2(b"") & 0x7fffffff = 0x106e08d9 (kafka-python murmur2), % 12 == 9;
        # abs(int32(0x811c9dc5)) = 2128831035 % 12 == 3 (FNV-1a of no bytes is its offset basis)
        assert set(empty) == set(ruled) == {9 if partitioner == "murmur2_random" else 3}


@pytest.mark.slow
@pytest.mark.parametrize("partitioner", librdkafka.PARTITIONERS)
def test_every_shared_key_equals_the_mock_cluster(
    cluster: MockCluster, placement_keys: list[bytes], placement_batch: KeyBatch, partitioner: str
) -> None:
    keys = [k for k in placement_keys if k] if partitioner == "consistent_random" else placement_keys
    expected = cluster.partitions_of(keys, 12, partitioner)  # confluent-kafka delivery reports
    assert _rule_partitions(keys, 12, partitioner) == expected
    if partitioner != "consistent_random":  # the batch with junk around it: kernels stay inside their keys
        assert librdkafka.partition(placement_batch, 12, partitioner).tolist() == expected


def test_the_rule_is_parsed_with_its_default_partitioner() -> None:
    assert parse_placement("librdkafka:partitions=6").name == "librdkafka:partitions=6,partitioner=consistent_random"
    placement = parse_placement("librdkafka: partitioner=murmur2_random, partitions=6")
    assert placement.name == "librdkafka:partitions=6,partitioner=murmur2_random" and placement.width == 31
    assert parse_placement("librdkafka:partitions=6,partitioner=fnv1a_random").layout.scheme == "abs-mod"
    for text in ("librdkafka:partitions=6,partitioner=murmur2", "librdkafka:partitioner=murmur2_random"):
        with pytest.raises(Exception, match="placements"):
            parse_placement(text)
