"""Output-bit checks: the ``BitCounts`` accumulator, its kernel, and the ``bit_bias`` / ``bit_correlation`` tests."""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest
from scipy import integrate, stats

from hashaudit.errors import MergeError, UsageError
from hashaudit.hashes.registry import get_hash
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats import bits
from hashaudit.stats.bits import BitCounts, bit_tests, expected_max_abs_normal


def random_values(rng: np.random.Generator, n: int, width: int) -> np.ndarray:
    if width == 128:
        return rng.integers(0, 2**64, size=(n, 2), dtype=np.uint64)
    return rng.integers(0, 2**width, size=n, dtype=np.uint64)


def reference_counts(values: np.ndarray, width: int) -> tuple[np.ndarray, np.ndarray]:
    """Plain numpy: unpack every bit (bit j = (word >> j) & 1, low word first) and form X^T X."""
    words = values.reshape(len(values), 2 if width == 128 else 1)
    shifts = np.arange(64, dtype=np.uint64)
    columns = [((words[:, w][:, None] >> shifts) & np.uint64(1)) for w in range(words.shape[1])]
    matrix = np.concatenate(columns, axis=1)[:, :width].astype(np.int64)
    return matrix.sum(axis=0), matrix.T @ matrix


def by_name(tests):
    return {t.name: t for t in tests}


class TestBitCounts:
    width = 64
    n = 3001  # not a multiple of the 64-value blocks of the kernel

    @pytest.fixture
    def values(self):
        return random_values(np.random.default_rng(20240611 + self.width), self.n, self.width)

    def make(self) -> BitCounts:
        return BitCounts("h", 0, self.width)

    def test_counts_match_an_independent_reference(self, values):
        result = self.make().update(values).result()
        ones, both = reference_counts(values, self.width)
        assert result.keys == self.n
        np.testing.assert_array_equal(result.ones, ones)
        np.testing.assert_array_equal(result.both, both)
        np.testing.assert_array_equal(np.diag(result.both), result.ones)

    @pytest.mark.parametrize("size", [0, 1, 63, 64, 65, 130])
    def test_block_edges_match_the_reference(self, values, size):
        result = self.make().update(values[:size]).result()
        ones, both = reference_counts(values[:size], self.width)
        assert result.keys == size
        np.testing.assert_array_equal(result.ones, ones)
        np.testing.assert_array_equal(result.both, both)

    @pytest.mark.parametrize("chunk", [1, 2, 50, n, n + 42])
    def test_chunking_does_not_change_the_result(self, values, chunk):
        acc = self.make()
        for start in range(0, len(values), chunk):
            acc.update(values[start : start + chunk])
        assert acc == self.make().update(values)
        assert acc.result().keys == self.n

    def test_merge_of_partitions_equals_one_pass(self, values):
        parts = [self.make().update(p) for p in np.array_split(values, 7)]
        left = parts[0].copy()
        for part in parts[1:]:
            left.merge(part)
        right = parts[-1].copy()
        for part in reversed(parts[:-1]):
            right.merge(part)
        assert left == right == self.make().update(values)

    def test_merge_refuses_other_settings(self):
        with pytest.raises(MergeError, match="settings differ"):
            self.make().merge(BitCounts("h", 1, self.width))
        with pytest.raises(MergeError):
            self.make().merge(BitCounts("g", 0, self.width))
        other_width = 32 if self.width != 32 else 64
        with pytest.raises(MergeError):
            self.make().merge(BitCounts("h", 0, other_width))

    def test_copy_is_independent_and_pickles(self, values):
        acc = self.make().update(values)
        twin = acc.copy()
        twin.update(values[:5])
        assert twin != acc
        assert pickle.loads(pickle.dumps(acc)) == acc

    def test_result_is_frozen(self, values):
        result = self.make().update(values).result()
        with pytest.raises(ValueError):
            result.ones[0] = 5
        with pytest.raises(ValueError):
            result.both[0, 1] = 5

    def test_random_values_pass(self):
        values = random_values(np.random.default_rng(7 + self.width), 20_000, self.width)
        tests = by_name(bit_tests(self.make().update(values).result()))
        assert list(tests) == ["bit_bias", "bit_correlation"]
        for test in tests.values():
            assert test.p_upper > 1e-3 and test.p_lower > 1e-3, test
        assert tests["bit_bias"].expected == self.width
        assert tests["bit_correlation"].expected == self.width * (self.width - 1) // 2
        assert tests["bit_bias"].details["worst_bit_p_bonferroni"] > 1e-3
        assert tests["bit_correlation"].details["worst_pair_p_bonferroni"] > 1e-3
        # a random maximum sits near its expectation under the null
        for test in tests.values():
            assert 0.5 < test.effect.observed / test.effect.ideal < 2.0


class TestBitCounts32(TestBitCounts):
    width = 32

    def test_refuses_values_that_do_not_fit(self):
        with pytest.raises(UsageError, match="below 2\\^32"):
            self.make().update(np.array([1, 2**32], dtype=np.uint64))
        acc = self.make()
        with pytest.raises(UsageError):
            acc.update(np.array([2**63], dtype=np.uint64))
        assert acc.result().keys == 0  # a refused batch leaves the counts alone


class TestBitCounts128(TestBitCounts):
    width = 128

    def test_high_word_holds_bits_64_to_127(self):
        values = np.zeros((3, 2), dtype=np.uint64)
        values[:, 1] = np.uint64(1 << 5)  # bit 64 + 5 in every value
        values[0, 0] = np.uint64(1 << 63)
        result = self.make().update(values).result()
        assert result.ones[69] == 3 and result.ones[63] == 1 and result.ones.sum() == 4
        assert result.both[63, 69] == 1


@pytest.mark.parametrize(
    ("width", "values"),
    [
        (64, np.zeros((4, 2), dtype=np.uint64)),
        (128, np.zeros(4, dtype=np.uint64)),
        (64, np.zeros(4, dtype=np.int64)),
        (32, np.zeros(4, dtype=np.float64)),
        (128, np.zeros((4, 3), dtype=np.uint64)),
    ],
)
def test_update_refuses_wrong_shape_or_type(width, values):
    with pytest.raises(UsageError):
        BitCounts("h", 0, width).update(values)


@pytest.mark.parametrize("width", [16, 48, 256, True])
def test_refuses_other_widths(width):
    with pytest.raises(UsageError, match="32, 64 or 128"):
        BitCounts("h", 0, width)


def test_no_keys_no_tests():
    assert bit_tests(BitCounts("h", 0, 64).result()) == []


def test_planted_biased_bit_is_named():
    rng = np.random.default_rng(5)
    values = random_values(rng, 50_000, 64)
    bit5 = rng.random(50_000) < 0.55
    values = (values & ~np.uint64(1 << 5)) | (bit5.astype(np.uint64) << np.uint64(5))
    tests = by_name(bit_tests(BitCounts("h", 0, 64).update(values).result()))
    bias = tests["bit_bias"]
    # one bit at 0.55 adds about n·(2·0.05)^2 = 500 to a χ²(64) statistic
    assert bias.p_upper < 1e-30
    assert bias.details["worst_bit"] == 5
    assert bias.details["worst_bit_ones_fraction"] == pytest.approx(0.55, abs=0.005)
    assert bias.details["worst_bit_p_bonferroni"] < 1e-30
    assert bias.effect.name == "bit_bias_max"
    assert bias.effect.value == pytest.approx(0.05, abs=0.005)
    assert bias.effect.value > 5 * bias.effect.ideal
    # a biased bit is still independent of the others: phi corrects for the margins
    assert tests["bit_correlation"].p_upper > 1e-3


def test_planted_correlation_is_named():
    rng = np.random.default_rng(6)
    n = 50_000
    values = random_values(rng, n, 64)
    copy = rng.random(n) < 0.3
    bit7 = (values >> np.uint64(7)) & np.uint64(1)
    values[copy] = (values[copy] & ~np.uint64(1 << 12)) | (bit7[copy] << np.uint64(12))
    tests = by_name(bit_tests(BitCounts("h", 0, 64).update(values).result()))
    corr = tests["bit_correlation"]
    # P(both) = 0.3·1/2 + 0.7·1/4 = 0.325, so phi = (0.325 - 0.25) / 0.25 = 0.3 (derived by hand)
    assert corr.p_upper < 1e-30
    assert corr.details["worst_pair"] == (7, 12)
    assert corr.details["worst_pair_phi"] == pytest.approx(0.3, abs=0.02)
    assert corr.details["worst_pair_p_bonferroni"] < 1e-30
    assert corr.effect.name == "bit_correlation_max"
    assert corr.effect.value > 10 * corr.effect.ideal
    assert tests["bit_bias"].p_upper > 1e-3


def test_identity_of_sequential_integers_shows_its_structure():
    # 0 .. 2^16 - 1 enumerates every 16-bit pattern once (exact by construction): bits 0-15 are balanced and
    # pairwise independent, bits 16-63 are always 0.
    n = 2**16
    hashes = get_hash("identity").hash_batch(KeyBatch.from_uint64(np.arange(n, dtype=np.uint64)))
    result = BitCounts("identity", 0, 64).update(hashes).result()
    assert np.all(result.ones[:16] == n // 2) and np.all(result.ones[16:] == 0)
    tests = by_name(bit_tests(result))
    bias = tests["bit_bias"]
    assert bias.statistic == 48 * n  # z_j^2 = n for each of the 48 constant bits, 0 for the others
    assert bias.p_upper == 0.0
    assert bias.details["worst_bit"] == 16  # first of the constant bits
    assert bias.details["worst_bit_ones_fraction"] == 0.0
    assert bias.effect.value == 0.5
    corr = tests["bit_correlation"]
    assert corr.details["undefined_pairs"] == 2016 - 120  # only pairs among the 16 live bits have a phi
    assert corr.expected == 120
    assert corr.statistic == 0.0 and corr.effect.value == 0.0
    assert corr.p_upper == 1.0 and corr.p_lower < 1e-30  # too regular: informational, never a failure


def test_every_bit_constant():
    tests = by_name(bit_tests(BitCounts("h", 0, 32).update(np.zeros(500, dtype=np.uint64)).result()))
    assert tests["bit_bias"].p_upper == 0.0
    corr = tests["bit_correlation"]
    assert corr.expected == 0 and corr.details["worst_pair"] is None
    assert corr.p_upper == corr.p_lower == 1.0


@pytest.mark.parametrize("count", [1, 2, 64, 2016])
def test_expected_max_abs_normal(count):
    if count == 1:
        expected = math.sqrt(2.0 / math.pi)  # mean of the half-normal law (standard)
    elif count == 2:
        # derived by hand in polar coordinates: E r = sqrt(pi/2) and E max(|cos t|, |sin t|) = 2 sqrt(2) / pi
        expected = 2.0 / math.sqrt(math.pi)
    else:
        # the density form E max = ∫ x k f(x) F(x)^(k-1) dx with f, F of |Z| from scipy.stats.halfnorm
        expected = integrate.quad(
            lambda x: x * count * stats.halfnorm.pdf(x) * stats.halfnorm.cdf(x) ** (count - 1), 0, 40, limit=200
        )[0]
    assert expected_max_abs_normal(count) == pytest.approx(expected, rel=1e-7)
    assert expected_max_abs_normal(0) == 0.0


def test_null_rejection_rate_is_nominal():
    # 200 replicates of 2000 uniform 64-bit values. Under the null each p_upper is uniform, so the number below
    # 0.01 is Binomial(200, 0.01); P(X >= 7) = 0.0045 (scipy.stats.binom.sf(6, 200, 0.01)).
    rng = np.random.default_rng(2024)
    replicates, n = 200, 2000
    p = {"bit_bias": [], "bit_correlation": []}
    p_low = {"bit_bias": [], "bit_correlation": []}
    worst = {"bit_bias": [], "bit_correlation": []}
    ratio = {"bit_bias": [], "bit_correlation": []}
    for _ in range(replicates):
        for test in bit_tests(BitCounts("h", 0, 64).update(random_values(rng, n, 64)).result()):
            p[test.name].append(test.p_upper)
            p_low[test.name].append(test.p_lower)
            key = "worst_bit_p_bonferroni" if test.name == "bit_bias" else "worst_pair_p_bonferroni"
            worst[test.name].append(test.details[key])
            ratio[test.name].append(test.effect.observed / test.effect.ideal)
    assert stats.binom.sf(6, replicates, 0.01) < 0.005
    for name in p:
        assert sum(x < 0.01 for x in p[name]) <= 6, name
        assert sum(x < 0.01 for x in p_low[name]) <= 6, name
        assert sum(x < 0.01 for x in worst[name]) <= 6, name  # Bonferroni is conservative
        # the χ² law fits the whole range of p-values, not only the 1 % tail
        assert stats.kstest(p[name], "uniform").pvalue > 1e-3, name
        # the effect's ideal is the mean of the largest deviation under the null
        assert np.mean(ratio[name]) == pytest.approx(1.0, abs=0.05), name


def test_few_keys_use_simulated_nulls_with_nominal_size():
    # Below EXACT_BELOW_KEYS keys the χ² laws are poor; the simulated nulls must still give valid p-values.
    assert bits.EXACT_BELOW_KEYS > 40
    rng = np.random.default_rng(99)
    counts = {"bit_bias": 0, "bit_correlation": 0}
    for _ in range(200):
        for test in bit_tests(BitCounts("h", 0, 32).update(random_values(rng, 40, 32)).result(), seed=3):
            counts[test.name] += test.p_upper < 0.01
            assert "seed 3" in test.method
    # Binomial(200, 0.01) exceeds 6 with probability 0.0045 (scipy.stats.binom.sf(6, 200, 0.01))
    assert counts["bit_bias"] <= 6 and counts["bit_correlation"] <= 6


def test_few_keys_planted_defects_are_found():
    rng = np.random.default_rng(17)
    n = 60
    values = random_values(rng, n, 64) | np.uint64(1 << 3)  # bit 3 always set
    bias = by_name(bit_tests(BitCounts("h", 0, 64).update(values).result()))["bit_bias"]
    # the statistic gains z^2 = 60 over a null of mean 64 and sd ~11: beyond every one of the 9999 draws
    assert bias.p_upper < 1e-3 and bias.details["worst_bit"] == 3
    assert bias.details["worst_bit_p_bonferroni"] == pytest.approx(64 * 2 * 0.5**60)  # exact binomial tail

    values = random_values(rng, n, 64)
    values = (values & np.uint64(0xFFFFFFFF)) | (values << np.uint64(32))  # high half copies low half
    corr = by_name(bit_tests(BitCounts("h", 0, 64).update(values).result()))["bit_correlation"]
    assert corr.p_upper == pytest.approx(1 / (bits.PAIR_DRAWS + 1))  # beyond every simulated draw
    i, j = corr.details["worst_pair"]
    assert j == i + 32 and corr.details["worst_pair_phi"] == pytest.approx(1.0)
    # Fisher's exact test of a perfect 2×2 table with margins (a, a): 1 / C(n, a) per tail
    a = int(((values >> np.uint64(i)) & np.uint64(1)).sum())
    assert corr.details["worst_pair_p_bonferroni"] == pytest.approx(min(1.0, 2016 * 2 / math.comb(n, a)))


def test_simulated_nulls_are_reproducible():
    values = random_values(np.random.default_rng(4), 30, 64)
    result = BitCounts("h", 0, 64).update(values).result()
    assert bit_tests(result, seed=1) == bit_tests(result, seed=1)
