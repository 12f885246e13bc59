"""The ``placement`` check group: per-unit counts equal the reference packages' placements, planted defects are
found, strong keys pass, and the rules are parsed, listed and refused as the settings promise."""

from __future__ import annotations

import json
import math
import random
from collections import Counter

import numpy as np
import pytest

from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.runner import audit_batches
from hashaudit.keys.batch import KeyBatch
from hashaudit.placements.rules import RULES, JavaAbsModLayout, SlotMapLayout, parse_placement
from hashaudit.settings import SettingError
from tests.cli_runner import run

RNG = random.Random(20261203)
KEYS = [f"tenant-{RNG.randrange(10**6):06d}/order-{i:07d}".encode() for i in range(20_000)]


def _audit(keys: list[bytes], *placements: str):  # type: ignore[no-untyped-def]
    plan = AuditPlan(hashes=("xxh3_64",), checks=("buckets",), buckets=(1024,), placements=placements)
    return audit_batches([KeyBatch.from_keys(keys)], plan, threads=1)


def _finding(result, subject: str, check: str):  # type: ignore[no-untyped-def]
    audit = next(h for h in result.hashes if h.name == subject)
    return next(f for f in audit.findings if f.check == check)


def test_kafka_partitions_equal_the_reference_partitioner():
    kafka = pytest.importorskip("kafka.partitioner.default")
    result = _audit(KEYS, "kafka:partitions=12")
    counts = _finding(result, "kafka:partitions=12", "placement_balance").details["keys_per_shard"]
    # reference: kafka-python's murmur2 and the JVM producer's rule (murmur2(key) & 0x7fffffff) % partitions
    expected = Counter((kafka.murmur2(k) & 0x7FFFFFFF) % 12 for k in set(KEYS))
    assert counts == [expected[p] for p in range(12)]


def test_redis_cluster_nodes_equal_the_reference_slots():
    crc = pytest.importorskip("redis.crc")
    keys = [*KEYS[:5000], *(f"user:{{{i % 40}}}:cart:{i}".encode() for i in range(3000))]
    result = _audit(keys, "redis-cluster:nodes=5")
    counts = _finding(result, "redis-cluster:nodes=5", "placement_balance").details["keys_per_shard"]
    # reference: redis-py's key_slot; nodes own equal contiguous slot ranges [ceil(k*16384/5), ceil((k+1)*16384/5))
    starts = [math.ceil(k * 16384 / 5) for k in range(6)]
    node = [next(k for k in range(5) if starts[k] <= s < starts[k + 1]) for s in range(16384)]
    expected = Counter(node[crc.key_slot(k)] for k in set(keys))
    assert counts == [expected[n] for n in range(5)]


def test_jvm_hashcode_mod_equals_the_documented_formula():
    result = _audit(KEYS, "jvm-hashcode-mod:n=10")
    counts = _finding(result, "jvm-hashcode-mod:n=10", "placement_balance").details["keys_per_shard"]

    def java_hashcode(key: bytes) -> int:  # Java SE API, String.hashCode: s[0]*31^(n-1) + ... over UTF-16 units
        h = 0
        units = key.decode("utf-8").encode("utf-16-le")
        for i in range(0, len(units), 2):
            h = (31 * h + int.from_bytes(units[i : i + 2], "little")) & 0xFFFFFFFF
        return h - (1 << 32) if h >= 1 << 31 else h

    expected = Counter(abs(int(math.fmod(java_hashcode(k), 10))) for k in set(KEYS))
    assert counts == [expected[p] for p in range(10)]


def test_strong_keys_pass_every_rule():
    result = _audit(KEYS, "kafka:partitions=12", "redis-cluster:nodes=6", "jvm-hashcode-mod:n=7")
    placements = [h for h in result.hashes if h.path == "placement"]
    assert len(placements) == 3
    for audit in placements:
        # a cluster rule also says whether hash tags pin keys (none here: a passing fact)
        pinning = {"hash_tag_pinning"} if audit.name.startswith("redis-cluster") else set()
        assert {f.check for f in audit.findings} == {"placement_balance", "placement_movement", *pinning}
        assert all(f.verdict == "pass" for f in audit.findings), [f.message for f in audit.findings]


def test_a_key_stride_that_the_modulus_keeps_fails():
    """Planted: the last two characters are chosen so that 31*c1 + c2 is a multiple of 16; with a fixed prefix,
    String.hashCode is then the same modulo 16 for every key, and abs(h % 16) puts them all on one partition."""
    pairs = [(a, b) for a in range(48, 123) for b in range(48, 123) if (31 * a + b) % 16 == 0]
    keys = [f"order-{i:04d}".encode() + bytes(pair) for i in range(60) for pair in pairs]
    result = _audit(keys, "jvm-hashcode-mod:n=16", "kafka:partitions=16")
    assert _finding(result, "jvm-hashcode-mod:n=16", "placement_balance").verdict == "fail"
    assert _finding(result, "kafka:partitions=16", "placement_balance").verdict == "pass"  # murmur2 mixes them
    assert result.exit_code == 1


def test_a_hash_tag_family_pins_keys_to_one_node():
    keys = [f"session:{{shop-7}}:{i}".encode() for i in range(2000)] + KEYS[:2000]
    result = _audit(keys, "redis-cluster:nodes=4")
    balance = _finding(result, "redis-cluster:nodes=4", "placement_balance")
    assert balance.verdict == "fail" and balance.details["hottest_keys"] >= 2000


def test_movement_matches_the_rule_when_the_system_grows():
    result = _audit(KEYS, "kafka:partitions=12", "redis-cluster:nodes=3")
    kafka = _finding(result, "kafka:partitions=12", "placement_movement")
    assert kafka.details["ideal_fraction_to_next"] == pytest.approx(1 - 12 / (12 * 13))  # h mod 12 = h mod 13 below 12
    redis = _finding(result, "redis-cluster:nodes=3", "placement_movement")
    # a fourth node takes a quarter of every node's slots: 3 * floor(5461/4) (+1 for the node of 5,462) of 16,384
    assert redis.details["ideal_fraction_to_next"] == pytest.approx((1365 * 3 + 0) / 16384, abs=1 / 16384)
    assert abs(redis.effect.observed - redis.effect.ideal) < 0.02


def test_layout_shares_are_exact():
    assert JavaAbsModLayout(8).shares().sum() == pytest.approx(1.0)
    # 2^31 positive values: residue 0 of n=3 gets one more; folding negatives onto it
    values = np.arange(-(1 << 12), 1 << 12, dtype=np.int64).astype(np.uint32).astype(np.uint64)
    small = np.bincount(JavaAbsModLayout(3).assign(values, 32), minlength=3) / len(values)
    assert small == pytest.approx(JavaAbsModLayout(3).shares(), abs=1e-3)
    assert np.bincount(SlotMapLayout(3).owners).tolist() == [5462, 5461, 5461]


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("kafkaa:partitions=3", "takes NAME:param=value"),
        ("kafka", "kafka needs partitions=N"),
        ("kafka:partitions=0", "partitions must be between 1"),
        ("kafka:parts=3", "kafka takes partitions=N"),
        ("redis-cluster:nodes=1001", "nodes must be between 1 and 1,000"),
    ],
)
def test_bad_placements_are_refused(text, words):
    with pytest.raises(SettingError, match=words):
        parse_placement(text)


def test_cli_lists_rules_and_refuses_a_bad_one(tmp_path):
    code, out, _ = run(["placements"])
    assert code == 0 and all(name in out for name in RULES)
    code, out, _ = run(["placements", "--json"])
    assert [r["name"] for r in json.loads(out)] == list(RULES)
    keys = tmp_path / "k.txt"
    keys.write_bytes(b"".join(k + b"\n" for k in KEYS[:100]))
    code, _, err = run(["audit", str(keys), "--placement", "kafka:partitions=x"])
    assert code == 2 and err.count("\n") == 1 and "--placement kafka takes partitions=N" in err


def test_placements_appear_in_every_report(tmp_path):
    keys = tmp_path / "k.txt"
    keys.write_bytes(b"".join(k + b"\n" for k in KEYS[:3000]))
    out = {fmt: tmp_path / f"r.{fmt}" for fmt in ("json", "html", "markdown", "junit")}
    args = ["audit", str(keys), "-H", "xxh3_64", "--checks", "buckets", "--placement", "kafka:partitions=8"]
    code, text, err = run([*args, *(x for fmt, path in out.items() for x in (f"--{fmt}", str(path)))])
    assert code == 0, err
    assert "kafka:partitions=8" in text
    for path in out.values():
        assert "kafka:partitions=8" in path.read_text(encoding="utf-8"), path
    assert json.loads(out["json"].read_text())["settings"]["placements"] == ["kafka:partitions=8"]


def test_the_documented_placement_example_is_what_the_command_prints():
    """docs/checks.md quotes this audit's output: every quoted line must be printed as it stands."""
    import pathlib
    import re
    import shlex

    readme = (pathlib.Path(__file__).parents[2] / "docs" / "checks.md").read_text(encoding="utf-8")
    blocks = re.findall(r"^```[a-z]*\n(.*?)^```$", readme, re.S | re.M)
    block = next(b for b in blocks if "--placement kafka:partitions=16" in b)
    lines = block.splitlines()
    command_lines = []
    while lines and (lines[0].startswith("$ ") or (command_lines and command_lines[-1].endswith("\\"))):
        command_lines.append(lines.pop(0))
    command = " ".join(line.removeprefix("$ ").rstrip("\\").strip() for line in command_lines)
    args = shlex.split(command)[1:]
    root = pathlib.Path(__file__).parents[2]
    args = [str(root / a) if a.startswith("sample_keys/") else a for a in args]
    code, out, _ = run(args)
    printed = out.replace(str(root) + "/", "").splitlines()
    assert code == 0
    for quoted in (line for line in lines if line.strip()):
        assert quoted in printed, quoted
