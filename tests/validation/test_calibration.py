"""Calibration and power of the checks (``hashaudit.calibration``).

The fast tests run small null studies and a few points of each power curve; ``test_full_study`` (slow) runs the
study of ``bench/validation.py``. Every run derives from a literal seed, so the outcomes asserted here are fixed;
the thresholds were chosen from actual runs with a margin.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

import hashaudit.calibration as calibration_package
from hashaudit import KeyBatch, Thresholds, audit_batches
from hashaudit.calibration import (
    COMBINED_CHECKS,
    DEPARTURES,
    FACT_CHECKS,
    NULL_GROUPS,
    NULL_LAW,
    NULL_LAW_KINDS,
    NULL_PLACEMENTS,
    TINY_KEY_COUNTS,
    biased_bit,
    calibration,
    clopper_pearson,
    judge_calibration,
    leaky_input_bit,
    power,
    probe_cost_null,
    random_keys,
    rate_summary,
    rejudge,
    siphash24_low32,
    study,
    summarise_p_values,
    weak_low_bits,
    xor_rotations,
)
from hashaudit.hashes.siphash import siphash24
from hashaudit.hashes.xxh import xxh3_64

FAST_SEED = 7
FAST_NULL_RUNS = 72
HASH_GROUPS = tuple(g for g in NULL_GROUPS if g != "placement")  # the fast hash audits leave the placements out
PLACEMENT_NULL_RUNS = 60
PLACEMENT_KEY_COUNTS = (2_000, 20_000)  # fixed counts: each ideal maximum of an even split is computed once
KNOWN_ANTICONSERVATIVE: tuple[str, ...] = ()  # none since simulated tables have regions of at least 256 slots


# ---------------------------------------------------------------------------------------------------------
# The package and its per-check tables


def test_public_names_are_sorted_and_resolve() -> None:
    assert calibration_package.__all__ == sorted(calibration_package.__all__)
    for name in calibration_package.__all__:
        assert getattr(calibration_package, name) is not None, name


def test_every_check_has_a_known_null_law_kind() -> None:
    assert set(NULL_LAW.values()) <= set(NULL_LAW_KINDS)
    # the combined checks are conservative by design; repeated and heavy keys are facts, outside Holm's family
    assert COMBINED_CHECKS == ("avalanche", "bit_independence", "probe_cost")
    assert FACT_CHECKS == ("duplicate_keys", "hot_keys", "load_attribution", "placement_agreement", "hash_tag_pinning")
    # the placement checks are one test each: Pearson's chi-square, and a binomial test (discrete: super-uniform)
    assert NULL_LAW["placement_balance"] == NULL_LAW["placement_movement"] == "uniform_p"
    assert "placement" in NULL_GROUPS


# ---------------------------------------------------------------------------------------------------------
# The statistics of the study itself


def test_clopper_pearson_closed_forms() -> None:
    # with no event the one-sided upper bound solves (1 - u)^n = 1 - confidence; with n events of n, u^n = 0.05
    lower, upper = clopper_pearson(0, 300)
    assert lower == 0.0
    assert upper == pytest.approx(1 - 0.05 ** (1 / 300), rel=1e-9)
    lower, upper = clopper_pearson(50, 50)
    assert lower == pytest.approx(0.05 ** (1 / 50), rel=1e-9)
    assert upper == 1.0


def test_clopper_pearson_matches_the_two_sided_interval() -> None:
    # the one-sided 95 % bounds are the ends of the two-sided 90 % exact interval (scipy's binomtest)
    reference = stats.binomtest(7, 400).proportion_ci(confidence_level=0.90, method="exact")
    lower, upper = clopper_pearson(7, 400)
    assert lower == pytest.approx(reference.low, rel=1e-9)
    assert upper == pytest.approx(reference.high, rel=1e-9)


def test_rate_summary_excess_test() -> None:
    # P(X >= k) for X ~ Binomial(100, 0.01), summed by hand
    def tail(k: int) -> float:
        return 1 - sum(math.comb(100, j) * 0.01**j * 0.99 ** (100 - j) for j in range(k))

    three = rate_summary(3, 100, 0.01)
    five = rate_summary(5, 100, 0.01)
    assert three["p_excess"] == pytest.approx(tail(3), rel=1e-9)  # 0.0794: three in 100 is not evidence
    assert three["consistent"]
    assert five["p_excess"] == pytest.approx(tail(5), rel=1e-9)  # 0.0034: five in 100 is
    assert not five["consistent"]


def _rows(samples: dict[str, tuple[np.ndarray, bool]]) -> dict[str, dict]:
    rows = [
        {"check": name, "runs": len(p), "summary": summarise_p_values(p, continuous=continuous)}
        for name, (p, continuous) in samples.items()
    ]
    return {row["check"]: row for row in judge_calibration(rows)}


def test_summary_tells_uniform_conservative_and_anticonservative_apart() -> None:
    rng = np.random.default_rng(11)
    u = rng.uniform(size=600)
    counts = rng.poisson(2.0, size=600)
    poisson_upper = stats.poisson.sf(counts - 1, 2.0)  # P(X >= x): discrete, super-uniform
    rows = _rows(
        {
            "uniform": (u, True),
            "too_small": (u**1.5, True),  # P(U^1.5 <= a) = a^(2/3) > a
            "too_large": (np.sqrt(u), True),  # P(sqrt(U) <= a) = a^2 < a: conservative
            "discrete": (poisson_upper, False),
        }
    )
    assert rows["uniform"]["status"] == "uniform"
    assert rows["too_small"]["status"] == "too many small p-values"
    assert rows["too_large"]["status"] == "not uniform (conservative)"
    assert rows["discrete"]["status"] == "valid"
    assert rows["discrete"]["summary"]["ks_p"] is None  # no two-sided test for a discrete law


# ---------------------------------------------------------------------------------------------------------
# The keys and functions the study plants


def test_random_keys_are_distinct() -> None:
    rng = np.random.default_rng(3)
    batch = random_keys(rng, 5_000, "bytes", 12)
    keys = batch.to_list()
    assert len(keys) == 5_000 and len(set(keys)) == 5_000 and {len(k) for k in keys} == {12}
    integers = random_keys(rng, 5_000, "uint64")
    assert len(set(integers.to_list())) == 5_000


def test_departure_functions_do_what_they_say() -> None:
    rng = np.random.default_rng(5)
    batch = random_keys(rng, 20_000, "bytes", 16)
    base = xxh3_64(batch, 9)
    assert np.array_equal(weak_low_bits(0.0).hash_batch(batch, 9), base)
    assert np.all(weak_low_bits(1.0).hash_batch(batch, 9) & np.uint64(15) == 0)
    ones = (biased_bit(0.75).hash_batch(batch, 9) >> np.uint64(7)) & np.uint64(1)
    assert abs(ones.mean() - 0.75) < 4.5 * math.sqrt(0.75 * 0.25 / len(batch))
    low32 = siphash24_low32().hash_batch(batch, 9)
    assert np.array_equal(low32, siphash24(batch, 9) & np.uint64(0xFFFF_FFFF))


def _flip_first_bit(batch: KeyBatch) -> KeyBatch:
    data = batch.data.copy()
    data[batch.offsets[:-1]] ^= np.uint8(1)
    return KeyBatch(data, batch.offsets)


def test_leaky_input_bit_flips_one_cell() -> None:
    rng = np.random.default_rng(6)
    batch = random_keys(rng, 20_000, "bytes", 16)
    flipped = _flip_first_bit(batch)
    always = leaky_input_bit(1.0)
    diff = always.hash_batch(batch, 4) ^ always.hash_batch(flipped, 4)
    assert np.all(diff & np.uint64(1) == 1)  # output bit 0 follows input bit 0 in every key
    assert abs(((diff >> np.uint64(1)) & np.uint64(1)).mean() - 0.5) < 0.02  # other bits flip half the time
    never = leaky_input_bit(0.0)
    assert abs(((never.hash_batch(batch, 4) ^ never.hash_batch(flipped, 4)) & np.uint64(1)).mean() - 0.5) < 0.02


def test_xor_rotations_is_linear() -> None:
    rng = np.random.default_rng(8)
    a, b = (random_keys(rng, 1_000, "bytes", 16) for _ in range(2))
    both = KeyBatch(a.data ^ b.data, a.offsets)
    spec = xor_rotations()
    assert np.array_equal(spec.hash_batch(both, 0), spec.hash_batch(a, 0) ^ spec.hash_batch(b, 0))


def test_rejudge_reproduces_the_audit() -> None:
    rng = np.random.default_rng(12)
    for strength in (0.0, 0.05):
        batch, plan, registry = DEPARTURES["forced_buckets"].build(strength, rng)
        findings = audit_batches([batch], plan, registry=registry).findings
        again = rejudge(findings, Thresholds())
        kept = [f for f in findings if f.check not in FACT_CHECKS]
        assert [(f.check, f.verdict, f.p_adjusted) for f in again] == [(f.check, f.verdict, f.p_adjusted) for f in kept]
    assert any(f.verdict == "fail" for f in again)


# ---------------------------------------------------------------------------------------------------------
# Calibration, fast subset


@pytest.fixture(scope="module")
def fast_null() -> dict:
    return calibration(FAST_NULL_RUNS, FAST_SEED, max_keys=10_000, avalanche_keys=128, groups=HASH_GROUPS)


def test_null_audits_do_not_fail(fast_null: dict) -> None:
    audits = fast_null["audits"]["without probe_cost"]
    assert audits["fail"]["count"] == 0
    assert audits["upper"]["consistent"]
    assert fast_null["audits"]["all"]["lower"]["consistent"]


def test_null_p_values_are_calibrated(fast_null: dict) -> None:
    rows = {row["check"]: row for row in fast_null["checks"]}
    assert len(rows) == 22  # 10 bucket labels, 2 bit checks, full collisions, 4 avalanche labels, 5 table kinds
    for label, row in rows.items():
        if label.startswith("probe_cost"):  # audits of fewer than 3,891 keys simulate no table (under 2^12 slots)
            assert 0 < row["runs"] <= FAST_NULL_RUNS
        else:
            assert row["runs"] == FAST_NULL_RUNS
        if label not in KNOWN_ANTICONSERVATIVE:
            assert row["status"] != "too many small p-values", (label, row["summary"])
    for label in ("chi_square mask", "chi_square mod", "g_test mask", "bit_bias", "bit_correlation"):
        assert rows[label]["summary"]["ks_p"] > 0.01, label
        assert rows[label]["status"].startswith("uniform"), label
    # 64-bit values of at most 10,000 keys: a full-width collision is all but impossible, p = 1
    assert rows["full_collisions"]["summary"]["share_of_ones"] > 0.9


def test_null_audits_with_every_default_check_do_not_fail(fast_null: dict) -> None:
    assert fast_null["audits"]["all"]["fail"]["consistent"]


@pytest.fixture(scope="module")
def placement_null() -> dict:
    return calibration(PLACEMENT_NULL_RUNS, FAST_SEED, key_counts=PLACEMENT_KEY_COUNTS, groups=("placement",))


def test_placement_null_audits_do_not_fail(placement_null: dict) -> None:
    """Strong inputs (random keys under each system's own hash) pass the placement checks."""
    assert placement_null["settings"]["placements"] == list(NULL_PLACEMENTS)
    audits = placement_null["audits"]["placement checks alone"]
    assert audits["fail"]["count"] == 0 and audits["upper"]["consistent"] and audits["lower"]["consistent"]
    rows = {row["check"]: row for row in placement_null["checks"]}
    assert len(rows) == 10  # balance and movement of five placements
    for label, row in rows.items():
        assert row["runs"] == PLACEMENT_NULL_RUNS, label
        assert row["status"] != "too many small p-values", (label, row["summary"])
        # balance: Pearson's chi-square (continuous); movement: a binomial test (discrete, super-uniform)
        assert row["status"] == ("uniform" if label.startswith("placement_balance") else "valid"), label


TINY_NULL_RUNS = 30  # each of TINY_KEY_COUNTS with each null hash and key kind once
TINY_STUDY_SEED = 2024


@pytest.fixture(scope="module")
def tiny_null() -> dict:
    return calibration(TINY_NULL_RUNS, FAST_SEED, key_counts=TINY_KEY_COUNTS, avalanche_keys=128)


def test_tiny_null_audits_cover_every_size(tiny_null: dict) -> None:
    runs = tiny_null["runs"]
    assert sorted({r["keys"] for r in runs}) == list(TINY_KEY_COUNTS)
    assert {(r["keys"], r["hash"], r["key_kind"]) for r in runs} == {
        (k, h, kind) for k in TINY_KEY_COUNTS for h in ("siphash24", "xxh3_64", "siphash24_low32")
        for kind in ("bytes", "uint64")
    }  # fmt: skip


def test_tiny_null_audits_do_not_fail(tiny_null: dict) -> None:
    for family in ("all", "without probe_cost"):
        audits = tiny_null["audits"][family]
        assert audits["fail"]["count"] == 0 and audits["upper"]["consistent"] and audits["lower"]["consistent"]
    for row in tiny_null["checks"]:
        assert row["runs"] == TINY_NULL_RUNS, row["check"]  # no simulated table at these sizes: no probe_cost
        assert row["status"] != "too many small p-values", (row["check"], row["summary"])


@pytest.mark.slow
def test_tiny_null_study() -> None:
    """600 tiny null audits: the false-failure and false-warning rates stay at or below alpha."""
    result = calibration(600, TINY_STUDY_SEED, key_counts=TINY_KEY_COUNTS, avalanche_keys=128)
    for family in ("all", "without probe_cost"):
        audits = result["audits"][family]
        assert audits["fail"]["consistent"] and audits["upper"]["consistent"] and audits["lower"]["consistent"]
    for row in result["checks"]:
        assert row["status"] != "too many small p-values", (row["check"], row["summary"])


def test_probe_cost_small_linear_tables() -> None:
    """The smallest simulated table (2^12 slots, 16 regions of 256 slots): null p-values are not too small. (With
    64 regions of 32 slots in 2^11-slot tables, 11 % of null runs had p <= 0.01: regions shorter than a
    linear-probing cluster near full load are not independent.)"""
    for kind in ("linear", "robin-hood"):
        (row,) = probe_cost_null([1 << 12], [kind], 100, FAST_SEED)
        assert row["summary"]["levels"]["0.01"]["consistent"], kind
        assert row["summary"]["levels"]["0.05"]["consistent"], kind


# ---------------------------------------------------------------------------------------------------------
# Power, fast subset


def _power(name: str, strengths: tuple, runs: int, seed: int = FAST_SEED) -> dict:
    result = power(runs, seed, departures=[name], strengths={name: strengths})
    return {(row["strength"], row["check"]): row for row in result["rows"]}


def test_forced_buckets_are_found() -> None:
    rows = _power("forced_buckets", (0.0, 0.05), 10)
    for check in ("chi_square mask", "colliding_pairs mask", "max_load mask"):
        assert rows[0.05, check]["fail"] >= 9, check  # 5 % of 40,000 keys in 4 of 4,096 buckets
    assert all(rows[0.0, check]["warn_or_fail"] <= 1 for check in DEPARTURES["forced_buckets"].checks)


def test_weak_low_bits_show_under_mask_only() -> None:
    rows = _power("weak_low_bits", (0.2,), 10)
    assert rows[0.2, "chi_square mask"]["fail"] >= 9
    assert rows[0.2, "chi_square mod"]["warn_or_fail"] <= 1  # a prime modulus uses every bit


def test_biased_bit_is_found() -> None:
    rows = _power("biased_bit", (0.5, 0.52), 10)
    assert rows[0.52, "bit_bias"]["fail"] == 10
    assert rows[0.52, "bit_correlation"]["warn_or_fail"] <= 1
    assert rows[0.5, "bit_bias"]["warn_or_fail"] <= 1


def test_linear_functions_fail_avalanche() -> None:
    rows = _power("linear", ("crc32", "xor_rotations"), 10)
    assert rows["crc32", "avalanche"]["fail"] == 10
    assert rows["xor_rotations", "avalanche"]["fail"] == 10


def test_leaky_input_bit_is_found() -> None:
    rows = _power("leaky_input_bit", (0.0, 1.0), 5)
    assert rows[1.0, "avalanche"]["fail"] == 5
    assert rows[0.0, "avalanche"]["warn_or_fail"] <= 1


# 40 log-spaced key counts from 2,000 to 200,000, taken in turn: each ideal maximum is computed once per worker
PLACEMENT_STUDY_KEY_COUNTS = tuple(int(k) for k in np.unique(np.round(np.geomspace(2_000, 200_000, 40)).astype(int)))


@pytest.mark.slow
def test_placement_null_study() -> None:
    """4,000 null audits of the placement group alone (about 5 minutes on two cores): the audit-level rates stay at or
    below alpha, and every placement row is uniform (balance) or valid (movement)."""
    result = calibration(4000, 20261203, key_counts=PLACEMENT_STUDY_KEY_COUNTS, groups=("placement",), workers=2)
    audits = result["audits"]["placement checks alone"]
    assert audits["fail"]["consistent"] and audits["upper"]["consistent"] and audits["lower"]["consistent"]
    for row in result["checks"]:
        assert row["status"] == ("uniform" if row["check"].startswith("placement_balance") else "valid"), row["check"]


# ---------------------------------------------------------------------------------------------------------
# The full study (about 40 minutes on two cores shared with other work, the placements included)


@pytest.mark.slow
def test_full_study() -> None:
    result = study(workers=2)
    null = result["calibration"]
    for outcome in ("fail", "upper"):
        assert null["audits"]["without probe_cost"][outcome]["consistent"], outcome
    # the placement tests alone: 8 of 2,000 audits failed; 34 warned or failed (1.7 %, over alpha at p = 0.003 at this
    # seed, which test_placement_null_study does not reproduce; docs/trust.md)
    assert null["audits"]["placement checks alone"]["fail"]["consistent"]
    for row in null["checks"]:
        if row["check"] not in KNOWN_ANTICONSERVATIVE:
            assert row["status"] != "too many small p-values", row["check"]
    detection = {(r["departure"], r["strength"], r["check"]): r for r in result["power"]["rows"]}
    assert detection["forced_buckets", 0.01, "chi_square mask"]["fail_rate"] >= 0.9
    assert detection["forced_buckets", 0.002, "max_load mask"]["fail_rate"] >= 0.9
    assert detection["weak_low_bits", 0.1, "chi_square mask"]["fail_rate"] >= 0.9
    assert detection["biased_bit", 0.515, "bit_bias"]["fail_rate"] >= 0.9
    assert detection["leaky_input_bit", 0.4, "avalanche"]["fail_rate"] >= 0.9
    assert detection["tag_family", 0.05, "placement_balance redis-cluster:nodes=6"]["fail_rate"] >= 0.9
    assert detection["tag_family", 0.005, "hash_tag_pinning redis-cluster:nodes=6"]["info_rate"] == 1.0
    assert detection["key_stride", 0.02, "placement_balance jvm-hashcode-mod:n=16"]["fail_rate"] >= 0.9
    assert detection["key_stride", 0.1, "placement_balance kafka:partitions=16"]["detection_rate"] <= 0.1
    for (departure, strength, check), row in detection.items():
        if strength in (0.0, 0.5) and departure != "linear":
            assert row["detection_rate"] <= 0.1, (departure, check)
