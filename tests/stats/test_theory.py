"""Closed forms of simple uniform hashing, checked against values from outside the project.

Sources of expected values: handbook numbers (birthday problem), mpmath at 60-120 significant digits,
exact enumeration of all m**n hash assignments with rational arithmetic, scipy.stats, and Monte Carlo
simulation with fixed seeds (tolerances set by the standard error of the simulation).
"""

from __future__ import annotations

import itertools
import json
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from scipy import stats

from hashaudit.errors import UsageError
from hashaudit.stats import _numeric
from hashaudit.stats.theory import (
    CapacityPlan,
    chi_square_moments,
    expected_colliding_pairs,
    expected_empty_buckets,
    expected_occupancy,
    expected_probes,
    keys_for_even_odds,
    log_p_no_collision,
    p_no_collision,
    plan_capacity,
    var_colliding_pairs,
    var_empty_buckets,
)

# --------------------------------------------------------------------------------------------------------
# Reference helpers (independent of the code under test)
# --------------------------------------------------------------------------------------------------------


def mp_log_q(m: int, n: int, digits: int = 60) -> mpmath.mpf:
    """log Q(m, n) = log m! - log (m-n)! - n log m with mpmath (m = 2**64 loses ~21 of the digits)."""
    with mpmath.workdps(digits):
        big_m = mpmath.mpf(m)
        return mpmath.loggamma(big_m + 1) - mpmath.loggamma(big_m - n + 1) - n * mpmath.log(big_m)


def exact_moments(m: int, n: int) -> dict[str, tuple[Fraction, Fraction]]:
    """Exact mean and variance of empty buckets, colliding pairs and Pearson's X² over all m**n assignments."""
    values: dict[str, list[Fraction]] = {"empty": [], "pairs": [], "chi_square": []}
    for assignment in itertools.product(range(m), repeat=n):
        counts = [assignment.count(bucket) for bucket in range(m)]
        values["empty"].append(Fraction(counts.count(0)))
        values["pairs"].append(Fraction(sum(c * (c - 1) // 2 for c in counts)))
        values["chi_square"].append(Fraction(m, n) * sum(c * c for c in counts) - n)
    total = m**n
    moments = {}
    for name, sample in values.items():
        mean = sum(sample, Fraction(0)) / total
        moments[name] = (mean, sum(((x - mean) ** 2 for x in sample), Fraction(0)) / total)
    return moments


@pytest.fixture(scope="module")
def simulated_tables() -> dict[str, np.ndarray]:
    """20,000 tables of m = 200 buckets holding n = 300 uniformly hashed keys (seed 20240601)."""
    m, n, reps = 200, 300, 20_000
    rng = np.random.default_rng(20240601)
    empty, pairs, chi_square = [], [], []
    for _ in range(reps // 2000):
        keys = rng.integers(0, m, size=(2000, n)) + m * np.arange(2000)[:, None]
        counts = np.bincount(keys.ravel(), minlength=2000 * m).reshape(2000, m)
        empty.append((counts == 0).sum(axis=1))
        pairs.append((counts * (counts - 1) // 2).sum(axis=1))
        chi_square.append(m / n * (counts.astype(float) ** 2).sum(axis=1) - n)
    return {
        "m": np.array(m),
        "n": np.array(n),
        "empty": np.concatenate(empty).astype(float),
        "pairs": np.concatenate(pairs).astype(float),
        "chi_square": np.concatenate(chi_square),
    }


def assert_mean_and_variance_match(sample: np.ndarray, mean: float, variance: float) -> None:
    """Sample mean and variance within 5 standard errors of the claimed moments."""
    reps = sample.size
    assert abs(sample.mean() - mean) <= 5.0 * math.sqrt(variance / reps)
    centred = sample - sample.mean()
    sample_variance = float(centred @ centred) / (reps - 1)
    fourth = float(np.mean(centred**4))
    standard_error = math.sqrt(max(fourth - sample_variance**2, 0.0) / reps)
    assert abs(sample_variance - variance) <= 5.0 * standard_error


# --------------------------------------------------------------------------------------------------------
# Collisions
# --------------------------------------------------------------------------------------------------------


def test_birthday_problem_handbook_values() -> None:
    # 23 people, 365 days: P(shared birthday) = 0.507297 (the classic birthday problem, e.g. Feller vol. 1
    # ch. II.3, which prints 0.507; the six digits are the commonly quoted value, from memory).
    assert 1.0 - p_no_collision(365, 23) == pytest.approx(0.507297, abs=5e-7)
    # 22 people: 0.475695 (same source, from memory) - so 23 is the first group with even odds.
    assert 1.0 - p_no_collision(365, 22) == pytest.approx(0.475695, abs=5e-7)
    assert keys_for_even_odds(365) == 23
    assert keys_for_even_odds(365.0) == 23


def test_p_no_collision_small_edge_cases() -> None:
    assert p_no_collision(10, 0) == 1.0
    assert p_no_collision(10, 1) == 1.0
    assert p_no_collision(10, 11) == 0.0  # pigeonhole
    assert log_p_no_collision(10, 11) == -math.inf
    assert p_no_collision(1, 1) == 1.0
    assert p_no_collision(2, 2) == 0.5
    # 10!/10^10 = 0.00036288 exactly
    assert p_no_collision(10, 10) == pytest.approx(0.00036288, rel=1e-13)


@pytest.mark.parametrize("m", [2**32, 2**64, 10**6 + 3, 365])
def test_log_q_against_mpmath(m: int) -> None:
    for n in [2, 23, 1000, 2**16, 2**16 + 1, 77_163, 10**7, m // 2, m - 20, m - 1, m]:
        if not 2 <= n <= m:
            continue
        expected = mp_log_q(m, n)  # mpmath.loggamma at 60 digits
        assert log_p_no_collision(m, n) == pytest.approx(float(expected), rel=2e-14), n


def test_q_against_mpmath_direct_product() -> None:
    # The defining product prod_{i<n} (1 - i/m), multiplied out in 50-digit arithmetic.
    with mpmath.workdps(50):
        for m, n in [(2**32, 300), (2**64, 300), (1000, 40)]:
            product = mpmath.fprod(1 - mpmath.mpf(i) / m for i in range(n))
            assert p_no_collision(m, n) == pytest.approx(float(product), rel=1e-14)


@pytest.mark.parametrize("m", [2**32, 2**64, 10**6, 3 * 2**40 + 7])
def test_keys_for_even_odds_is_the_exact_boundary(m: int) -> None:
    n = keys_for_even_odds(m)
    half = mpmath.log(mpmath.mpf(0.5))
    # mpmath at 60 digits: Q(m, n-1) > 1/2 >= Q(m, n)
    assert mp_log_q(m, n - 1) > half >= mp_log_q(m, n)
    # and the asymptotic sqrt(2 m ln 2) (Feller vol. 1, ch. II.3) is within a couple of keys
    assert abs(n - math.sqrt(2.0 * m * math.log(2.0))) < 2.0


def test_keys_for_even_odds_tiny_tables() -> None:
    assert keys_for_even_odds(1) == 2  # the second key always collides
    assert keys_for_even_odds(2) == 2  # Q(2, 2) = 1/2 exactly
    assert keys_for_even_odds(3) == 3  # Q(3, 2) = 2/3, Q(3, 3) = 2/9


def test_colliding_pairs_moments_exact_enumeration() -> None:
    for m, n in [(3, 4), (4, 3), (2, 5), (5, 4)]:
        mean, variance = exact_moments(m, n)["pairs"]
        assert expected_colliding_pairs(m, n) == pytest.approx(float(mean), rel=1e-15)
        assert var_colliding_pairs(m, n) == pytest.approx(float(variance), rel=1e-15)


def test_colliding_pairs_moments_monte_carlo(simulated_tables: dict[str, np.ndarray]) -> None:
    m, n = int(simulated_tables["m"]), int(simulated_tables["n"])
    assert_mean_and_variance_match(simulated_tables["pairs"], expected_colliding_pairs(m, n), var_colliding_pairs(m, n))


def test_colliding_pairs_huge_table() -> None:
    # C(n,2)/m and C(n,2)(m-1)/m^2 with exact rationals (n = 2**40, m = 2**64)
    n, m = 2**40, 2**64
    pairs = Fraction(n * (n - 1) // 2)
    assert expected_colliding_pairs(m, n) == pytest.approx(float(pairs / m), rel=1e-15)
    assert var_colliding_pairs(m, n) == pytest.approx(float(pairs * (m - 1) / m**2), rel=1e-15)


# --------------------------------------------------------------------------------------------------------
# Empty buckets
# --------------------------------------------------------------------------------------------------------


def test_empty_buckets_moments_exact_enumeration() -> None:
    for m, n in [(3, 4), (4, 3), (2, 5), (5, 4), (4, 1)]:
        mean, variance = exact_moments(m, n)["empty"]
        assert expected_empty_buckets(m, n) == pytest.approx(float(mean), rel=1e-14)
        assert var_empty_buckets(m, n) == pytest.approx(float(variance), rel=1e-12, abs=1e-15)


def test_empty_buckets_moments_monte_carlo(simulated_tables: dict[str, np.ndarray]) -> None:
    m, n = int(simulated_tables["m"]), int(simulated_tables["n"])
    assert_mean_and_variance_match(simulated_tables["empty"], expected_empty_buckets(m, n), var_empty_buckets(m, n))


@pytest.mark.parametrize(
    ("m", "n"),
    [
        (10**6, 10**4),  # exact series side of the switch
        (10**6, 10**4 + 1),  # rearranged closed form side
        (10**6, 10**5),
        (2**32, 2**33),
        (2**64, 10**6),  # the three textbook terms are ~1e38 and cancel to ~5e-8
        (2**64, 2**40),
        (1000, 11),
        (2, 500),
    ],
)
def test_empty_buckets_moments_against_mpmath(m: int, n: int) -> None:
    # The textbook formulas evaluated with 120 digits, where the cancellation is harmless.
    with mpmath.workdps(120):
        big_m = mpmath.mpf(m)
        a = (1 - 1 / big_m) ** n
        b = (1 - 2 / big_m) ** n
        mean = big_m * a
        variance = big_m * (big_m - 1) * b + big_m * a - big_m**2 * a**2
    assert expected_empty_buckets(m, n) == pytest.approx(float(mean), rel=1e-13)
    assert var_empty_buckets(m, n) == pytest.approx(float(variance), rel=1e-13)


def test_empty_buckets_edge_cases() -> None:
    assert expected_empty_buckets(7, 0) == 7.0
    assert var_empty_buckets(7, 0) == 0.0
    assert var_empty_buckets(7, 1) == 0.0  # exactly six empty
    assert expected_empty_buckets(1, 5) == 0.0
    assert var_empty_buckets(1, 5) == 0.0


# --------------------------------------------------------------------------------------------------------
# Pearson's statistic
# --------------------------------------------------------------------------------------------------------


def test_chi_square_moments_exact_enumeration() -> None:
    for m, n in [(3, 4), (4, 3), (2, 5), (5, 4), (3, 1)]:
        mean, variance = exact_moments(m, n)["chi_square"]
        moments = chi_square_moments(m, n)
        assert moments.mean == float(mean)
        assert moments.variance == pytest.approx(float(variance), rel=1e-15, abs=1e-15)


def test_chi_square_moments_monte_carlo(simulated_tables: dict[str, np.ndarray]) -> None:
    m, n = int(simulated_tables["m"]), int(simulated_tables["n"])
    mean, variance = chi_square_moments(m, n)
    assert_mean_and_variance_match(simulated_tables["chi_square"], mean, variance)


def test_chi_square_moments_large_sample_limit() -> None:
    # As n grows the statistic tends to chi-square(m - 1): mean m-1, variance 2(m-1) (scipy.stats.chi2).
    mean, variance = chi_square_moments(1000, 10**12)
    assert mean == stats.chi2(999).mean()
    assert variance == pytest.approx(stats.chi2(999).var(), rel=1e-11)
    with pytest.raises(UsageError):
        chi_square_moments(10, 0)


# --------------------------------------------------------------------------------------------------------
# Occupancy
# --------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("m", "n"), [(100, 250), (7, 1000), (10**4, 100), (2, 3)])
def test_expected_occupancy_against_scipy(m: int, n: int) -> None:
    got = expected_occupancy(m, n, 40)
    expected = m * stats.binom.pmf(np.arange(41), n, 1.0 / m)  # scipy.stats.binom
    assert got.shape == (41,)
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-300)


def test_expected_occupancy_huge_table_against_mpmath() -> None:
    m, n = 2**64, 2**40
    got = expected_occupancy(m, n, 6)
    with mpmath.workdps(60):
        p = mpmath.mpf(1) / m
        for k in range(7):
            expected = m * mpmath.binomial(n, k) * p**k * (1 - p) ** (n - k)
            assert got[k] == pytest.approx(float(expected), rel=1e-13)


def test_expected_occupancy_sums_and_edges() -> None:
    occupancy = expected_occupancy(50, 120, 120)
    assert occupancy.sum() == pytest.approx(50.0, rel=1e-13)  # every bucket holds some k
    assert occupancy @ np.arange(121) == pytest.approx(120.0, rel=1e-13)  # every key is somewhere
    assert list(expected_occupancy(5, 0, 2)) == [5.0, 0.0, 0.0]
    assert list(expected_occupancy(1, 2, 3)) == [0.0, 0.0, 1.0, 0.0]
    assert list(expected_occupancy(1, 9, 3)) == [0.0, 0.0, 0.0, 0.0]


# --------------------------------------------------------------------------------------------------------
# Probes
# --------------------------------------------------------------------------------------------------------


def test_expected_probes_textbook_values_at_half_load() -> None:
    probes = expected_probes(0.5)
    assert set(probes) == {"chaining", "linear", "quadratic", "double"}
    # Knuth, TAOCP vol. 3, §6.4, table of average probes at load 0.5 (from memory): linear probing
    # 1.50 / 2.50, uniform (double) hashing 1.39 / 2.00, secondary clustering 1.44 / 2.19.
    assert probes["linear"] == {"hit": 1.5, "miss": 2.5}
    assert probes["double"]["miss"] == 2.0
    assert probes["double"]["hit"] == pytest.approx(2.0 * math.log(2.0), rel=1e-15)  # 1.386
    assert probes["quadratic"]["hit"] == pytest.approx(1.44, abs=0.005)
    assert probes["quadratic"]["miss"] == pytest.approx(2.19, abs=0.005)
    # Separate chaining: 1 + a/2 = 1.25 and a + e^-a = 1.1065 (Knuth §6.4, Algorithm C analysis).
    assert probes["chaining"]["hit"] == 1.25
    assert probes["chaining"]["miss"] == pytest.approx(0.5 + math.exp(-0.5), rel=1e-15)


def test_expected_probes_limits() -> None:
    empty = expected_probes(0)
    assert all(value == 1.0 for costs in empty.values() for value in costs.values())
    tiny = expected_probes(1e-12)
    assert all(value == pytest.approx(1.0, abs=1e-11) for costs in tiny.values() for value in costs.values())
    full = expected_probes(1.0)
    for scheme in ("linear", "quadratic", "double"):
        assert full[scheme] == {"hit": math.inf, "miss": math.inf}
    assert expected_probes(2.0)["chaining"] == {"hit": 2.0, "miss": 2.0 + math.exp(-2.0)}
    for bad in (-0.1, math.nan, math.inf, "0.5", None):
        with pytest.raises(UsageError):
            expected_probes(bad)  # type: ignore[arg-type]


def _simulate_table(m: int, load: float, rng: np.random.Generator) -> dict[str, dict[str, float]]:
    """Probe counts measured on one table of m slots filled to `load` with random hash values."""
    n = int(load * m)
    mask = m - 1
    homes = rng.integers(0, m, size=n).tolist()
    steps = (2 * rng.integers(0, m // 2, size=n) + 1).tolist()  # odd steps: a full cycle mod 2**k
    result = {}

    # Linear probing: a hit costs what the insertion cost; a miss from slot s runs to the next empty slot.
    used = [False] * m
    hit_total = 0
    for home in homes:
        slot, probes = home, 1
        while used[slot]:
            slot, probes = (slot + 1) & mask, probes + 1
        used[slot] = True
        hit_total += probes
    run = [0] * m
    following = 0
    for slot in range(2 * m - 1, -1, -1):  # two passes make the wrap-around right
        following = 0 if not used[slot & mask] else following + 1
        run[slot & mask] = following
    result["linear"] = {"hit": hit_total / n, "miss": 1.0 + sum(run) / m}

    # Double hashing (the uniform-probing model) and quadratic probing with triangular offsets.
    for scheme in ("double", "quadratic"):
        used = [False] * m
        hit_total = 0
        for home, step in zip(homes, steps, strict=True):
            slot, probes = home, 1
            while used[slot]:
                slot = (slot + step) & mask if scheme == "double" else (home + probes * (probes + 1) // 2) & mask
                probes += 1
            used[slot] = True
            hit_total += probes
        miss_total = 0
        trials = 20_000
        for home, step in zip(
            rng.integers(0, m, trials).tolist(), (2 * rng.integers(0, m // 2, trials) + 1).tolist(), strict=True
        ):
            slot, probes = home, 1
            while used[slot]:
                slot = (slot + step) & mask if scheme == "double" else (home + probes * (probes + 1) // 2) & mask
                probes += 1
            miss_total += probes
        result[scheme] = {"hit": hit_total / n, "miss": miss_total / trials}

    # Separate chaining, new keys appended: a hit inspects its position; a miss a whole list (1 if empty).
    lengths = np.bincount(np.array(homes), minlength=m)
    positions = sum(length * (length + 1) // 2 for length in lengths.tolist())
    result["chaining"] = {"hit": positions / n, "miss": float(np.maximum(lengths, 1).mean())}
    return result


@pytest.mark.parametrize("load", [0.5, 0.75])
def test_expected_probes_against_simulation(load: float) -> None:
    # Monte Carlo: four tables of 65,536 slots (seed 7, spawned streams), averaged, because one linearly probed
    # table at high load is dominated by a few long clusters. The formulas are large-table limits; double
    # hashing and triangular quadratic probing are the usual stand-ins for the uniform and the
    # secondary-clustering models.
    tables = [_simulate_table(2**16, load, np.random.default_rng(seed)) for seed in np.random.SeedSequence(7).spawn(4)]
    predicted = expected_probes(load)
    for scheme in ("chaining", "linear", "double", "quadratic"):
        for kind in ("hit", "miss"):
            simulated = float(np.mean([table[scheme][kind] for table in tables]))
            assert simulated == pytest.approx(predicted[scheme][kind], rel=0.03), (scheme, kind)


# --------------------------------------------------------------------------------------------------------
# Capacity plan
# --------------------------------------------------------------------------------------------------------


def test_plan_capacity_from_buckets() -> None:
    plan = plan_capacity(1000, buckets=2048)
    assert isinstance(plan, CapacityPlan)
    assert plan.keys == 1000 and plan.buckets == 2048
    assert plan.load_factor == 1000 / 2048
    assert plan.p_no_collision == p_no_collision(2048, 1000)
    assert plan.keys_for_even_odds == keys_for_even_odds(2048)
    assert plan.expected_empty_buckets == expected_empty_buckets(2048, 1000)
    assert plan.expected_colliding_pairs == expected_colliding_pairs(2048, 1000)
    assert plan.expected_probes == expected_probes(1000 / 2048)
    assert 3.0 < plan.expected_max_load < 6.0


def test_plan_capacity_from_load_factor() -> None:
    assert plan_capacity(1000, load_factor=0.75).buckets == 1334  # ceil(1333.33)
    # 3 / 0.1 is 30.000000000000004 in floating point; the exact quotient with the float 0.1 is just under 30.
    assert plan_capacity(3, load_factor=0.1).buckets == 30
    assert plan_capacity(0, load_factor=0.5).buckets == 1
    assert plan_capacity(10, load_factor=4).load_factor == pytest.approx(10 / 3)


def test_plan_capacity_usage_errors() -> None:
    for kwargs in ({}, {"buckets": 10, "load_factor": 0.5}):
        with pytest.raises(UsageError, match="exactly one"):
            plan_capacity(100, **kwargs)
    for bad in (0, -1.0, math.nan, math.inf):
        with pytest.raises(UsageError):
            plan_capacity(100, load_factor=bad)
    with pytest.raises(UsageError):
        plan_capacity(100, buckets=0)
    with pytest.raises(UsageError):
        plan_capacity(-5, buckets=10)


def test_plan_capacity_to_dict_is_json() -> None:
    data = plan_capacity(5000, buckets=4096).to_dict()  # load above 1: open addressing is impossible
    text = json.dumps(data, allow_nan=False)
    assert json.loads(text) == data
    assert data["expected_probes"]["linear"] == {"hit": None, "miss": None}
    assert data["expected_probes"]["chaining"]["hit"] == pytest.approx(1 + 5000 / 4096 / 2)
    assert set(data) == {
        "keys",
        "buckets",
        "load_factor",
        "p_no_collision",
        "keys_for_even_odds",
        "expected_empty_buckets",
        "expected_colliding_pairs",
        "expected_max_load",
        "expected_probes",
    }


def test_plan_capacity_huge_table() -> None:
    plan = plan_capacity(2**32, buckets=2**64)
    assert plan.keys_for_even_odds == keys_for_even_odds(2**64)
    assert plan.expected_colliding_pairs == pytest.approx(0.5 * (1 - 2**-32), rel=1e-15)  # C(2^32, 2) / 2^64
    # With 0.5 expected colliding pairs and ~1e-11 expected triples, E[max] = 1 + P(collision) to 1e-11.
    assert plan.expected_max_load == pytest.approx(2.0 - plan.p_no_collision, rel=1e-10)


# --------------------------------------------------------------------------------------------------------
# Arguments
# --------------------------------------------------------------------------------------------------------


def test_counts_accept_ints_integral_floats_and_numpy() -> None:
    assert p_no_collision(np.int64(365), 23.0) == p_no_collision(365, 23)
    assert expected_empty_buckets(2.0**64, np.uint64(10)) == expected_empty_buckets(2**64, 10)
    for bad_m in (0, -3, 2.5, True, "365", math.nan, None):
        with pytest.raises(UsageError):
            p_no_collision(bad_m, 2)  # type: ignore[arg-type]
    with pytest.raises(UsageError):
        expected_empty_buckets(10, -1)


def test_stable_helpers_near_zero() -> None:
    # (1+x)log(1+x) - x and x - log(1+x) against mpmath at 50 digits, where the naive forms cancel.
    with mpmath.workdps(50):
        for x in (1e-12, -3e-6, 0.05, -0.0999, 0.3, -0.9, 5.0):
            big = mpmath.mpf(x)
            assert _numeric._rho(x) == pytest.approx(float((1 + big) * mpmath.log1p(big) - big), rel=1e-14)
            assert _numeric._x_minus_log1p(x) == pytest.approx(float(big - mpmath.log1p(big)), rel=1e-14)
        assert _numeric._rho(-1.0) == 1.0
