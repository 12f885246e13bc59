"""The local engine: plans, batch-size invariance, the JSON report and its schema, the DataFrame view."""

from __future__ import annotations

import json

import jsonschema
import numpy as np
import pytest

from hashaudit import AuditPlan, KeyBatch, Thresholds, audit, audit_batches
from hashaudit.errors import UsageError
from hashaudit.hashes.registry import REGISTRY
from hashaudit.keys.options import SourceOptions
from hashaudit.report.json_report import report_dict, schema, to_json

RNG = np.random.default_rng(777)
KEYS = [f"device-{int(x):012x}".encode() for x in RNG.integers(0, 2**48, size=6000)]


def batches_of(size: int):
    whole = KeyBatch.from_keys(KEYS)
    for start in range(0, len(KEYS), size):
        yield whole.slice(start, min(start + size, len(KEYS)))


PLAN = AuditPlan(hashes=("murmur3_32", "fnv1a_64", "xxh3_64"), buckets=(1024, 1021), schemes=("mod", "range"))


def stable(result) -> str:
    doc = report_dict(result)
    doc.pop("run")
    return json.dumps(doc, sort_keys=True)


# batches of one or two keys are slow by nature (a dozen seconds): with the slow tests; 50 keys stay in the fast ones
@pytest.mark.parametrize(
    "size",
    [pytest.param(1, marks=pytest.mark.slow), pytest.param(2, marks=pytest.mark.slow), 50, len(KEYS), len(KEYS) + 42],
)
def test_result_does_not_depend_on_batch_size(size):
    reference = stable(audit_batches(batches_of(1000), PLAN))
    assert stable(audit_batches(batches_of(size), PLAN)) == reference


def test_report_validates_against_the_shipped_schema():
    doc = json.loads(to_json(audit_batches(batches_of(1000), PLAN)))
    jsonschema.Draft202012Validator.check_schema(schema())
    jsonschema.validate(doc, schema())
    assert doc["schema"] == "hashaudit.audit/1"
    names = {c["name"] for h in doc["hashes"] for c in h["checks"]}
    from hashaudit.checks import DEFAULT_GROUPS, GROUP_BY_NAME

    integer_only = {"neighbour_adjacent", "neighbour_stride", "neighbour_bit_flip"}  # for integer keys alone
    assert names == {name for group in DEFAULT_GROUPS for name in GROUP_BY_NAME[group].check_names} - integer_only
    for h in doc["hashes"]:
        for c in h["checks"]:
            if c["name"] in (
                "bit_bias",
                "bit_correlation",
                "full_collisions",
                "duplicate_keys",
                "avalanche",
                "bit_independence",
            ):
                assert "scheme" not in c and "buckets" not in c  # a check of the full hash value has no table
            elif c["name"].startswith("neighbour_"):
                assert ("scheme" in c) == ("buckets" in c)  # placed at its worst component: a table or the full value
            elif c["name"] == "probe_cost":  # a simulated table: every scheme asked for that fits its size
                assert (
                    c["scheme"] in ("mod", "range")
                    and c["buckets"] == 4096
                    and c["load"] in (0.25, 0.5, 0.75, 0.9, 0.95)
                )
                assert c["table_kind"] in ("chaining", "linear", "quadratic", "double", "robin-hood")
            else:
                assert c["scheme"] in ("mod", "range") and c["buckets"] in (1024, 1021)


def test_plan_tables_auto_and_explicit():
    assert AuditPlan().tables(100_000) == [("mask", 1 << 16), ("mask", 1 << 17), ("mask", 1 << 18), ("mod", 131071)]
    plan = AuditPlan(buckets=(4096, 4093), schemes=("mask", "mod"))
    assert plan.tables(None) == [("mask", 4096), ("mod", 4096), ("mod", 4093)]
    with pytest.raises(UsageError, match="power-of-two"):
        AuditPlan(buckets=(4093,), schemes=("mask",))
    with pytest.raises(UsageError, match="number of keys"):
        AuditPlan().tables(None)
    with pytest.raises(UsageError, match="alpha"):
        Thresholds(alpha=1.5)


def test_effect_threshold_turns_fail_into_warn():
    """A small planted skew with a huge key count is significant; whether it fails depends on the threshold."""
    rng = np.random.default_rng(5)
    values = rng.integers(0, 2**64, size=400_000, dtype=np.uint64)
    values[:8000] = 7 + 4096 * np.arange(1, 8001, dtype=np.uint64)  # 2 % of the keys, all distinct, in bucket 7

    def run(threshold: float):
        plan = AuditPlan(
            hashes=("identity",),
            buckets=(4096,),
            schemes=("mod",),
            thresholds=Thresholds(max_load_ratio=threshold, lookup_cost_excess=threshold),
        )
        return {f.check: f.verdict for f in audit_batches([KeyBatch.from_uint64(values)], plan).findings}

    strict, lenient = run(0.01), run(1000.0)
    assert strict["max_load"] == "fail" and strict["colliding_pairs"] == "fail"
    assert lenient["max_load"] == "warn" and lenient["colliding_pairs"] == "warn"


def test_too_regular_is_info_never_fail():
    plan = AuditPlan(hashes=("identity",), buckets=(1000,), schemes=("mod",), checks=("buckets",))
    result = audit_batches([KeyBatch.from_uint64(np.arange(100_000, dtype=np.uint64))], plan)
    verdicts = {f.check: (f.verdict, f.direction) for f in result.findings}
    assert verdicts["chi_square"] == ("info", "too_regular")
    assert result.verdict == "pass" and result.exit_code == 0


def test_dataframe_has_one_row_per_finding():
    result = audit_batches(batches_of(1000), PLAN)
    frame = result.to_dataframe()
    # + probe_cost of five kinds for each of the two schemes asked for (mod and range)
    assert len(frame) == len(result.findings) == 3 * (4 * 5 + 2 + 2 + 2 + 5 + 2 * 5)
    assert {"hash", "check", "verdict", "p_value", "p_adjusted", "effect_value"} <= set(frame.columns)


def test_audit_files_counts_first_for_automatic_sizes(tmp_path):
    path = tmp_path / "keys.csv"
    path.write_bytes(b"id,region\n" + b"".join(b"%s,eu\n" % k for k in KEYS))
    result = audit([path], AuditPlan(hashes=("xxh3_64",)), SourceOptions(columns=("id",)))
    assert result.keys == len(KEYS)
    assert [t.buckets for t in result.hashes[0].tables] == [4096, 8192, 16384, 8191]
    assert result.sources[0]["stats"]["keys"] == len(KEYS)


def test_report_shows_no_raw_key():
    secret = b"alice@example.org"
    keys = [secret + b"%d" % i for i in range(3000)]
    text = to_json(audit_batches([KeyBatch.from_keys(keys)], AuditPlan(hashes=("poly31",), buckets=(64,))))
    assert "alice" not in text


@pytest.mark.parametrize("hashes", [("murmur3_32",), ("murmur3_32", "fnv1a_64", "xxh3_64")])
@pytest.mark.parametrize("threads", [2, pytest.param(3, marks=pytest.mark.slow)])
def test_threads_give_identical_results(hashes, threads):
    plan = AuditPlan(hashes=hashes, buckets=(1024, 1021), schemes=("mod", "range"))
    one = stable(audit_batches(batches_of(700), plan, threads=1))
    assert stable(audit_batches(batches_of(700), plan, threads=threads)) == one


def test_error_in_a_worker_thread_reaches_the_caller():
    from hashaudit.hashes.registry import HashRegistry, HashSpec

    def broken(batch, seed=0):
        raise ValueError("kernel exploded")

    registry = HashRegistry(
        [
            HashSpec("broken", 64, False, "kernel", broken),
            HashSpec("ok", 64, False, "kernel", lambda b, s=0: np.zeros(len(b), np.uint64)),
        ]
    )
    with pytest.raises(ValueError, match="exploded"):
        audit_batches(batches_of(1000), AuditPlan(hashes=("ok", "broken"), buckets=(64,)), registry=registry, threads=2)


def test_prefetch_passes_errors_and_stops_early():
    import threading

    from hashaudit.engine.prefetch import prefetch

    def produce():
        yield 1
        yield 2
        raise OSError("disk gone")

    seen = []
    with pytest.raises(OSError, match="disk gone"):
        for item in prefetch(produce()):
            seen.append(item)
    assert seen == [1, 2]
    before = threading.active_count()
    for item in prefetch(iter(range(10_000)), depth=1):
        if item == 3:
            break
    assert threading.active_count() == before  # the reader thread has ended


def test_repeats_are_not_counted_against_the_hash():
    """A dump in which a few keys repeat thousands of times: by default each distinct key counts once."""
    rng = np.random.default_rng(8)
    keys = [b"k%d" % i for i in rng.integers(0, 2**40, size=5000)] + [b"hot-key"] * 20_000
    batch = KeyBatch.from_keys(keys)
    plan = AuditPlan(hashes=("xxh3_64",), buckets=(1024,))
    distinct = audit_batches([batch], plan)
    assert distinct.keys == 5001 and distinct.keys_read == 25_000 and distinct.repeated_keys == 19_999
    assert distinct.verdict == "pass"
    every = audit_batches([batch], AuditPlan(hashes=("xxh3_64",), buckets=(1024,), all_keys=True))
    assert every.keys == 25_000 and every.verdict == "fail"  # the hot key's bucket holds 20,000 occurrences
    assert report_dict(distinct)["summary"]["repeated_keys"] == 19_999
    duplicates = next(f for f in distinct.findings if f.check == "duplicate_keys")
    assert duplicates.verdict == "info" and duplicates.observed == 19_999 and "repeat" in duplicates.message


def test_distinct_memory_budget_is_a_clear_error():
    values = np.arange(1_000_000, dtype=np.uint64)
    plan = AuditPlan(hashes=("identity",), buckets=(1024,), distinct_memory=4 << 20)
    with pytest.raises(UsageError, match="--all-keys"):
        audit_batches([KeyBatch.from_uint64(values)], plan)


def test_check_groups_select_what_runs():
    from hashaudit.checks import parse_checks

    assert parse_checks(None) == ("buckets", "bits", "collisions", "neighbours", "avalanche", "tables")
    assert parse_checks("bit_bias") == ("bits",)
    assert parse_checks("all") == (
        *("buckets", "bits", "collisions", "neighbours", "seeds", "avalanche", "tables", "tags", "growth", "shards"),
        "placement",
    )
    assert "shards" not in AuditPlan(checks=parse_checks("all")).checks  # all, but no --shards: nothing to shard
    with pytest.raises(UsageError, match="shards must be given"):
        AuditPlan(checks=("shards",))
    assert parse_checks("probe_cost") == ("tables",)
    assert parse_checks("neighbour_case") == ("neighbours",)
    assert parse_checks("bit_independence,chi_square") == ("buckets", "avalanche")  # the registry's order
    with pytest.raises(UsageError, match="unknown check 'entropy'"):
        parse_checks("entropy")
    only_bits = audit_batches(batches_of(1000), AuditPlan(hashes=("xxh3_64",), checks=("bits",)))
    assert {f.check for f in only_bits.findings} == {"bit_bias", "bit_correlation"}
    assert only_bits.hashes[0].tables == ()


def test_bit_checks_catch_a_function_with_dead_bits():
    """identity on small integers: the high output bits never change, so bit_bias fails."""
    plan = AuditPlan(hashes=("identity",), checks=("bits",))
    result = audit_batches([KeyBatch.from_uint64(np.arange(50_000, dtype=np.uint64))], plan)
    verdicts = {f.check: f.verdict for f in result.findings}
    assert verdicts["bit_bias"] == "fail"
    assert "output bit" in next(f.message for f in result.findings if f.check == "bit_bias")


def test_avalanche_on_the_audited_keys():
    """Linear functions cannot avalanche (Webster & Tavares 1985): crc32 and poly31 fail, xxh3_64 passes."""
    plan = AuditPlan(hashes=("crc32", "poly31", "xxh3_64"), checks=("avalanche",), avalanche_keys=1024)
    result = audit_batches(batches_of(1000), plan)
    verdicts = {(f.hash_name, f.check): f.verdict for f in result.findings}
    assert verdicts[("crc32", "avalanche")] == verdicts[("poly31", "avalanche")] == "fail"
    assert verdicts[("xxh3_64", "avalanche")] == verdicts[("xxh3_64", "bit_independence")] == "pass"


def test_full_collisions_catch_keys_crafted_for_poly31():
    """ "Aa" and "BB" have the same h = 31*h + byte value (31*65 + 97 = 31*66 + 66 = 2112, Java's String.hashCode,
    from memory and checked by tests/hashes), so every string of such blocks collides fully under poly31."""
    import itertools

    crafted = [b"".join(blocks) for blocks in itertools.product([b"Aa", b"BB"], repeat=10)]
    plan = AuditPlan(hashes=("poly31", "xxh3_64"), checks=("collisions",))
    result = audit_batches([KeyBatch.from_keys(crafted)], plan)
    by_hash = {f.hash_name: f for f in result.findings if f.check == "full_collisions"}
    assert by_hash["poly31"].verdict == "fail"
    assert by_hash["poly31"].observed == 1024 * 1023 / 2  # one group of all 1,024 keys
    assert "1,024 distinct keys share their full 32-bit value" in by_hash["poly31"].message
    assert by_hash["xxh3_64"].verdict == "pass"


def test_collision_spill_gives_the_same_report(tmp_path):
    small = AuditPlan(hashes=("fnv1a_32",), checks=("collisions",), collision_memory=1 << 12, spill_dir=str(tmp_path))
    large = AuditPlan(hashes=("fnv1a_32",), checks=("collisions",))
    # the memory budget is not recorded in the settings: it does not change the result
    assert stable(audit_batches(batches_of(500), small)) == stable(audit_batches(batches_of(500), large))
    assert list(tmp_path.iterdir()) == []  # spilled files are removed


def test_neighbour_families_name_the_family_that_breaks_a_function():
    """Appending a byte b to a key multiplies poly31's value by 31 and adds b, so appended-byte neighbours of
    different keys collide fully far more often than the birthday bound allows; xxh3_64 shows nothing."""
    keys = [b"MF-26-%07d" % i for i in range(400_000, 430_000)]
    plan = AuditPlan(hashes=("poly31", "xxh3_64"), checks=("neighbours",))
    result = audit_batches([KeyBatch.from_keys(keys)], plan)
    verdicts = {(f.hash_name, f.check): f for f in result.findings}
    failing = verdicts[("poly31", "neighbour_appended_byte")]
    assert failing.verdict == "fail" and "appended" in failing.message
    assert all(f.verdict == "pass" for (h, _), f in verdicts.items() if h == "xxh3_64")


def test_collisions_that_survive_every_seed_fail():
    """A seeded function whose seed only mixes poly31's value: "Aa"/"BB" strings collide whatever the seed."""
    import itertools

    from hashaudit.hashes.fnv import poly31
    from hashaudit.hashes.registry import HashRegistry, HashSpec

    def seeded_poly31(batch, seed=0):
        with np.errstate(over="ignore"):
            x = poly31(batch) ^ np.uint64(seed & 0xFFFFFFFFFFFFFFFF)
            x = (x ^ (x >> np.uint64(33))) * np.uint64(0xFF51AFD7ED558CCD)  # the MurmurHash3 fmix64 finaliser
            return x ^ (x >> np.uint64(33))

    registry = HashRegistry([HashSpec("seeded_poly31", 64, True, "kernel", seeded_poly31)])
    registry.register(REGISTRY.get("siphash24"))
    crafted = [b"".join(blocks) for blocks in itertools.product([b"Aa", b"BB"], repeat=11)]
    plan = AuditPlan(hashes=("seeded_poly31", "siphash24"), checks=("seeds",))
    result = audit_batches([KeyBatch.from_keys(crafted)], plan, registry=registry)
    verdicts = {(f.hash_name, f.check): f for f in result.findings}
    flood = verdicts[("seeded_poly31", "seed_independent_collisions")]
    assert flood.verdict == "fail" and "every one of 8 seeds" in flood.message
    assert verdicts[("siphash24", "seed_independent_collisions")].verdict == "pass"


def test_large_files_estimate_the_key_count_instead_of_reading_twice(tmp_path, monkeypatch):
    """Table sizes only need the key count to the nearest power of two: for a large plain key file it is estimated
    from the file size and the first batch, and gives the same tables as an exact count."""
    import hashaudit.engine.sources as sources_module

    path = tmp_path / "keys.txt"
    path.write_bytes(b"".join(b"user-%09d\n" % i for i in range(300_000)))
    plan = AuditPlan(hashes=("xxh3_64",), checks=("buckets",))
    exact = audit([path], plan)
    opened = []
    real_open = sources_module.open_keys

    def counting_open(*args, **kwargs):
        opened.append(args[0])
        return real_open(*args, **kwargs)

    monkeypatch.setattr(sources_module, "EXACT_COUNT_BYTES", 0)
    monkeypatch.setattr(sources_module, "open_keys", counting_open)
    estimated = audit([path], plan)
    assert len(opened) == 1  # one pass over the file
    assert estimated.tables == exact.tables
    assert stable(estimated) == stable(exact)


def test_more_distinct_keys_than_the_budget_are_read_in_parts():
    """With a 4 MiB budget, 700,000 distinct keys (about 14 MB of fingerprints) need several passes over the input;
    the results are the same as in one pass with room to spare (only the run metadata differs)."""
    rng = np.random.default_rng(12)
    values = rng.integers(0, 700_000, size=1_000_000, dtype=np.uint64) * np.uint64(0x9E3779B97F4A7C15)
    batches = [KeyBatch.from_uint64(part) for part in np.array_split(values, 5)]
    plan = AuditPlan(hashes=("xxh3_64", "crc32"), buckets=(4096,), seed=3)
    one = audit_batches(batches, plan)
    small = AuditPlan(hashes=("xxh3_64", "crc32"), buckets=(4096,), seed=3, distinct_memory=4 << 20)
    several = audit_batches(batches, small, reopen=lambda: iter(batches))
    assert one.run["passes"] == 1 and several.run["passes"] >= 4
    assert several.keys == one.keys == len(np.unique(values)) and several.keys_read == one.keys_read == len(values)
    strip = lambda result: {k: v for k, v in report_dict(result).items() if k not in ("run", "settings")}  # noqa: E731
    assert json.dumps(strip(several), sort_keys=True) == json.dumps(strip(one), sort_keys=True)
    with pytest.raises(UsageError, match="several passes"):
        audit_batches(batches, small)  # without a way to read the input again
