"""Tests of fit on bucket counts: null calibration with fixed seeds, and power against planted skews."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from hashaudit.stats.buckets import BucketCounts
from hashaudit.stats.fit import bucket_tests, occupancy_table

CHECKS = ["chi_square", "g_test", "empty_buckets", "colliding_pairs", "max_load"]


def counts_from_uniform(m: int, n: int, seed: int):
    """Counts of n ideal keys (uniform random 64-bit values) in m buckets by mod."""
    rng = np.random.default_rng(seed)
    acc = BucketCounts("ideal", 0, "mod", m, 64)
    acc.update(rng.integers(0, 2**64, size=n, dtype=np.uint64))
    return acc.result()


def by_name(tests):
    return {t.name: t for t in tests}


@pytest.mark.parametrize(
    ("m", "n"),
    [
        (16, 40),  # small table, sparse: simulated null
        pytest.param(200, 300, marks=pytest.mark.slow),  # small sparse: simulated null (7 s; (16, 40) stays fast)
        (4096, 2048),  # large sparse: exact moments / Morris
        (4096, 40_000),  # dense: chi-square(m-1)
        (65536, 30_000),  # very sparse: Poisson for pairs
    ],
)
def test_null_p_values_are_roughly_uniform(m, n):
    """Under uniform hashing the upper-tail p-values of each check spread over (0, 1): over 40 independent
    tables (fixed seeds) none is below 1e-4 (P = 0.004 for 40 uniform draws) and, for the continuous
    statistics, between 10 and 30 of 40 fall below 0.5 (P(outside) = 0.002 under Binomial(40, 1/2))."""
    ps = {name: [] for name in CHECKS}
    for seed in range(40):
        for t in bucket_tests(counts_from_uniform(m, n, 1000 + seed), seed=seed):
            ps[t.name].append(t.p_upper)
    for name, values in ps.items():
        values = np.array(values)
        assert values.min() > 1e-4, (name, values.min())
        discrete = name == "max_load" or (name == "empty_buckets" and n / m > 3)  # few distinct values
        if not discrete:
            below = int((values < 0.5).sum())
            assert 10 <= below <= 30, (name, below)


def test_simulated_null_chi_square_matches_the_chi_square_law():
    """For a dense small table the simulated p-value and chi2(m-1) agree (scipy.stats.chisquare)."""
    result = counts_from_uniform(16, 4000, 3)
    t = by_name(bucket_tests(result))["chi_square"]
    assert "simulated" in t.method
    reference = stats.chisquare(result.counts).pvalue
    assert t.p_upper == pytest.approx(reference, abs=0.02)


def test_dense_chi_square_equals_scipy():
    result = counts_from_uniform(512, 20_000, 5)
    t = by_name(bucket_tests(result))
    reference = stats.chisquare(result.counts)
    assert t["chi_square"].statistic == pytest.approx(reference.statistic, rel=1e-9)
    assert t["chi_square"].p_upper == pytest.approx(reference.pvalue, rel=1e-6)
    assert t["colliding_pairs"].p_upper == t["chi_square"].p_upper  # affine in X^2: the same test
    g_reference = stats.power_divergence(result.counts, lambda_="log-likelihood")
    assert t["g_test"].statistic == pytest.approx(g_reference.statistic, rel=1e-9)
    # with Williams's (1976) correction q = 1 + (m + 1)/(6n): p = chi2.sf(G / q, m - 1)
    q = 1 + (512 + 1) / (6 * 20_000)
    assert t["g_test"].p_upper == pytest.approx(stats.chi2.sf(g_reference.statistic / q, 511), rel=1e-6)


def test_g_null_mean_for_large_tables_matches_simulation():
    """For m = 2^16 at load 5, chi2(m - 1) with Williams's correction misplaces G's mean by about 2 sd; the exact
    mean used instead agrees with a simulation (numpy multinomial draws, fixed seed)."""
    m, n = 1 << 16, 5 << 16
    rng = np.random.default_rng(17)
    simulated = []
    for _ in range(30):
        c = rng.multinomial(n, np.full(m, 1.0 / m)).astype(np.float64)
        c = c[c > 0]
        simulated.append(2.0 * np.sum(c * np.log(c / (n / m))))
    t = by_name(bucket_tests(counts_from_uniform(m, n, 3)))
    spread = np.std(simulated) / np.sqrt(len(simulated))
    assert abs(t["g_test"].expected - np.mean(simulated)) < 4 * spread


def test_one_collision_gets_the_birthday_p_value():
    """Ten keys in 2^20 buckets with one collision: P(at least one pair) = 1 - Q(m, 10) = 4.3e-5 is the
    right p-value (birthday bound, Feller vol. 1 §II.3), and every rare-collision check agrees."""
    counts = np.zeros(1 << 20, dtype=np.int64)
    counts[:8] = 1
    counts[8] = 2
    from hashaudit.stats.buckets import BucketCountsResult

    result = BucketCountsResult("h", 0, "mod", 1 << 20, 64, 10, counts)
    t = by_name(bucket_tests(result))
    expected_p = 1 - np.prod(1 - np.arange(10) / (1 << 20))
    for name in ("chi_square", "colliding_pairs", "g_test", "empty_buckets"):
        assert t[name].p_upper == pytest.approx(expected_p, rel=0.01), name


def test_planted_skew_is_detected_by_every_check():
    """A quarter of the keys forced into 16 buckets of 4096."""
    rng = np.random.default_rng(9)
    n, m = 20_000, 4096
    values = rng.integers(0, 2**64, size=n, dtype=np.uint64)
    values[: n // 4] = rng.integers(0, 16, size=n // 4).astype(np.uint64)
    acc = BucketCounts("planted", 0, "mod", m, 64).update(values)
    t = by_name(bucket_tests(acc.result()))
    for name in CHECKS:
        assert t[name].p_upper < 1e-10, name
    assert t["colliding_pairs"].effect.value > 1.0  # chained lookups cost more than twice the ideal
    assert t["max_load"].effect.value > 20


def test_too_regular_counts_show_in_the_lower_tail():
    """Sequential integers under mod m fill every bucket evenly: the lower tail is tiny, the upper is 1."""
    acc = BucketCounts("identity", 0, "mod", 1000, 64).update(np.arange(50_000, dtype=np.uint64))
    t = by_name(bucket_tests(acc.result()))
    assert t["chi_square"].statistic == 0
    assert t["chi_square"].p_lower < 1e-100 and t["chi_square"].p_upper == pytest.approx(1.0)
    assert t["colliding_pairs"].p_lower < 1e-100


def test_chained_lookup_cost_identity():
    """Mean successful-search cost of a chained table = 1 + colliding pairs / n (Knuth TAOCP vol. 3 §6.4)."""
    counts_result = counts_from_uniform(1000, 5000, 13)
    t = by_name(bucket_tests(counts_result))
    c = counts_result.counts
    # direct: key j of a chain is found after j probes, so a chain of c costs c(c+1)/2 in total
    direct = float((c * (c + 1) / 2).sum()) / c.sum()
    assert t["colliding_pairs"].effect.observed == pytest.approx(direct)
    assert t["colliding_pairs"].effect.ideal == pytest.approx(1 + 4999 / 2000)


def test_occupancy_table_sums():
    result = counts_from_uniform(4096, 10_000, 21)
    table = occupancy_table(result)
    assert sum(table["observed"]) + table["observed_above"] == 4096
    assert sum(table["expected"]) + table["expected_above"] == pytest.approx(4096, rel=1e-9)
    # binomial expectation of empty buckets: m (1 - 1/m)^n
    assert table["expected"][0] == pytest.approx(4096 * (1 - 1 / 4096) ** 10_000, rel=1e-9)


@pytest.mark.parametrize(("m", "n"), [(4096, 40_960), (4096, 2048), (1 << 16, 300)])
def test_null_p_values_pass_a_kolmogorov_smirnov_test(m, n):
    """Upper-tail p-values of the continuous bucket statistics over 60 null tables (fixed seeds) are uniform:
    scipy.stats.kstest against U(0, 1) does not reject at 0.001. (With n = 300 in 2^16 buckets the statistics are
    discrete — Poisson — so only a lower bound on their p-values is checked there.)"""
    ps: dict[str, list[float]] = {"chi_square": [], "g_test": []}
    for seed in range(60):
        for t in bucket_tests(counts_from_uniform(m, n, 5000 + seed), seed=seed):
            if t.name in ps:
                ps[t.name].append(t.p_upper)
    for name, values in ps.items():
        if n / m < 0.01:
            assert min(values) > 1e-3, name
        else:
            assert stats.kstest(values, "uniform").pvalue > 1e-3, name


@pytest.mark.parametrize("width", [32, 64, 128])
@pytest.mark.parametrize("scheme", ["mask", "mod", "high", "range"])
def test_occupied_buckets_alone_give_the_same_tests(scheme, width):
    # the neighbour families count a few keys in a large table by their occupied buckets only: same statistics,
    # same p-values, bit for bit, as counting every bucket
    from hashaudit.stats.buckets import BucketCounts
    from hashaudit.stats.fit import occupied_bucket_tests, occupied_counts

    rng = np.random.default_rng(11)
    shape = (3_000, 2) if width == 128 else (3_000,)
    values = rng.integers(0, 2**64 - 1, size=shape, dtype=np.uint64, endpoint=True)
    if width == 32:
        values &= np.uint64(0xFFFFFFFF)
    buckets = (1 << 16) if scheme in ("mask", "high") else 65_521
    full = BucketCounts("h", 0, scheme, buckets, width).update(values).result()
    occupied = occupied_counts(values, scheme, buckets, width)
    assert np.array_equal(occupied, full.counts[full.counts > 0])
    assert occupied_bucket_tests(occupied, len(values), buckets) == bucket_tests(full)
