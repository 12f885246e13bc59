"""The placement group's facts: ``placement_agreement`` (two rules with the same units compared key by key) and
``hash_tag_pinning`` (keys a cluster hash tag pins to one slot), and the agreement's accumulator."""

from __future__ import annotations

import math
import pickle
import random
import zlib

import numpy as np
import pytest

from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.runner import audit_batches
from hashaudit.errors import MergeError
from hashaudit.keys.batch import KeyBatch
from hashaudit.placements.agreement import UnitRecords, agreement, position_priorities
from hashaudit.placements.rules import ModLayout, parse_placement

RNG = random.Random(20270114)
KEYS = [RNG.randbytes(RNG.randint(4, 24)) for _ in range(20_000)]
KAFKA = "kafka:partitions=12"
CRC = "librdkafka:partitions=12,partitioner=consistent_random"
MURMUR = "librdkafka:partitions=12,partitioner=murmur2_random"


def _audit(keys: list[bytes], *placements: str, threads: int = 1, batch: int | None = None):  # type: ignore[no-untyped-def]
    plan = AuditPlan(hashes=("xxh3_64",), checks=("placement",), placements=placements)
    size = batch or len(keys)
    batches = [KeyBatch.from_keys(keys[i : i + size]) for i in range(0, len(keys), size)]
    return audit_batches(batches, plan, threads=threads)


def _findings(result, check: str) -> dict:  # type: ignore[no-untyped-def]
    return {f.hash_name: f for h in result.hashes for f in h.findings if f.check == check}


# --- placement_agreement ---------------------------------------------------------------------------------------


def test_jvm_and_c_client_defaults_disagree_as_unrelated_hashes_do():
    kafka_default = pytest.importorskip("kafka.partitioner.default")
    result = _audit(KEYS, KAFKA, CRC, MURMUR)
    found = _findings(result, "placement_agreement")
    assert set(found) == {CRC, MURMUR}  # each later rule against every earlier one with the same units
    crc = next(f for f in result.hashes if f.name == CRC).findings
    crc_vs_kafka = next(f for f in crc if f.check == "placement_agreement")
    # reference: kafka-python's murmur2 with the JVM producer's rule, zlib.crc32 with the C client's default
    differing = sum((kafka_default.murmur2(k) & 0x7FFFFFFF) % 12 != zlib.crc32(k) % 12 for k in set(KEYS))
    assert crc_vs_kafka.details["keys_differing"] == differing
    assert crc_vs_kafka.details["compared_with"] == KAFKA and crc_vs_kafka.details["exact"]
    assert crc_vs_kafka.verdict == "info" and crc_vs_kafka.threshold != crc_vs_kafka.threshold  # a fact: no threshold
    # unrelated hashes on 12 even partitions disagree on 11/12 of the keys; 6 binomial standard deviations
    assert abs(crc_vs_kafka.effect.value - 11 / 12) < 6 * math.sqrt(11 / 144 / len(KEYS))
    assert crc_vs_kafka.expected == pytest.approx(11 / 12)


def test_murmur2_random_agrees_with_the_jvm_producer_on_every_key():
    result = _audit(KEYS, KAFKA, MURMUR)
    finding = _findings(result, "placement_agreement")[MURMUR]
    assert finding.details["keys_differing"] == 0 and finding.effect.value == 0.0
    assert finding.verdict == "pass" and finding.keys == len(set(KEYS))
    assert "every one of 20,000 distinct keys" in finding.message


def test_rules_with_other_units_are_not_compared():
    result = _audit(KEYS[:2000], "kafka:partitions=12", "librdkafka:partitions=13", "redis-cluster:nodes=12")
    assert _findings(result, "placement_agreement") == {}


def test_the_agreement_does_not_depend_on_batches_or_threads():
    keys = KEYS[:1500] + KEYS[:300]  # repeats count once
    one = _findings(_audit(keys, KAFKA, CRC), "placement_agreement")[CRC]
    for threads, batch in [(2, 777), (1, 3), (2, 50)]:
        other = _findings(_audit(keys, KAFKA, CRC, threads=threads, batch=batch), "placement_agreement")[CRC]
        assert other.details == one.details and other.keys == one.keys == 1500


def _records(capacity: int, values: np.ndarray, positions: np.ndarray, modulus: int = 12) -> UnitRecords:
    return UnitRecords("r", 32, ModLayout(modulus), capacity).update(values, positions)


class TestUnitRecords:
    n = 5000
    values = np.random.default_rng(7).integers(0, 1 << 32, n, dtype=np.uint64)
    positions = np.random.default_rng(8).permutation(3 * n)[:n].astype(np.int64)

    @pytest.mark.parametrize("capacity", [10**6, 700])
    @pytest.mark.parametrize("chunk", [1, 2, 50, 5000, 5042])
    def test_chunks_and_merges_equal_one_pass(self, capacity: int, chunk: int) -> None:
        whole = _records(capacity, self.values, self.positions)
        chunked = UnitRecords("r", 32, ModLayout(12), capacity)
        for i in range(0, self.n, chunk):
            chunked.update(self.values[i : i + chunk], self.positions[i : i + chunk])
        assert chunked == whole
        halves = [_records(capacity, self.values[s], self.positions[s]) for s in (slice(0, 1234), slice(1234, None))]
        assert halves[1].copy().merge(halves[0]) == halves[0].merge(halves[1]) == whole

    def test_a_full_record_keeps_the_smallest_priorities(self) -> None:
        records = _records(700, self.values, self.positions)
        positions, units = records.result()
        chosen = self.positions[np.argsort(position_priorities(self.positions))[:700]]
        assert records.sampled and positions.tolist() == sorted(chosen.tolist())
        at = {p: i for i, p in enumerate(self.positions.tolist())}
        assert units.tolist() == [int(self.values[at[p]] % 12) for p in positions.tolist()]

    def test_sampled_records_pair_the_same_keys(self) -> None:
        other = (self.values * np.uint64(2654435761)) & np.uint64(0xFFFFFFFF)
        exact = agreement(_records(10**6, self.values, self.positions), _records(10**6, other, self.positions))
        sampled = agreement(_records(2000, self.values, self.positions), _records(2000, other, self.positions))
        assert exact.exact and exact.compared == self.n and not sampled.exact and sampled.compared == 2000
        low, high = sampled.interval
        assert low < exact.share < high and low < sampled.share < high

    def test_pickling_and_refusals(self) -> None:
        records = _records(700, self.values, self.positions)
        assert pickle.loads(pickle.dumps(records)) == records
        with pytest.raises(MergeError):
            records.merge(_records(700, self.values, self.positions, modulus=13))


# --- hash_tag_pinning ------------------------------------------------------------------------------------------


def _tagged_keys(plain: int, family: int, singles: int, seed: int) -> list[bytes]:
    """Planted: ``family`` keys sharing the tag {tenant-42}, ``singles`` keys with a tag of their own."""
    r = random.Random(seed)
    keys = [f"order:{r.randrange(10**9)}:{i}".encode() for i in range(plain)]
    keys += [f"cart:{{tenant-42}}:{i}".encode() for i in range(family)]
    keys += [f"session:{{s{i}}}:{r.randrange(10**6)}".encode() for i in range(singles)]
    r.shuffle(keys)
    return keys


def test_a_planted_tag_family_is_named_with_its_share():
    crc = pytest.importorskip("redis.crc")
    keys = _tagged_keys(2000, 800, 300, seed=1)  # 3,100 distinct keys: all in the default 4,096-key sample
    result = _audit(keys, "redis-cluster:nodes=6")
    finding = _findings(result, "hash_tag_pinning")["redis-cluster:nodes=6"]
    d = finding.details
    assert finding.verdict == "info" and d["exact"]
    assert d["tagged_keys"] == 1100 and d["largest_family_keys"] == 800 and d["tag_families"] == 301
    assert finding.effect.value == pytest.approx(800 / 3100)
    assert d["largest_family_slot"] == crc.key_slot(b"cart:{tenant-42}:0")  # redis-py key_slot
    assert d["largest_family_node"] == parse_placement("redis-cluster:nodes=6").layout.owners[d["largest_family_slot"]]
    assert "(a tag of 9 bytes) pins 800 keys (25.8 %)" in finding.message
    assert "tenant-42" not in finding.message and "tenant-42" not in str(d)  # the tag is key content: never shown
    assert d["largest_family_tag_bytes"] == len("tenant-42")


def test_a_tag_family_in_a_large_input_is_estimated_from_the_sample():
    keys = _tagged_keys(15_000, 5_000, 0, seed=2)
    result = _audit(keys, "redis-cluster:nodes=3")
    finding = _findings(result, "hash_tag_pinning")["redis-cluster:nodes=3"]
    assert not finding.details["exact"] and finding.details["keys_sampled"] == 4096
    # a uniform sample of 4,096 of 20,000 keys: 6 standard deviations of the sampled share
    assert abs(finding.effect.value - 0.25) < 6 * math.sqrt(0.25 * 0.75 / 4096)
    assert "estimated from a uniform sample of 4,096 distinct keys" in finding.message


def test_keys_without_tags_pass():
    result = _audit(KEYS[:3000], "redis-cluster:nodes=3", KAFKA)
    pinning = _findings(result, "hash_tag_pinning")
    assert set(pinning) == {"redis-cluster:nodes=3"}  # only the cluster rule has tags
    finding = pinning["redis-cluster:nodes=3"]
    assert (
        finding.details["tagged_keys"]
        == sum(  # the Redis Cluster Specification's tag rule, in plain Python
            1 for k in set(KEYS[:3000]) if 0 <= k.find(b"{") < k.find(b"}", k.find(b"{") + 1) - 1
        )
    )
    assert finding.verdict in ("pass", "info")
