"""Shard schemes against their published properties, the balance and movement tests, heavy keys and the load
attribution (a planted hot key is the keys' fault, a planted skew the hash's)."""

from __future__ import annotations

import collections

import numpy as np
import pytest

from hashaudit import AuditPlan, KeyBatch, audit_batches
from hashaudit.errors import UsageError
from hashaudit.stats.heavy import HeavyKeys
from hashaudit.stats.shards import ShardCounts, _ideal_moved, balance_tests, movement_tests
from hashaudit.tables.shards import ShardLayout


@pytest.fixture(scope="module")
def values() -> np.ndarray:
    return np.random.default_rng(17).integers(0, 2**64 - 1, size=200_000, dtype=np.uint64, endpoint=True)


def _jump_as_printed(key: int, buckets: int) -> int:
    """Lamping & Veach (2014), the function printed in the paper, transcribed with Python integers."""
    b, j = -1, 0
    while j < buckets:
        b = j
        key = (key * 2862933555777941757 + 1) % 2**64
        j = int((b + 1) * (float(1 << 31) / float((key >> 33) + 1)))
    return b


def test_jump_matches_the_printed_algorithm_and_moves_only_to_the_new_shard(values):
    some = values[:2000]
    for n in (1, 2, 7, 10, 1000):
        assert ShardLayout("jump", n).assign(some, 64).tolist() == [_jump_as_printed(int(v), n) for v in some]
    before, after = ShardLayout("jump", 10).assign(values, 64), ShardLayout("jump", 11).assign(values, 64)
    moved = before != after
    assert np.all(after[moved] == 10)  # monotone: a key moves only to the added shard
    assert moved.mean() == pytest.approx(1 / 11, abs=0.003)


def test_rendezvous_moves_only_to_the_new_shard_and_follows_weights(values):
    before, after = ShardLayout("rendezvous", 10).assign(values, 64), ShardLayout("rendezvous", 11).assign(values, 64)
    assert np.all(after[before != after] == 10)
    weighted = ShardLayout("rendezvous", 4, (1.0, 1.0, 2.0, 4.0))
    shares = np.bincount(weighted.assign(values, 64), minlength=4) / len(values)
    assert shares == pytest.approx([0.125, 0.125, 0.25, 0.5], abs=0.005)
    with pytest.raises(UsageError, match="cannot weight"):
        ShardLayout("jump", 4, (1.0, 1.0, 2.0, 4.0))


def test_ring_shares_vary_like_one_over_root_v_and_predict_the_assignment(values):
    """Karger et al. (1997): a shard's arc is a sum of V arcs, so shares vary around 1/N with a coefficient of
    variation near 1/√V (for N = 64, V = 100: about 0.1)."""
    ring = ShardLayout("ring", 64, vnodes=100)
    shares = ring.shares()
    assert shares.sum() == pytest.approx(1.0)
    assert 0.06 < shares.std() * 64 < 0.14
    observed = np.bincount(ring.assign(values, 64), minlength=64) / len(values)
    assert np.abs(observed - shares).max() < 0.003
    bigger = ring.resized(65)
    before, after = ring.assign(values, 64), bigger.assign(values, 64)
    assert np.all(after[before != after] == 64)  # old points stay: keys move only to the new shard's arcs
    assert (before != after).mean() == pytest.approx(bigger.shares()[64], abs=0.003)


def test_modulo_movement_formula_against_brute_force():
    """Going from N to N+1 shards under h mod N moves N/(N+1) of uniform values; N to 2N moves half."""
    for n, m in ((10, 11), (10, 20), (6, 9), (7, 7 * 3)):
        h = np.arange(n * m * 5)
        assert _ideal_moved(ShardLayout("mod", n), m) == pytest.approx(np.mean(h % n != h % m), abs=1e-12)


@pytest.mark.parametrize("scheme", ["mod", "jump", "rendezvous", "ring"])
def test_random_values_pass_balance_and_movement(values, scheme):
    counts = ShardCounts("x", 64, ShardLayout(scheme, 16))
    for part in np.array_split(values, 3):
        counts.update(part)
    (balance,) = balance_tests(counts)
    (movement,) = movement_tests(counts)
    assert balance.p_upper > 0.001 and abs(balance.effect.value) < 0.05
    assert 0.001 < movement.p_upper and 0.001 < movement.p_lower


def test_heavy_keys_exact_below_capacity_and_bounded_above():
    rng = np.random.default_rng(3)
    stream = [b"k%d" % x for x in rng.zipf(1.4, size=60_000)]
    truth = collections.Counter(stream)
    small = HeavyKeys(capacity=100_000)
    for start in range(0, len(stream), 7_000):
        small.update(KeyBatch.from_keys(stream[start : start + 7_000]))
    assert small.exact and dict((k, int(c)) for k, c in small.top(10)) == dict(truth.most_common(10))
    halves = [HeavyKeys(capacity=50), HeavyKeys(capacity=50)]
    for i, start in enumerate(range(0, len(stream), 30_000)):
        halves[i].update(KeyBatch.from_keys(stream[start : start + 30_000]))
    merged = halves[0].merge(halves[1])
    assert not merged.exact and merged.total_ == len(stream)
    for key, count in merged.top(5):
        assert count <= truth[key] <= count + merged.error_  # Misra-Gries: low by at most the cuts
    assert [k for k, _ in merged.top(3)] == [k for k, _ in truth.most_common(3)]


def test_a_hot_key_is_the_keys_fault_and_a_skew_the_hash_s():
    """A planted hot key makes hot_keys fire and leaves shard_balance passing; a planted skew (the identity on
    multiples of the shard count) does the reverse."""
    rng = np.random.default_rng(4)
    keys = [b"user-%d" % i for i in range(50_000)] + [b"user-77"] * 20_000
    rng.shuffle(keys)
    plan = AuditPlan(hashes=("murmur3_32",), checks=("shards",), shards=(8,), shard_schemes=("jump",))
    found = {f.check: f for f in audit_batches([KeyBatch.from_keys(keys)], plan).findings}
    assert found["hot_keys"].verdict == "info" and found["shard_balance"].verdict == "pass"
    assert "1 key makes shard" in found["hot_keys"].message
    assert "the hash itself is balanced" in found["load_attribution"].message
    assert found["load_attribution"].details["points_from_heavy_keys"] == pytest.approx(0.25, abs=0.01)
    skewed = np.arange(50_000, dtype=np.uint64) * np.uint64(8) + (np.arange(50_000) % 3 == 0).astype(np.uint64)
    plan = AuditPlan(hashes=("identity",), checks=("shards",), shards=(8,), shard_schemes=("mod",))
    found = {f.check: f for f in audit_batches([KeyBatch.from_uint64(skewed)], plan).findings}
    assert found["shard_balance"].verdict == "fail" and found["hot_keys"].verdict == "pass"
    assert "the hash places too many keys there" in found["load_attribution"].message


def test_shard_results_do_not_depend_on_threads_or_passes():
    rng = np.random.default_rng(9)
    values = rng.integers(0, 400_000, size=600_000, dtype=np.uint64)
    values[::50] = 7  # a hot key: the heavy-key summary cuts counts and is settled (by a second read, or by pass 2)
    batches = [KeyBatch.from_uint64(part) for part in np.array_split(values, 4)]
    plan = AuditPlan(hashes=("xxh3_64",), checks=("shards",), shards=(16,), shard_schemes=("ring", "jump"))
    one = audit_batches(batches, plan, threads=1)
    two = audit_batches(batches, plan, threads=2)
    small = AuditPlan(
        hashes=("xxh3_64",), checks=("shards",), shards=(16,), shard_schemes=("ring", "jump"), distinct_memory=4 << 20
    )
    parts = audit_batches(batches, small, reopen=lambda: iter(batches))
    assert parts.run["passes"] > 1
    key = lambda r: [(f.check, f.table, f.message, sorted(f.details.items())) for f in r.findings]  # noqa: E731
    assert key(one) == key(two) == key(parts)
    # one pass plus the settling read; with several passes the second one settles the counts: no read is added
    plain = AuditPlan(hashes=("xxh3_64",), checks=("buckets",), buckets=(64,), distinct_memory=4 << 20)
    assert one.run["passes"] == 2
    assert parts.run["passes"] == audit_batches(batches, plain, reopen=lambda: iter(batches)).run["passes"] > 1
    heavy = [f.details for f in one.findings if f.check == "load_attribution"]
    assert heavy and all(d["heavy_keys_exact"] and d["heavy_count_error"] == 0 for d in heavy)
    assert one.findings[0].details.get("shards") == 16


def test_bucket_tables_report_their_heaviest_buckets_by_load():
    keys = [b"user-%d" % i for i in range(20_000)] + [b"user-5"] * 5_000
    plan = AuditPlan(hashes=("xxh3_64",), checks=("buckets", "shards"), buckets=(1024,), shards=(4,))
    result = audit_batches([KeyBatch.from_keys(keys)], plan)
    table = result.hashes[0].tables[0]
    bucket, load, share = table.hottest_by_load[0]
    assert load >= 5_001 and share == pytest.approx(load / 25_000)
    assert table.hottest_buckets[0][1] < 60  # by distinct keys the same bucket is ordinary
    from hashaudit.report.json_report import report_dict

    assert report_dict(result)["hashes"][0]["tables"][0]["hottest_by_load"][0]["bucket"] == bucket


def test_a_database_url_is_queried_again_to_settle_the_heavy_keys(tmp_path):
    """A database query can be run again (unlike standard input): the heavy keys of a URL source are settled."""
    pytest.importorskip("sqlalchemy")
    import sqlite3

    from hashaudit import audit
    from hashaudit.keys.options import SourceOptions

    path = tmp_path / "lookups.sqlite"
    with sqlite3.connect(path) as db:
        db.execute("CREATE TABLE lookups (parcel TEXT)")
        db.executemany("INSERT INTO lookups VALUES (?)", [(f"parcel-{i}",) for i in range(3000)] + [("hot",)] * 400)
    plan = AuditPlan(hashes=("xxh3_64",), checks=("shards",), shards=(4,))
    result = audit([f"sqlite:///{path}"], plan, SourceOptions(query="SELECT parcel FROM lookups"))
    details = next(f.details for f in result.findings if f.check == "load_attribution")
    assert result.run["passes"] == 2 and details["heavy_keys_exact"] and details["heavy_count_error"] == 0
    assert details["heavy_keys_above"] == pytest.approx(3400 / 1001)
