"""Planted defects under systems' placement rules, as the calibration study plants them
(``hashaudit.calibration.departures``): a hash-tag family that pins keys to one cluster slot, and keys whose
``String.hashCode`` values step in strides of the partition count. Each is found where it should be, the facts name
what they measure, and nothing is found when nothing is planted. Expected values come from redis-py's ``key_slot``
and a plain-Python ``String.hashCode``; random data uses literal seeds.
"""

from __future__ import annotations

from collections import Counter

import numpy as np
import pytest

from hashaudit import audit_batches
from hashaudit.calibration import DEPARTURES, power
from hashaudit.calibration.checks import STRIDE_PLACEMENTS, TAG_FAMILY_PLACEMENT

redis_crc = pytest.importorskip("redis.crc")

SEED = 20261203
JVM, KAFKA = STRIDE_PLACEMENTS


def _planted(name: str, strength: float):  # type: ignore[no-untyped-def]
    rng = np.random.default_rng([SEED, int(1000 * strength)])
    batch, plan, registry = DEPARTURES[name].build(strength, rng)
    result = audit_batches([batch], plan, registry=registry, threads=1)
    return batch.to_list(), {(f.hash_name, f.check): f for f in result.findings}


def _tag(key: bytes) -> bytes | None:
    """The cluster's hash tag: between the first ``{`` and the next ``}``, when not empty."""
    start = key.find(b"{")
    end = key.find(b"}", start + 1) if start >= 0 else -1
    return key[start + 1 : end] if start >= 0 and end > start + 1 else None


def java_hashcode(key: bytes) -> int:
    """Java SE API, String.hashCode: s[0]*31^(n-1) + ... + s[n-1] over UTF-16 code units, as a signed int."""
    h = 0
    units = key.decode("utf-8").encode("utf-16-le")
    for i in range(0, len(units), 2):
        h = (31 * h + int.from_bytes(units[i : i + 2], "little")) & 0xFFFFFFFF
    return h - (1 << 32) if h >= 1 << 31 else h


def test_a_tag_family_is_pinned_and_the_fact_names_its_share():
    keys, found = _planted("tag_family", 0.05)
    families = Counter(t for t in map(_tag, keys) if t is not None)
    ((tag, size),) = families.items()  # one family, the planted one
    assert size == round(0.05 * len(keys))
    (slot,) = {redis_crc.key_slot(k) for k in keys if _tag(k) == tag}  # reference: redis-py
    pinning = found[TAG_FAMILY_PLACEMENT, "hash_tag_pinning"]
    assert pinning.verdict == "info"
    assert pinning.details["largest_family_keys"] == size and pinning.details["largest_family_slot"] == slot
    assert pinning.effect.value == pytest.approx(size / len(keys))
    # the message names the share and the slot, and never the tag (it is part of the keys)
    assert f"pins {size:,} keys (5.00 %) to slot {slot}" in pinning.message and tag.decode() not in pinning.message
    balance = found[TAG_FAMILY_PLACEMENT, "placement_balance"]
    assert balance.verdict == "fail" and balance.details["hottest_keys"] >= size


def test_without_a_tag_family_nothing_is_pinned():
    _, found = _planted("tag_family", 0.0)
    assert found[TAG_FAMILY_PLACEMENT, "hash_tag_pinning"].verdict == "pass"
    assert found[TAG_FAMILY_PLACEMENT, "placement_balance"].verdict == "pass"


def test_the_stride_family_keeps_one_residue_of_string_hashcode():
    keys, found = _planted("key_stride", 0.02)
    residues = Counter(java_hashcode(k) % 16 for k in keys)
    family = round(0.02 * len(keys))
    assert residues.most_common(1)[0][1] >= family  # every planted key on one residue modulo 16
    balance = found[JVM, "placement_balance"]
    # Java's abs(h % 16): the family's residue r, and 16 - r for its negative values
    assert balance.verdict == "fail" and balance.details["hottest_keys"] >= family / 2
    assert found[KAFKA, "placement_balance"].verdict == "pass"  # murmur2 mixes every character


def test_power_of_the_placement_departures():
    """A few points of each power curve; the study runs 40 audits per strength."""
    result = power(4, SEED, departures=["tag_family", "key_stride"], strengths={"tag_family": (0.0, 0.05),
                   "key_stride": (0.0, 0.02)})  # fmt: skip
    rows = {(r["departure"], r["strength"], r["check"]): r for r in result["rows"]}
    assert rows["tag_family", 0.05, f"placement_balance {TAG_FAMILY_PLACEMENT}"]["fail"] == 4
    assert rows["tag_family", 0.05, f"hash_tag_pinning {TAG_FAMILY_PLACEMENT}"]["info"] == 4
    assert rows["key_stride", 0.02, f"placement_balance {JVM}"]["fail"] == 4
    assert rows["key_stride", 0.02, f"placement_balance {KAFKA}"]["warn_or_fail"] <= 1
    for (_, strength, check), row in rows.items():
        if strength == 0.0:  # nothing planted: strong keys pass
            assert row["warn_or_fail"] <= 1 and row["info"] == 0, check
