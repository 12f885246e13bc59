"""Audits do not depend on how the keys are cut into batches, on the number of hashing threads, or on how
many passes the distinct-key store needs.

The same keys are cut at split points that hypothesis chooses (empty batches included) and audited with 1 to 4
threads; the JSON report, apart from its ``run`` block, must be identical to the report of one batch on one
thread. The key set is fixed (a literal seed) and holds repeats and planted full-hash collisions, so that the
distinct-key filter, the collision groups and the simulated tables all have something to do.
"""

from __future__ import annotations

import collections
import functools
import itertools
import json
import os

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hashaudit import AuditPlan, KeyBatch, audit_batches
from hashaudit.report.json_report import report_dict
from hashaudit.stats.heavy import HeavyCounts, HeavyKeys

FEW = settings(max_examples=10, deadline=None, derandomize=True, database=None)


def _keys() -> list[bytes]:
    rng = np.random.default_rng(2024)
    words = [f"user-{int(x):09d}".encode() for x in rng.integers(0, 10**9, size=1800)]
    # poly31 (h = 31 h + c) gives "Aa" and "BB" the same value, so any string of such blocks collides with all
    # the others of its length: 8 keys sharing one full value, plus their 2-block prefixes (4 more).
    blocks = [b"".join(p) for n in (2, 3) for p in itertools.product([b"Aa", b"BB"], repeat=n)]
    unique = words + blocks
    repeats = [unique[i] for i in rng.integers(0, len(unique), size=600)]  # occurrences of earlier keys
    order = rng.permutation(len(unique) + len(repeats))
    every = unique + repeats
    return [every[i] for i in order]


KEYS = _keys()
N = len(KEYS)
WHOLE = KeyBatch.from_keys(KEYS)
CHECKS = ("buckets", "bits", "collisions", "tables")


@pytest.fixture(scope="module")
def plans(tmp_path_factory) -> dict[str, AuditPlan]:
    spill = str(tmp_path_factory.mktemp("collision-spill"))
    common = {"checks": CHECKS, "buckets": (64, 61), "table_slots": 4096, "loads": (0.25, 0.4), "seed": 7}
    return {
        # one hash: with several threads every lane hashes a slice of each batch and the lanes' states merge
        "one-hash": AuditPlan(hashes=("xxh3_64",), **common),
        # three hashes of 32, 128 and 64 bits: lanes own hashes (or split batches when lanes outnumber hashes);
        # no memory for the collision values, so every lane spills them to disk
        "three-hashes-spilled": AuditPlan(
            hashes=("poly31", "murmur3_128", "fnv1a_64"), collision_memory=0, spill_dir=spill, **common
        ),
        # every occurrence counted, repeats included
        "all-occurrences": AuditPlan(hashes=("murmur3_32", "poly31"), all_keys=True, **common),
    }


def stable(result) -> str:
    doc = report_dict(result)
    doc.pop("run")
    return json.dumps(doc, sort_keys=True)


@functools.cache
def _reference(plan: AuditPlan) -> str:
    return stable(audit_batches([WHOLE], plan, threads=1))


def split(cuts: list[int]) -> list[KeyBatch]:
    bounds = [0, *sorted(cuts), N]
    return [WHOLE.slice(a, b) for a, b in itertools.pairwise(bounds)]


CUTS = st.lists(st.integers(0, N), max_size=8)


def test_the_fixed_key_set_exercises_what_it_should(plans):
    """Repeats are dropped, planted collisions are found and the simulated tables run."""
    doc = json.loads(_reference(plans["three-hashes-spilled"]))
    assert doc["summary"]["keys"] == len(set(KEYS)) < doc["summary"]["keys_read"] == N
    checks = {(h["name"], c["name"]): c for h in doc["hashes"] for c in h["checks"]}
    assert checks[("poly31", "full_collisions")]["observed"] >= 28 + 6  # C(8, 2) + 6 pairs among 4 two-block keys
    assert any(name == "probe_cost" for _, name in checks)


@pytest.mark.parametrize("name", ["one-hash", "three-hashes-spilled", "all-occurrences"])
@FEW
@given(cuts=CUTS, threads=st.integers(1, 4), read_ahead=st.booleans())
def test_report_does_not_depend_on_batches_or_threads(plans, name, cuts, threads, read_ahead):
    plan = plans[name]
    result = audit_batches(split(cuts), plan, threads=threads, read_ahead=read_ahead)
    assert stable(result) == _reference(plan)
    if plan.spill_dir is not None:
        assert os.listdir(plan.spill_dir) == []  # every spill folder is gone once the audit is done


# ---------------------------------------------------------------------------------------------------------
# Shard checks: loads weighted by whole numbers (sums exact in any order). At most 1,000 distinct keys here, so the
# heavy-key summary never cuts a counter; larger inputs are settled by a second read (tested further down).
# ---------------------------------------------------------------------------------------------------------


def _weighted_keys() -> KeyBatch:
    rng = np.random.default_rng(31)
    distinct = [f"tenant-{i:04d}".encode() for i in range(900)]
    hot = rng.zipf(1.3, size=1400) % len(distinct)  # a few keys take many of the occurrences
    batch = KeyBatch.from_keys([distinct[i] for i in hot])
    weights = rng.integers(0, 50, size=len(hot)).astype(np.float64)
    return KeyBatch(batch.data, batch.offsets, weights)


WEIGHTED = _weighted_keys()
SHARD_PLAN = AuditPlan(
    hashes=("xxh3_64", "murmur3_32"),
    checks=("buckets", "shards"),
    buckets=(64,),
    shards=(3, 8),
    shard_schemes=("mod", "jump", "rendezvous", "ring"),
    vnodes=16,
)


@functools.cache
def _shard_reference() -> str:
    return stable(audit_batches([WEIGHTED], SHARD_PLAN, threads=1))


@settings(max_examples=6, deadline=None, derandomize=True, database=None)
@given(cuts=st.lists(st.integers(0, len(WEIGHTED)), max_size=8), threads=st.integers(1, 4))
def test_shard_report_does_not_depend_on_batches_or_threads(cuts, threads):
    bounds = [0, *sorted(cuts), len(WEIGHTED)]
    batches = [WEIGHTED.slice(a, b) for a, b in itertools.pairwise(bounds)]
    assert stable(audit_batches(batches, SHARD_PLAN, threads=threads)) == _shard_reference()


# ---------------------------------------------------------------------------------------------------------
# More distinct keys than the fingerprint budget holds: the input is read in parts, one per slice of the
# fingerprint space, and the result equals one pass with room to spare.
# ---------------------------------------------------------------------------------------------------------

BIG_N = 240_000
# 190,000 distinct 8-byte keys (the 4 MiB budget holds about 177,000 fingerprints) and 50,000 repeats
BIG_VALUES = np.random.default_rng(99).permutation(
    np.concatenate([np.arange(190_000), np.random.default_rng(98).integers(0, 190_000, size=BIG_N - 190_000)])
).astype(np.uint64) * np.uint64(0x9E3779B97F4A7C15)
BIG_WHOLE = KeyBatch.from_uint64(BIG_VALUES)
BIG_PLAN = dict(hashes=("xxh3_64", "murmur3_32"), checks=CHECKS, buckets=(4096,), table_slots=4096, seed=3)


@functools.cache
def _one_pass() -> tuple[dict, str]:
    result = audit_batches([BIG_WHOLE], AuditPlan(**BIG_PLAN), threads=1)
    return result.run, stable(result)


def big_split(cuts: list[int]) -> list[KeyBatch]:
    bounds = [0, *sorted(cuts), BIG_N]
    return [BIG_WHOLE.slice(a, b) for a, b in itertools.pairwise(bounds)]


@settings(max_examples=3, deadline=None, derandomize=True, database=None)
@given(
    cuts=st.lists(st.integers(0, BIG_N), max_size=5),
    again=st.lists(st.integers(0, BIG_N), max_size=5),
    threads=st.integers(1, 3),
)
def test_distinct_keys_read_in_parts_equal_one_pass(cuts, again, threads):
    """The passes after the first may cut the input differently: positions in the stream, not batches, place
    the keys."""
    one_run, one = _one_pass()
    small = AuditPlan(distinct_memory=4 << 20, **BIG_PLAN)
    several = audit_batches(big_split(cuts), small, threads=threads, reopen=lambda: iter(big_split(again)))
    assert one_run["passes"] == 1 and several.run["passes"] >= 2
    assert stable(several) == one


# ---------------------------------------------------------------------------------------------------------
# Heavy keys and fractional weights: figures that could depend on the order of summing or of cutting counters.
# ---------------------------------------------------------------------------------------------------------


def _with_weights(keys: list[bytes], weights: list[float]) -> KeyBatch:
    batch = KeyBatch.from_keys(keys)
    return KeyBatch(batch.data, batch.offsets, np.array(weights, dtype=np.float64))


def test_heavy_key_points_stay_within_the_hottest_shards_share():
    """One key with weights 0.1, 0.2, 0.3: it carries all the load, so it explains all of its shard's share.
    Summed in different orders (the batch split, or the hashing lanes), 0.1 + 0.2 + 0.3 differs in the last bit."""
    batch = _with_weights([b"a", b"a", b"a"], [0.1, 0.2, 0.3])
    plan = AuditPlan(hashes=("xxh3_64",), checks=("shards",), shards=(2,))
    for batches, threads in (([batch], 1), ([batch], 2), ([batch.slice(0, 1), batch.slice(1, 3)], 1)):
        for finding in audit_batches(batches, plan, threads=threads).findings:
            if finding.check in ("hot_keys", "load_attribution"):
                details = finding.details
                assert 0.0 <= details["points_from_heavy_keys"] <= details["load_share"] + 1e-9, (threads, details)
                assert -1e-9 <= details["share_without_heavy_keys"] <= 1.0 + 1e-9, (threads, details)


def test_heavy_key_summary_does_not_depend_on_batches():
    """2,002 distinct keys, once each, against 1,000 counters: one batch is cut once (error 1), two batches of
    1,001 and 1,001 keys are cut twice (error 2); a second read settles the counts, so the report is the same."""
    whole = KeyBatch.from_keys([b"k%d" % i for i in range(2002)])
    plan = AuditPlan(hashes=("xxh3_64",), checks=("shards",), shards=(4,))
    one = stable(audit_batches([whole], plan, threads=1))
    two = stable(audit_batches([whole.slice(0, 1001), whole.slice(1001, 2002)], plan, threads=1))
    assert two == one


@settings(max_examples=8, deadline=None, derandomize=True, database=None)
@given(cuts=st.lists(st.integers(0, 6000), max_size=6))
def test_settled_heavy_keys_do_not_depend_on_batches(cuts):
    """Zipf-distributed keys with 3,000 distinct values against 1,000 counters (the summary cuts counts): the
    settled list — every key above W/1001 with its exact count — is the same for any batching, and it is the
    true one."""
    rng = np.random.default_rng(5)
    draws = rng.zipf(1.2, size=6000) % 3000
    whole = KeyBatch.from_keys([b"user-%d" % i for i in draws])
    batches = [whole.slice(a, b) for a, b in itertools.pairwise([0, *sorted(cuts), len(whole)]) if b > a]
    summary = HeavyKeys()
    for batch in batches:
        summary.update(batch)
    assert not summary.exact
    counted = HeavyCounts(summary)
    for batch in batches:
        counted.update(batch)
    summary.settle(counted)
    truth = collections.Counter(int(i) for i in draws)
    expected = sorted(((b"user-%d" % k, float(c)) for k, c in truth.items() if c > 6000 / 1001), key=lambda t: -t[1])
    got = summary.top(len(expected) + 5)
    assert sorted(got, key=lambda t: (-t[1], t[0])) == sorted(expected, key=lambda t: (-t[1], t[0]))
    assert summary.exact and summary.floor_ == 6000 / 1001


def test_fractional_weights_give_the_same_report_on_any_number_of_threads():
    rng = np.random.default_rng(5)
    batch = _with_weights([b"k%d" % i for i in range(200)], list(rng.random(200) * 10))
    plan = AuditPlan(hashes=("xxh3_64",), checks=("shards",), shards=(2,))
    one = stable(audit_batches([batch], plan, threads=1))
    assert stable(audit_batches([batch], plan, threads=2)) == one


def _attribution(result) -> dict:
    doc = json.loads(stable(result))
    found = [c for h in doc["hashes"] for c in h["checks"] if c["name"] == "load_attribution"]
    assert len(found) == 1
    return found[0]["details"]


def test_heavy_keys_stay_lower_bounds_when_the_input_cannot_be_read_again():
    """A one-time stream (a generator, like standard input) cannot be read twice: the summary keeps its lower
    bounds and says so; the same keys in a list are settled, and every count becomes exact."""
    keys = [b"hot"] * 300 + [b"k%d" % i for i in range(3000)]
    whole = KeyBatch.from_keys(keys)
    pieces = [whole.slice(i, min(i + 500, len(whole))) for i in range(0, len(whole), 500)]
    plan = AuditPlan(hashes=("xxh3_64",), checks=("shards",), shards=(4,))
    once = audit_batches((piece for piece in pieces), plan, threads=1)
    settled = audit_batches(pieces, plan, threads=1)
    bound, exact = _attribution(once), _attribution(settled)
    assert not bound["heavy_keys_exact"] and bound["heavy_count_error"] > 0 and once.run["passes"] == 1
    assert exact["heavy_keys_exact"] and exact["heavy_count_error"] == 0 and settled.run["passes"] == 2
    assert exact["heavy_keys_above"] == pytest.approx(len(keys) / 1001)
    assert exact["heavy_load_on_shard"] == 300.0 > bound["heavy_load_on_shard"]  # "hot" alone is that heavy


def test_no_second_read_when_no_key_can_be_heavy():
    """All keys distinct: no kept count plus its error bound reaches W/1001, so nothing is read again."""
    whole = KeyBatch.from_keys([b"k%d" % i for i in range(5000)])
    pieces = [whole.slice(i, i + 1000) for i in range(0, 5000, 1000)]
    result = audit_batches(pieces, AuditPlan(hashes=("xxh3_64",), checks=("shards",), shards=(4,)), threads=1)
    details = _attribution(result)
    assert result.run["passes"] == 1 and details["heavy_keys_exact"] and details["heavy_keys_on_shard"] == 0
