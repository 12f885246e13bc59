"""The bundled placement samples audited under the systems' rules, with the outcome each was made for.

``sample_keys/scan_topic_keys.csv`` (an hour of a 12-partition message topic, summed by record key) has a lane
family that the broker's producer puts on partition 5 and three tenants that send most of the messages;
``sample_keys/cache_keys.txt`` (a cache cluster's keys) has one large hash-tag family. Every expected value is
computed here without hashaudit: kafka-python's ``murmur2`` with the rule of its ``DefaultPartitioner``, zlib's
CRC-32 for the C client's default, redis-py's ``key_slot``, and plain counting.
"""

from __future__ import annotations

import bisect
import csv
import math
import zlib
from collections import Counter
from pathlib import Path

import pytest

from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.sources import audit
from hashaudit.keys.options import SourceOptions

kafka_default = pytest.importorskip("kafka.partitioner.default")
redis_crc = pytest.importorskip("redis.crc")

SAMPLES = Path(__file__).resolve().parents[2] / "sample_keys"
TOPIC = SAMPLES / "scan_topic_keys.csv"
CACHE = SAMPLES / "cache_keys.txt"
KAFKA_12, KAFKA_13, CRC_12 = "kafka:partitions=12", "kafka:partitions=13", "librdkafka:partitions=12"
CACHE_NODES = 6
SLOTS = 16384


def _partition(key: str, partitions: int) -> int:
    """reference: kafka-python's murmur2, masked and reduced as its DefaultPartitioner does"""
    return (kafka_default.murmur2(key.encode()) & 0x7FFFFFFF) % partitions


def _findings(result, check: str) -> dict:  # type: ignore[no-untyped-def]
    return {f.hash_name: f for h in result.hashes for f in h.findings if f.check == check}


@pytest.fixture(scope="module")
def topic() -> dict[str, int]:
    """Messages per record key (every key appears once in the dump)."""
    with TOPIC.open(newline="", encoding="ascii") as f:
        rows = [(row["key"], int(row["messages"])) for row in csv.DictReader(f)]
    assert len({key for key, _ in rows}) == len(rows)
    return dict(rows)


@pytest.fixture(scope="module")
def lanes(topic: dict[str, int]) -> list[str]:
    return [key for key in topic if key.startswith("t0100/lane-")]


@pytest.fixture(scope="module")
def topic_audit():  # type: ignore[no-untyped-def]
    plan = AuditPlan(checks=("placement",), placements=(KAFKA_12, KAFKA_13, CRC_12))
    return audit([TOPIC], plan, SourceOptions(columns=("key",), weight_column="messages"), threads=1)


# --- the topic: a lane family pinned to one partition ------------------------------------------------------------


def test_the_lane_family_lands_on_partition_5_of_12_and_nowhere_else(topic: dict[str, int], lanes: list[str]):
    assert len(lanes) == 300
    assert {_partition(key, 12) for key in lanes} == {5}
    # a plausible family: lane numbers counting up with gaps, not random text
    numbers = [int(key.removeprefix("t0100/lane-")) for key in lanes]
    assert len(set(numbers)) == 300 and max(numbers) < 10_000
    # the other keys, tenant and depot, spread over every partition
    others = Counter(_partition(key, 12) for key in topic if key not in set(lanes))
    assert sorted(others) == list(range(12))


def test_other_partition_counts_do_not_pin_the_family(lanes: list[str]):
    on_13 = Counter(_partition(key, 13) for key in lanes)
    assert sorted(on_13) == list(range(13))  # 13 is coprime to 12: every partition gets lanes
    assert max(on_13.values()) < 2 * len(lanes) / 13
    # murmur2 ≡ 5 (mod 12) fixes the value modulo 4 and 3 only: 16 partitions leave the lanes on the four
    # partitions ≡ 1 (mod 4), 24 partitions on the two ≡ 5 (mod 12)
    assert {_partition(key, 16) for key in lanes} == {1, 5, 9, 13}
    assert {_partition(key, 24) for key in lanes} == {5, 17}


def test_placement_balance_fails_on_partition_5_under_the_brokers_rule(topic: dict[str, int], topic_audit):  # type: ignore[no-untyped-def]
    finding = _findings(topic_audit, "placement_balance")[KAFKA_12]
    per_partition = Counter(_partition(key, 12) for key in topic)
    assert finding.verdict == "fail"
    assert finding.details["keys_per_shard"] == [per_partition[p] for p in range(12)]
    assert finding.details["hottest_shard"] == 5 and finding.details["unit"] == "partition"
    assert (
        finding.details["hottest_keys"]
        == per_partition[5]
        == 300 + sum(1 for key in topic if not key.startswith("t0100/lane-") and _partition(key, 12) == 5)
    )
    # the hottest partition over its even share (len / 12 keys)
    assert finding.effect.observed == pytest.approx(per_partition[5] / (len(topic) / 12), rel=1e-6)


def test_with_13_partitions_or_the_c_clients_crc32_the_balance_passes(topic: dict[str, int], topic_audit):  # type: ignore[no-untyped-def]
    balance = _findings(topic_audit, "placement_balance")
    on_13 = Counter(_partition(key, 13) for key in topic)
    assert balance[KAFKA_13].verdict == "pass"
    assert balance[KAFKA_13].details["keys_per_shard"] == [on_13[p] for p in range(13)]
    crc = next(name for name in balance if name.startswith(CRC_12))
    # reference: zlib's CRC-32 of the key bytes modulo the partitions, the C client's consistent_random
    by_crc = Counter(zlib.crc32(key.encode()) % 12 for key in topic)
    assert balance[crc].verdict == "pass"
    assert balance[crc].details["keys_per_shard"] == [by_crc[p] for p in range(12)]


def test_three_tenants_send_most_messages_and_make_their_partitions_hot(topic: dict[str, int], topic_audit):  # type: ignore[no-untyped-def]
    total = sum(topic.values())
    by_tenant = Counter({tenant: 0 for tenant in {key.split("/")[0] for key in topic}})
    for key, messages in topic.items():
        by_tenant[key.split("/")[0]] += messages
    heavy = [tenant for tenant, _ in by_tenant.most_common(3)]
    assert sum(by_tenant[t] for t in heavy) > 0.6 * total  # three tenants of about nine hundred
    assert len(by_tenant) > 800
    load = [0] * 12
    for key, messages in topic.items():
        load[_partition(key, 12)] += messages
    finding = _findings(topic_audit, "placement_balance")[KAFKA_12]
    assert finding.details["load_per_shard"] == [float(x) for x in load]
    heavy_partitions = {_partition(key, 12) for key in topic if key.split("/")[0] in heavy}
    assert sum(load[p] for p in heavy_partitions) > 0.75 * total
    assert len(heavy_partitions) <= 6
    # the partition with the most keys is not where the messages are: the lanes are light
    assert load[5] < total / 12


# --- the cache cluster: one large hash-tag family ---------------------------------------------------------------


def _tag(key: bytes) -> bytes | None:
    """The cluster's hash tag: between the first ``{`` and the next ``}``, when not empty."""
    start = key.find(b"{")
    end = key.find(b"}", start + 1) if start >= 0 else -1
    return key[start + 1 : end] if start >= 0 and end > start + 1 else None


def _node(slot: int) -> int:
    """The owner of a slot when the nodes hold equal contiguous ranges (node k from ceil(k * 16384 / nodes))."""
    starts = [math.ceil(k * SLOTS / CACHE_NODES) for k in range(CACHE_NODES)]
    return bisect.bisect_right(starts, slot) - 1


@pytest.fixture(scope="module")
def cache_keys() -> list[bytes]:
    keys = CACHE.read_bytes().splitlines()
    assert len(set(keys)) == len(keys)
    return keys


@pytest.fixture(scope="module")
def cache_audit():  # type: ignore[no-untyped-def]
    # a key sample as large as the key set: the tag counts are exact
    plan = AuditPlan(checks=("placement",), placements=(f"redis-cluster:nodes={CACHE_NODES}",), avalanche_keys=32768)
    return audit([CACHE], plan, threads=1)


def test_the_berth_board_tag_is_reported_with_its_share(cache_keys: list[bytes], cache_audit):  # type: ignore[no-untyped-def]
    families = Counter(tag for tag in map(_tag, cache_keys) if tag is not None)
    (largest, size), (_, runner_up) = families.most_common(2)
    assert largest == b"berth-board" and size == 2240 and runner_up <= 3
    slots = {redis_crc.key_slot(key) for key in cache_keys if _tag(key) == largest}  # reference: redis-py
    assert len(slots) == 1
    (slot,) = slots
    finding = _findings(cache_audit, "hash_tag_pinning")[f"redis-cluster:nodes={CACHE_NODES}"]
    d = finding.details
    assert finding.verdict == "info" and d["exact"]
    assert d["largest_family_keys"] == size and d["largest_family_tag_bytes"] == len(largest)
    assert d["tagged_keys"] == sum(families.values()) and d["tag_families"] == len(families)
    assert d["largest_family_slot"] == slot and d["largest_family_node"] == _node(slot)
    assert finding.effect.value == pytest.approx(size / len(cache_keys))


def test_the_tag_family_makes_its_node_the_hottest(cache_keys: list[bytes], cache_audit):  # type: ignore[no-untyped-def]
    per_node = Counter(_node(redis_crc.key_slot(key)) for key in cache_keys)  # reference: redis-py's key_slot
    board_node = _node(redis_crc.key_slot(b"{berth-board}"))
    finding = _findings(cache_audit, "placement_balance")[f"redis-cluster:nodes={CACHE_NODES}"]
    assert finding.details["keys_per_shard"] == [per_node[n] for n in range(CACHE_NODES)]
    assert finding.details["hottest_shard"] == board_node and finding.verdict == "fail"
    # without the board the node would hold about its even share
    rest = per_node[board_node] - 2240
    assert abs(rest - (len(cache_keys) - 2240) / CACHE_NODES) < 0.05 * len(cache_keys) / CACHE_NODES
