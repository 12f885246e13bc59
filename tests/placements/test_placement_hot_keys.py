"""Hot keys and the attribution of a hot unit under a system's placement rule, as the shard checks give them.

Planted: a weight column in which two keys, placed on one partition by the broker's producer, carry most of the
load; then the same with a key family pinned to another partition, so that ``placement_balance`` fails. Every
expected value is computed here without hashaudit: kafka-python's ``murmur2`` with the rule of its
``DefaultPartitioner``, the xxhash package for the heavy keys' fingerprints (XXH3 under the summary's seed), and
plain counting. The keys are personal data: they appear in no report unless ``--show-keys`` is given.
"""

from __future__ import annotations

import csv
import itertools
import json
import random
from collections import Counter
from pathlib import Path

import pytest
import xxhash
from cli_runner import run

from hashaudit.hashes.fingerprint import HEAVY_SEED

kafka_default = pytest.importorskip("kafka.partitioner.default")

PARTITIONS = 12
PLACEMENT = f"kafka:partitions={PARTITIONS}"
HEAVY_WEIGHTS = (60_000, 40_000)  # the two planted keys; the 4,000 others weigh 1 to 50 (about 100,000 in all)
TOPIC = Path(__file__).resolve().parents[2] / "sample_keys" / "scan_topic_keys.csv"


def _value(key: bytes) -> int:
    """reference: kafka-python's murmur2 with the sign bit cleared, as its DefaultPartitioner does"""
    return kafka_default.murmur2(key) & 0x7FFFFFFF


def _partition(key: bytes) -> int:
    return _value(key) % PARTITIONS


def _fingerprint(key: bytes) -> str:
    return f"{xxhash.xxh3_64_intdigest(key, seed=HEAVY_SEED):016x}"  # reference: the xxhash package


def _planted(pinned: int) -> tuple[dict[bytes, int], list[bytes], int]:
    """4,000 account keys with light weights, two of them made heavy on one partition, and ``pinned`` keys of a
    lane family that all go to another partition; returns the weights, the heavy keys and their partition."""
    rng = random.Random(20261203)
    weights = {f"acct-{rng.randrange(10**9):09d}/{i}".encode(): rng.randint(1, 50) for i in range(4000)}
    keys = list(weights)
    hot = _partition(keys[0])
    heavy = [k for k in keys if _partition(k) == hot][:2]
    for key, weight in zip(heavy, HEAVY_WEIGHTS, strict=True):
        weights[key] = weight
    lanes = (f"bridge/lane-{n:05d}".encode() for n in range(10**5))
    family = list(itertools.islice((k for k in lanes if _partition(k) == (hot + 6) % PARTITIONS), pinned))
    weights.update(dict.fromkeys(family, 1))
    return weights, heavy, hot


def _write(tmp_path: Path, weights: dict[bytes, int]) -> Path:
    path = tmp_path / "topic.csv"
    with path.open("w", newline="", encoding="ascii") as f:
        writer = csv.writer(f)
        writer.writerow(["key", "messages"])
        writer.writerows((key.decode(), weight) for key, weight in weights.items())
    return path


def _audit(path: Path, tmp_path: Path, *extra: str) -> tuple[int, str, str, dict]:
    report = tmp_path / "r.json"
    args = ["audit", str(path), "-c", "key", "--weight-column", "messages", "--checks", "placement"]
    code, out, err = run([*args, "--placement", PLACEMENT, *extra, "--json", str(report)])
    assert code in (0, 1), err
    return code, out, report.read_text(encoding="utf-8"), json.loads(report.read_text(encoding="utf-8"))


def _balance(report: dict) -> dict:
    (subject,) = [h for h in report["hashes"] if h["name"] == PLACEMENT]
    return next(c for c in subject["checks"] if c["name"] == "placement_balance")


def _reference(weights: dict[bytes, int], heavy: list[bytes], hot: int) -> dict:
    """The attribution by plain counting: the hottest partition's share of the load, and without the heavy keys."""
    load = Counter()
    for key, weight in weights.items():
        load[_partition(key)] += weight
    total = sum(weights.values())
    heavy_load = sum(weights[k] for k in heavy)
    return {
        "hottest": max(range(PARTITIONS), key=lambda p: load[p]),
        "share": load[hot] / total,
        "without": (load[hot] - heavy_load) / (total - heavy_load),
        "heavy_share": heavy_load / total,
    }


def test_two_heavy_keys_make_their_partition_hot_by_handle_only(tmp_path: Path):
    weights, heavy, hot = _planted(pinned=0)
    path = _write(tmp_path, weights)
    code, out, text, report = _audit(path, tmp_path)
    finding = _balance(report)
    expected = _reference(weights, heavy, hot)
    # random account keys: the distinct keys spread as an ideal hash's do, whatever the load
    assert code == 0 and finding["verdict"] == "pass"
    a = finding["details"]["load_attribution"]
    assert a["hottest_shard"] == expected["hottest"] == hot
    assert a["hot"] and a["heavy_keys_on_shard"] == 2 and a["heavy_keys_exact"]
    assert a["load_share"] == pytest.approx(expected["share"], rel=1e-9)
    assert a["share_without_heavy_keys"] == pytest.approx(expected["without"], rel=1e-9)
    assert a["heavy_load_on_shard"] == sum(HEAVY_WEIGHTS)
    assert a["hot_message"].startswith(f"2 keys make partition {hot} hot")
    assert "shard" not in a["message"] and "shard" not in a["hot_message"]  # worded in the rule's own units
    # the handles: fingerprint, murmur2 value (31 bits) and load of each heavy key, heaviest first
    assert finding["details"]["heavy_keys"] == [
        {"fingerprint": _fingerprint(k), "hash": f"{_value(k):07x}", "load": float(w), "shard": hot}
        for k, w in zip(heavy, HEAVY_WEIGHTS, strict=True)
    ]
    # the keys themselves appear nowhere: not in the report, not on the terminal
    for key in heavy:
        assert key.decode() not in text and key.decode() not in out


def test_show_keys_adds_the_heavy_keys(tmp_path: Path):
    weights, heavy, _ = _planted(pinned=0)
    path = _write(tmp_path, weights)
    _, _, _, report = _audit(path, tmp_path, "--show-keys")
    assert [entry["key"] for entry in _balance(report)["details"]["heavy_keys"]] == [k.decode() for k in heavy]


def test_a_failing_balance_says_which_keys_make_another_partition_hot(tmp_path: Path):
    weights, heavy, hot = _planted(pinned=300)
    path = _write(tmp_path, weights)
    code, out, text, report = _audit(path, tmp_path)
    finding = _balance(report)
    pinned = (hot + 6) % PARTITIONS
    assert code == 1 and finding["verdict"] == "fail"
    assert finding["details"]["hottest_shard"] == pinned  # by distinct keys: the lane family
    assert finding["details"]["load_attribution"]["hottest_shard"] == hot  # by load: the two heavy keys
    share = _reference(weights, heavy, hot)["heavy_share"]
    said = f"; by load, 2 keys make partition {hot} hot"
    assert said in finding["message"] and f"those keys carry {100 * share:.1f} % of all load" in finding["message"]
    assert "not to blame" not in finding["message"]  # the blame for the distinct keys is the finding's own verdict
    assert said in " ".join(out.split())  # the terminal line says it too
    for key in heavy:
        assert key.decode() not in text and key.decode() not in out


def test_the_placement_and_the_shard_checks_name_the_same_keys(tmp_path: Path):
    weights, heavy, _ = _planted(pinned=0)
    path = _write(tmp_path, weights)
    _, _, _, report = _audit(path, tmp_path, "-H", "xxh3_64", "--shards", "8", "--checks", "placement,shards")
    (xxh3,) = [h for h in report["hashes"] if h["name"] == "xxh3_64"]
    hot_keys = next(c for c in xxh3["checks"] if c["name"] == "hot_keys")
    on_shard = {e["fingerprint"] for e in hot_keys["details"]["heavy_keys"]}
    in_placement = {e["fingerprint"] for e in _balance(report)["details"]["heavy_keys"]}
    # xxh3 mod 8 may split the two keys; each one it names is one the placement names
    assert on_shard and on_shard <= in_placement == {_fingerprint(k) for k in heavy}


def test_the_sample_topics_hot_partition_is_one_tenant_key(tmp_path: Path):
    """On the bundled topic dump (``scan_topic_keys.csv``): the partition with the most messages over its share
    under the broker's rule, and the heavy keys there: of the 20 heaviest keys, those above the summary's floor
    (1/1,001 of all messages, its 1,000 counters settled by a second read) and above 1 % of a partition's fair
    load."""
    with TOPIC.open(newline="", encoding="ascii") as f:
        weights = {row["key"].encode(): int(row["messages"]) for row in csv.DictReader(f)}
    load = Counter()
    for key, weight in weights.items():
        load[_partition(key)] += weight
    total = sum(weights.values())
    hot = max(range(PARTITIONS), key=lambda p: load[p])
    listed = sorted(((w, k) for k, w in weights.items() if w > total / 1001), reverse=True)[:20]
    heavy = sorted((w, k) for w, k in listed if _partition(k) == hot and w >= 0.01 * total / PARTITIONS)
    assert len(heavy) == 1 and heavy[0][0] > 0.19 * total  # one tenant key, a fifth of the messages
    _, _, text, report = _audit(TOPIC, tmp_path)
    finding = _balance(report)
    a = finding["details"]["load_attribution"]
    assert a["hottest_shard"] == hot and a["heavy_keys_on_shard"] == len(heavy)
    assert a["load_share"] == pytest.approx(load[hot] / total, rel=1e-9)
    assert [e["load"] for e in finding["details"]["heavy_keys"]] == [float(w) for w, _ in reversed(heavy)]
    assert [e["fingerprint"] for e in finding["details"]["heavy_keys"]] == [_fingerprint(k) for _, k in reversed(heavy)]
    assert all(k.decode() not in text for _, k in heavy)
