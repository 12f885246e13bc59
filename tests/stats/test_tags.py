"""The ``tag_bits`` test: counting, the null laws, planted defects, layout checks and option parsing.

Reference values: pair counts come from ``collections.Counter`` over (position, tag) computed with Python ints
(positions by the formulas of each scheme, not by ``bucket_index``); the ideal means are C(n, 2) / (m·2^t) by
exact integer arithmetic; 9/64 is 1/(4r²) at r = 4/3 (the Notes of ``tag_tests``).
"""

from __future__ import annotations

import json
import math
from collections import Counter

import numpy as np
import pytest
from scipy import stats

from hashaudit.errors import UsageError
from hashaudit.stats.tags import _pairs_kernel, check_tag_layout, parse_tag_bits, tag_tests

MASK16 = 1 << 16


def uniform_values(seed: int, n: int, bits: int = 64) -> np.ndarray:
    return np.random.default_rng(seed).integers(0, 1 << bits, size=n, dtype=np.uint64)


def the_test(values, width=64, scheme="mask", buckets=MASK16, tag_bits=7, tag_shift=None):
    tests = tag_tests(values, width, scheme, buckets, tag_bits, tag_shift)
    assert len(tests) == 1 and tests[0].name == "tag_bits"
    return tests[0]


def reference_position(h: int, scheme: str, buckets: int, bits: int) -> int:
    if scheme == "mod":
        return h % buckets
    if scheme == "mask":
        return h & (buckets - 1)
    if scheme == "high":
        return h >> (bits - (buckets.bit_length() - 1))
    return (h * buckets) >> bits


def reference(values: np.ndarray, width: int, scheme: str, buckets: int, tag_bits: int, tag_shift: int):
    """(pairs sharing bucket and tag, pairs sharing a bucket, Σ p_g², tag counts) with Counters over Python ints."""
    bits = min(width, 64)
    hashes = [int(v) & ((1 << bits) - 1) for v in values]
    cells = Counter(
        (reference_position(h, scheme, buckets, bits), (h >> tag_shift) & ((1 << tag_bits) - 1)) for h in hashes
    )
    positions = Counter(reference_position(h, scheme, buckets, bits) for h in hashes)
    tags = Counter((h >> tag_shift) & ((1 << tag_bits) - 1) for h in hashes)
    n = len(hashes)
    same_tag = sum(c * c for c in tags.values()) / (n * n)
    return (
        sum(math.comb(c, 2) for c in cells.values()),
        sum(math.comb(c, 2) for c in positions.values()),
        same_tag,
        tags,
    )


# --------------------------------------------------------------------------------------------------------
# Uniform values
# --------------------------------------------------------------------------------------------------------


def test_uniform_values_match_the_ideal():
    n = 1 << 18
    result = the_test(uniform_values(20240611, n))
    cells = MASK16 << 7
    assert result.expected == (n - 1) / cells
    assert result.details["expected_same_tag_pairs"] == math.comb(n, 2) / cells  # 4095.98...
    assert "Poisson" in result.method  # load n / m' = 1/32
    assert abs(result.details["z_score"]) < 4
    assert result.p_upper > 0.001 and result.p_lower > 0.001
    assert result.details["dependence_ratio"] == pytest.approx(1.0, abs=0.07)  # sd about 1/sqrt(4096) = 0.016
    assert abs(result.effect.value) < 0.07
    assert result.details["tag_uniformity_p"] > 0.001
    assert result.details["scheme_excess_bound"] == 0.0
    assert result.details["ideal_tag_share"] == 1 / 128
    json.dumps(result.details, allow_nan=False)  # plain, finite numbers only


def test_dense_table_takes_the_chi_square_law():
    # m' = 2^6 · 2^4 = 1024 cells for 4096 keys: load 4
    result = the_test(uniform_values(7, 4096), scheme="high", buckets=64, tag_bits=4, tag_shift=0)
    assert result.method.startswith("chi-square with 1023 degrees of freedom")
    assert result.p_upper > 0.001 and result.p_lower > 0.001
    assert result.expected == 4095 / 1024


# --------------------------------------------------------------------------------------------------------
# Counting against a plain-Python reference
# --------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("width", "scheme", "buckets", "tag_bits", "tag_shift"),
    [
        (64, "mask", 256, 4, 60),
        (64, "mask", 256, 7, 8),
        (64, "high", 256, 5, 0),
        (64, "mod", 1000, 6, 20),
        (64, "range", 1000, 4, 0),
        (32, "mask", 512, 8, 24),
        (32, "mod", 331, 3, 29),
        (32, "range", 300, 6, 3),
        (128, "high", 128, 8, 40),
    ],
)
def test_counts_match_a_counter(width, scheme, buckets, tag_bits, tag_shift):
    # full 64-bit values even for width 32: only the low 32 bits may count
    values = uniform_values(width + buckets, 5000)
    same_tag_pairs, bucket_pairs, same_tag, tags = reference(values, width, scheme, buckets, tag_bits, tag_shift)
    result = the_test(values, width, scheme, buckets, tag_bits, tag_shift)
    d = result.details
    assert d["same_tag_pairs"] == same_tag_pairs
    assert result.observed == result.statistic == 2 * same_tag_pairs / 5000
    assert d["false_matches_given_marginals"] == pytest.approx(2 * bucket_pairs * same_tag / 5000, rel=1e-12)
    assert d["dependence_ratio"] == pytest.approx(same_tag_pairs / (bucket_pairs * same_tag), rel=1e-12)
    top = max(tags.values())
    assert d["worst_tag"] == min(g for g, c in tags.items() if c == top)
    assert d["worst_tag_share"] == top / 5000


def test_width_32_reads_only_the_low_bits():
    values = uniform_values(3, 5000)
    low = values & np.uint64(0xFFFFFFFF)
    for scheme in ("mod", "mask", "high", "range"):
        assert the_test(values, 32, scheme, 1024, 7, 12) == the_test(low, 32, scheme, 1024, 7, 12)


def test_128_bit_rows_use_the_low_word():
    rows = np.random.default_rng(11).integers(0, 1 << 64, size=(3000, 2), dtype=np.uint64)
    assert the_test(rows, 128, "mask", 512, 7) == the_test(rows[:, 0].copy(), 128, "mask", 512, 7)


def test_pairs_kernel_on_hand_made_runs():
    # codes (bucket << 2 | tag): bucket 0 holds tags 1, 1, 1, 2; bucket 1 tags 0, 3; bucket 5 tags 2, 2
    codes = np.array([1, 1, 1, 2, 4, 7, 22, 22], dtype=np.uint64)
    # same cell: C(3, 2) + C(2, 2) = 4; same bucket: C(4, 2) + C(2, 2) + C(2, 2) = 8
    assert _pairs_kernel(codes, 2) == (4, 8)
    assert _pairs_kernel(np.zeros(0, dtype=np.uint64), 2) == (0, 0)


def test_no_values_no_test():
    assert tag_tests(np.zeros(0, dtype=np.uint64), 64, "mask", 16, 7) == []


def test_a_single_key_meets_no_other():
    result = the_test(np.array([12345], dtype=np.uint64))
    assert result.observed == result.expected == 0.0
    assert result.p_upper == 1.0 and result.effect.value == 0.0
    assert result.details["dependence_ratio"] is None


# --------------------------------------------------------------------------------------------------------
# Planted defects
# --------------------------------------------------------------------------------------------------------


def test_tag_determined_by_the_position_is_caught():
    rng = np.random.default_rng(99)
    n = 1 << 17
    low = rng.integers(0, MASK16, size=n, dtype=np.uint64)
    middle = rng.integers(0, 1 << 41, size=n, dtype=np.uint64) << np.uint64(16)
    values = low | middle | ((low & np.uint64(127)) << np.uint64(57))  # tag = position & 127
    result = the_test(values)
    # every pair in a bucket shares its tag: 128 times the ideal
    assert result.effect.value > 100
    assert result.observed > 100 * result.expected
    assert result.p_upper < 1e-10
    assert result.details["dependence_ratio"] > 100
    assert result.details["tag_uniformity_p"] > 0.001  # the tags alone look uniform: only the pairing is wrong


def test_narrow_hash_widened_leaves_a_constant_tag():
    values = uniform_values(5, 1 << 16, bits=32)  # a 32-bit value declared 64-bit: the top 7 bits are zero
    result = the_test(values)
    d = result.details
    assert d["tag_uniformity_p"] < 1e-10
    assert d["worst_tag"] == 0 and d["worst_tag_share"] == 1.0
    assert result.effect.value > 100 and result.p_upper < 1e-10
    # a constant tag cannot depend on the position: the whole excess is the uneven tag
    assert d["dependence_ratio"] == 1.0
    assert d["false_matches_given_marginals"] == pytest.approx(result.observed, rel=1e-12)


def test_one_stuck_tag_bit_doubles_the_false_matches():
    values = uniform_values(8, 1 << 17) >> np.uint64(1)  # top bit always zero: half the tags never occur
    result = the_test(values)
    assert result.effect.value == pytest.approx(1.0, abs=0.15)  # Σ p_g² = 2/128 instead of 1/128
    assert result.p_upper < 1e-10
    assert result.details["tag_uniformity_p"] < 1e-10
    assert result.details["dependence_ratio"] == pytest.approx(1.0, abs=0.1)


# --------------------------------------------------------------------------------------------------------
# Null calibration
# --------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("buckets", "law"),
    [(1 << 8, "Poisson"), (1 << 6, "chi-square")],  # loads 0.49 and 1.95 of the 2^12 and 2^10 cells
)
def test_p_upper_is_uniform_under_the_null(buckets, law):
    p_values = []
    for seed in range(200):
        result = the_test(uniform_values(1000 + seed, 2000), buckets=buckets, tag_bits=4)
        assert result.method.startswith(law)
        p_values.append(result.p_upper)
    assert stats.kstest(p_values, "uniform").pvalue > 0.001


def test_range_scheme_excess_is_allowed_for():
    # 3·2^14 buckets by range reduction, 7 tag bits right below the 16 position bits: each bucket spans 4/3
    # periods of the tag, and an ideal hash has about 12 % more false tag matches (frac(r)(1 - frac(r))/r²)
    layout = check_tag_layout(64, "range", 3 << 14, 7, 41)
    assert layout.scheme_excess_bound == pytest.approx(9 / 64, rel=1e-9)
    result = the_test(uniform_values(41, 1 << 20), scheme="range", buckets=3 << 14, tag_shift=41)
    assert 0.09 < result.effect.value < 9 / 64  # about 20 standard deviations above 0
    assert result.details["z_score"] > 10
    assert result.p_upper > 0.001  # the scheme's own share does not fail the hash
    assert "allows" in result.method


def test_exact_layouts_have_no_scheme_excess():
    assert check_tag_layout(64, "mask", 1 << 20, 7).scheme_excess_bound == 0.0
    assert check_tag_layout(32, "high", 1 << 10, 8, 0).scheme_excess_bound == 0.0
    assert check_tag_layout(64, "mod", 1 << 12, 7).scheme_excess_bound == 0.0  # mod 2^k is mask
    assert check_tag_layout(64, "range", 1 << 12, 7, 0).scheme_excess_bound == 0.0  # range 2^k is high
    assert 0 < check_tag_layout(64, "mod", 1_000_003, 7).scheme_excess_bound < 1e-14


# --------------------------------------------------------------------------------------------------------
# Layout checks and option parsing
# --------------------------------------------------------------------------------------------------------


def one_line_usage_error(call, *words):
    with pytest.raises(UsageError) as caught:
        call()
    message = str(caught.value)
    assert "\n" not in message
    for word in words:
        assert word in message
    return message


@pytest.mark.parametrize(
    ("text", "parsed"), [("7", (7, None)), ("8@56", (8, 56)), (" 16@0 ", (16, 0)), ("1@63", (1, 63))]
)
def test_parse_tag_bits(text, parsed):
    assert parse_tag_bits(text) == parsed


@pytest.mark.parametrize("text", ["", "x", "7@", "@3", "7@-1", "-7", "7.5", "7@5@3", "0x7", "0", "17", "8 @ 56"])
def test_parse_tag_bits_refuses_bad_text(text):
    one_line_usage_error(lambda: parse_tag_bits(text), "tag_bits")


def test_tag_bits_overlapping_the_mask_position_are_refused():
    values = uniform_values(1, 100)
    one_line_usage_error(
        lambda: tag_tests(values, 64, "mask", MASK16, 8, 8), "overlap", "bits 0..15", "mask", "SHIFT 16-56"
    )
    # just above the position bits is fine
    assert the_test(values, 64, "mask", MASK16, 8, 16).details["tag_shift"] == 16


def test_tag_bits_overlapping_the_high_position_are_refused():
    one_line_usage_error(lambda: check_tag_layout(32, "high", 1 << 10, 7), "overlap", "bits 22..31", "SHIFT 0-15")


def test_range_default_top_tag_is_refused():
    # range keeps the order of the values: its position is the top bits
    one_line_usage_error(lambda: check_tag_layout(64, "range", 1000, 7), "overlap", "bits 54..63", "SHIFT 0-47")


def test_mod_with_a_power_of_two_factor_fixes_the_low_bits():
    one_line_usage_error(lambda: check_tag_layout(64, "mod", 3 << 12, 4, 0), "overlap", "bits 0..11")
    assert check_tag_layout(64, "mod", 3 << 12, 4, 12).tag_shift == 12


def test_mod_table_too_large_for_a_32_bit_tag_is_refused():
    # 5·10^7 buckets leave about 86 values of a 32-bit hash per bucket: too few for 128 tags
    one_line_usage_error(lambda: check_tag_layout(32, "mod", 50_000_000, 7), "nearly fixed", "no SHIFT works")


@pytest.mark.parametrize(
    ("arguments", "words"),
    [
        ((64, "mask", 16, 0), ("1 to 16",)),
        ((64, "mask", 16, 17), ("1 to 16",)),
        ((64, "mask", 16, True), ("whole number",)),
        ((64, "mask", 16, 7, -1), ("SHIFT",)),
        ((32, "mask", 16, 8, 25), ("do not fit in a 32-bit", "SHIFT 4-24")),
        ((64, "mask", 16, 8, 57), ("do not fit in a 64-bit",)),
        ((48, "mask", 16, 7), ("width",)),
        ((64, "cuckoo", 16, 7), ("scheme",)),
        ((64, "mask", 1000, 7), ("power-of-two",)),
    ],
)
def test_bad_layouts_are_refused(arguments, words):
    values = uniform_values(2, 10)
    one_line_usage_error(lambda: tag_tests(values, *arguments), *words)
