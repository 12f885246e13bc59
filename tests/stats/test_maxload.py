"""Distribution of the fullest bucket, checked against values from outside the project.

Sources of expected values: exact rational arithmetic on the generating function
n!/m^n [x^n] (sum_{j<=k} x^j/j!)^m, brute-force enumeration of all m**n assignments, scipy.stats.binom,
mpmath at 50 digits, closed forms for two buckets, and Monte Carlo simulation with fixed seeds.
"""

from __future__ import annotations

import itertools
import math
from fractions import Fraction

import mpmath
import numpy as np
import pytest
from scipy import integrate, special, stats

from hashaudit.errors import UsageError
from hashaudit.stats import maxload
from hashaudit.stats.maxload import expected_max_load, max_load_cdf, max_load_quantile, max_load_sf
from hashaudit.stats.theory import p_no_collision

# --------------------------------------------------------------------------------------------------------
# Reference helpers (independent of the code under test)
# --------------------------------------------------------------------------------------------------------


def exact_cdf(m: int, n: int, k: int) -> Fraction:
    """P(max <= k) = n!/m^n [x^n] (sum_{j<=k} x^j/j!)^m in exact rational arithmetic."""
    base = [Fraction(1, math.factorial(j)) for j in range(min(k, n) + 1)]

    def times(a: list[Fraction], b: list[Fraction]) -> list[Fraction]:
        out = [Fraction(0)] * min(len(a) + len(b) - 1, n + 1)
        for i, x in enumerate(a):
            for j, y in enumerate(b[: n + 1 - i]):
                out[i + j] += x * y
        return out

    result, power, exponent = [Fraction(1)], base, m
    while exponent:
        if exponent & 1:
            result = times(result, power)
        exponent >>= 1
        if exponent:
            power = times(power, power)
    coefficient = result[n] if n < len(result) else Fraction(0)
    return coefficient * math.factorial(n) / Fraction(m) ** n


def enumerated_max_distribution(m: int, n: int) -> list[Fraction]:
    """P(max = k) for k = 0..n by listing all m**n assignments of keys to buckets."""
    tally = [0] * (n + 1)
    for assignment in itertools.product(range(m), repeat=n):
        tally[max(assignment.count(bucket) for bucket in range(m))] += 1
    return [Fraction(count, m**n) for count in tally]


def simulated_maxima(m: int, n: int, reps: int, seed: int) -> np.ndarray:
    """Maximum bucket load of `reps` independent uniform hashings of n keys into m buckets."""
    rng = np.random.default_rng(seed)
    maxima = []
    block = max(1, 2_000_000 // n)
    for start in range(0, reps, block):
        size = min(block, reps - start)
        keys = rng.integers(0, m, size=(size, n)) + m * np.arange(size)[:, None]
        maxima.append(np.bincount(keys.ravel(), minlength=size * m).reshape(size, m).max(axis=1))
    return np.concatenate(maxima)


# --------------------------------------------------------------------------------------------------------
# Exact small cases
# --------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("m", "n"), [(2, 7), (3, 13), (5, 20), (7, 31), (12, 25), (30, 40), (40, 12)])
def test_cdf_and_sf_match_exact_rational_arithmetic(m: int, n: int) -> None:
    for k in range(-1, n + 2):
        expected = exact_cdf(m, n, k) if k >= 0 else Fraction(0)
        assert max_load_cdf(m, n, k) == pytest.approx(float(expected), rel=1e-11, abs=1e-300), k
        upper = 1 - expected  # P(max >= k + 1), exact
        assert max_load_sf(m, n, k + 1) == pytest.approx(float(upper), rel=1e-9, abs=1e-300), k


@pytest.mark.parametrize(("m", "n"), [(3, 5), (4, 4), (2, 6), (5, 3)])
def test_distribution_matches_brute_force_enumeration(m: int, n: int) -> None:
    probabilities = enumerated_max_distribution(m, n)
    for k in range(n + 1):
        assert max_load_cdf(m, n, k) == pytest.approx(float(sum(probabilities[: k + 1])), rel=1e-12, abs=1e-300)
    expected_mean = sum(k * p for k, p in enumerate(probabilities))
    assert expected_max_load(m, n) == pytest.approx(float(expected_mean), rel=1e-12)


def test_exact_shortcuts() -> None:
    # k = 1 is the birthday problem
    for m, n in [(365, 23), (2**32, 10**5), (50, 50)]:
        assert max_load_cdf(m, n, 1) == pytest.approx(p_no_collision(m, n), rel=1e-13)
    # m k = n: every bucket holds exactly k keys, n!/(k!^m m^n) (exact rationals)
    for m, k in [(5, 3), (4, 6), (9, 2)]:
        n = m * k
        expected = Fraction(math.factorial(n), math.factorial(k) ** m * m**n)
        assert max_load_cdf(m, n, k) == pytest.approx(float(expected), rel=1e-12)
    # 2k > n: at most one bucket reaches k, so P(max >= k) = m P(Binomial(n, 1/m) >= k) (scipy.stats.binom)
    assert max_load_sf(3, 10, 6) == pytest.approx(3 * stats.binom.sf(5, 10, 1 / 3), rel=1e-12)
    assert max_load_sf(2, 10**6, 500_800) == pytest.approx(2 * stats.binom.sf(500_799, 10**6, 0.5), rel=1e-9)
    # counting alone
    assert max_load_cdf(10, 25, 2) == 0.0  # 10 buckets of at most 2 cannot hold 25 keys
    assert max_load_sf(10, 25, 3) == 1.0
    assert max_load_cdf(10, 25, 25) == 1.0 and max_load_sf(10, 25, 26) == 0.0
    assert max_load_cdf(1, 9, 8) == 0.0 and max_load_cdf(1, 9, 9) == 1.0
    assert max_load_cdf(10, 0, 0) == 1.0 and max_load_sf(10, 0, 1) == 0.0 and max_load_sf(10, 0, 0) == 1.0


# --------------------------------------------------------------------------------------------------------
# Inversion and Edgeworth on overlapping ranges
# --------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("m", "n", "tolerance"),
    [
        (200, 1000, 1e-8),
        (1000, 3000, 1e-10),
        (10**4, 10**5, 1e-11),
        (2**20, 2**20, 1e-11),
        (2**30, 2**34, 1e-11),
    ],
)
def test_edgeworth_agrees_with_inversion(m: int, n: int, tolerance: float) -> None:
    mode = n // m
    for k in range(mode + 2, mode + 30):
        exact = max_load_cdf(m, n, k, method="inversion")
        approximate = max_load_cdf(m, n, k, method="edgeworth")
        if exact < 1e-300:
            continue
        assert approximate == pytest.approx(exact, rel=tolerance), k
        if exact > 1 - 1e-5:
            break


def test_inversion_paths_agree_on_wide_support() -> None:
    # The direct sum over the support and the FFT path compute the same exact inversion formula.
    m, n, k = 1000, 10**7, 10_120
    load = n / m
    mu = maxload._tilt(load, k, (m * k - n) / m)
    support = np.arange(math.floor(mu - 16 * math.sqrt(mu) - 16), k + 1, dtype=float)
    log_pmf = stats.poisson.logpmf(support, mu)
    weights = np.exp(log_pmf - special.logsumexp(log_pmf))
    weights /= weights.sum()
    offsets = support - load
    shift = float(weights @ offsets)
    spread = math.sqrt(m * float(weights @ (offsets - shift) ** 2))
    period = 2 * math.ceil(24 * spread + 24) + 1
    direct = maxload._log_point_direct(weights, offsets, shift, m, period)
    fft = maxload._log_point_fft(weights, support, load, m, n, period)
    assert fft == pytest.approx(direct, abs=1e-11)


# --------------------------------------------------------------------------------------------------------
# Monte Carlo
# --------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("m", "n", "reps", "seed"), [(100, 100, 20_000, 11), (1000, 10_000, 1_000, 12)])
def test_distribution_matches_simulation(m: int, n: int, reps: int, seed: int) -> None:
    maxima = simulated_maxima(m, n, reps, seed)
    for k in range(int(maxima.min()) - 1, int(maxima.max()) + 1):
        predicted = max_load_cdf(m, n, k)
        observed = float(np.mean(maxima <= k))
        standard_error = math.sqrt(max(predicted * (1 - predicted), 1e-12) / reps)
        assert abs(observed - predicted) <= 5 * standard_error + 1 / reps, k
    mean = expected_max_load(m, n)
    assert abs(maxima.mean() - mean) <= 5 * maxima.std() / math.sqrt(reps)


def test_independent_binomial_approximation_is_visibly_wrong_for_small_tables() -> None:
    # Why the multinomial is computed properly: for 4 buckets the product of binomial cdfs is far off
    # (the counts must add up to n, so they are negatively dependent).
    m, n, k = 4, 40, 12
    exact = float(exact_cdf(m, n, k))
    naive = stats.binom.cdf(k, n, 1 / m) ** m
    assert max_load_cdf(m, n, k) == pytest.approx(exact, rel=1e-12)
    assert abs(naive - exact) > 0.02


# --------------------------------------------------------------------------------------------------------
# Tails
# --------------------------------------------------------------------------------------------------------


def test_small_upper_tails_are_positive_monotone_and_bracketed() -> None:
    m, n = 1000, 10_000
    previous = 1.0
    for k in range(22, 400):
        tail = max_load_sf(m, n, k)
        if tail == 0.0:
            break
        assert 0.0 < tail < previous
        # Bonferroni: S1 - S1^2/2 <= P(max >= k) <= S1 with S1 = m P(Binomial(n, 1/m) >= k) (scipy.stats.binom)
        s1 = m * stats.binom.sf(k - 1, n, 1 / m)
        assert s1 * (1 - s1 / 2) * (1 - 1e-9) <= tail <= s1 * (1 + 1e-9)
        previous = tail
    assert previous < 1e-250  # followed far into the tail, not lost to 1 - (1 - tiny)
    assert max_load_cdf(m, n, 30) == 1.0 - max_load_sf(m, n, 31)


def test_tail_methods_agree_where_they_meet() -> None:
    # Around S1 = 1e-5 the Bonferroni pair and -expm1(log cdf) are both valid; they must agree.
    for m, n in [(1000, 10_000), (50, 5000), (2**20, 2**20)]:
        k = n // m + 1
        while m * stats.binom.sf(k - 1, n, 1 / m) > 1e-5:  # S1 = m P(N >= k), scipy.stats.binom
            k += 1
        for j in (k - 1, k, k + 1):
            union = maxload._union_tail(m, n, j)
            via_cdf = -math.expm1(maxload._log_cdf(m, n, j - 1, "inversion"))
            if union is not None:
                assert union == pytest.approx(via_cdf, rel=2e-9), (m, n, j)


def test_huge_table_small_tail_against_mpmath() -> None:
    # 2**40 keys in 2**64 buckets. S1 = m P(N >= k) with N ~ Binomial(n, 1/m), by mpmath at 50 digits.
    m, n = 2**64, 2**40
    with mpmath.workdps(50):
        p = mpmath.mpf(1) / m

        def single(k: int) -> mpmath.mpf:
            return m * (1 - sum(mpmath.binomial(n, j) * p**j * (1 - p) ** (n - j) for j in range(k)))

        # k = 3: the number of buckets with 3 keys is Poisson in this limit (Arratia, Goldstein & Gordon 1989),
        # so P(max >= 3) = 1 - exp(-S1) up to a relative error of order S1 n/m.
        poisson_limit = float(-mpmath.expm1(-single(3)))
        # k = 4: S1 ~ 1.2e-19, so P(max >= 4) = S1 to about 1e-19 relative (Bonferroni).
        four = float(single(4))
    assert max_load_sf(m, n, 3) == pytest.approx(poisson_limit, rel=1e-10)
    assert max_load_sf(m, n, 4) == pytest.approx(four, rel=1e-10)
    assert max_load_sf(m, n, 2) == pytest.approx(1 - p_no_collision(m, n), rel=1e-12)


def test_large_tables_are_stable() -> None:
    for m, n in [(2**40, 2**34), (2**30, 2**34), (2**64, 2**40), (2**20, 2**34)]:
        first = n // m
        top = max_load_quantile(m, n, 1 - 1e-12)
        ks = range(first, top + 1, max(1, (top - first) // 40))
        values = [max_load_cdf(m, n, k) for k in ks]
        assert all(0.0 <= v <= 1.0 for v in values)
        assert values == sorted(values)
        assert max_load_cdf(m, n, top) == pytest.approx(1.0, abs=1e-12)
        for k in ks:
            assert max_load_cdf(m, n, k - 1) + max_load_sf(m, n, k) == pytest.approx(1.0, abs=1e-14)


# --------------------------------------------------------------------------------------------------------
# Expected maximum and quantiles
# --------------------------------------------------------------------------------------------------------


@pytest.mark.parametrize("n", [1000, 10**6])
def test_expected_max_load_two_buckets_closed_form(n: int) -> None:
    # m = 2: max = n/2 + |N - n/2| with N ~ Binomial(n, 1/2); for even n, E|N - n/2| = (n/2) C(n, n/2) / 2^n
    # (de Moivre's mean absolute deviation). Evaluated with mpmath at 50 digits.
    with mpmath.workdps(50):
        expected = n / 2 + mpmath.mpf(n) / 2 * mpmath.binomial(n, n // 2) / mpmath.mpf(2) ** n
    assert expected_max_load(2, n) == pytest.approx(float(expected), rel=1e-12)


def test_expected_max_load_three_buckets_by_full_summation(monkeypatch: pytest.MonkeyPatch) -> None:
    # Sum of max(a, b, n-a-b) over all compositions with the trinomial probabilities (scipy.special.gammaln),
    # a reference that never uses the maximum's distribution.
    m, n = 3, 6000
    log_norm = special.gammaln(n + 1) - n * math.log(m)
    total = 0.0
    for a in range(n + 1):
        b = np.arange(n - a + 1)
        c = n - a - b
        log_p = log_norm - special.gammaln(a + 1) - special.gammaln(b + 1) - special.gammaln(c + 1)
        total += float(np.exp(log_p) @ np.maximum(np.maximum(a, b), c))
    assert expected_max_load(m, n) == pytest.approx(total, rel=1e-11)  # every term summed
    # The same through the grid with Romberg extrapolation (the terms leave 1 at n/m with a kink).
    monkeypatch.setattr(maxload, "_DIRECT_TERMS", 50)
    monkeypatch.setattr(maxload, "_GRID_POINTS", 128)
    assert expected_max_load(m, n) == pytest.approx(total, rel=1e-9)


def test_expected_max_load_edges_and_growth() -> None:
    assert expected_max_load(10, 0) == 0.0
    assert expected_max_load(1, 17) == 17.0
    assert expected_max_load(10**6, 1) == 1.0
    # 2 keys: 1 + P(they collide) = 1 + 1/m
    assert expected_max_load(1000, 2) == pytest.approx(1.001, rel=1e-14)
    # Raab & Steger (1998): with m = n the maximum grows like ln m / ln ln m; here it just increases.
    values = [expected_max_load(2**e, 2**e) for e in (10, 16, 24, 32)]
    assert values == sorted(values) and 5 < values[0] < values[-1] < 14


def test_max_load_quantile() -> None:
    for m, n in [(365, 23), (1000, 10_000), (2**32, 2**32)]:
        for q in (0.01, 0.5, 0.99, 1 - 1e-12):
            k = max_load_quantile(m, n, q)
            assert max_load_sf(m, n, k + 1) <= 1 - q or max_load_cdf(m, n, k) >= q
            assert max_load_cdf(m, n, k - 1) < q
    assert max_load_quantile(1, 5, 0.5) == 5
    assert max_load_quantile(5, 0, 0.5) == 0
    for bad in (0.0, 1.0, -0.5, math.nan, "0.5"):
        with pytest.raises(UsageError):
            max_load_quantile(10, 10, bad)  # type: ignore[arg-type]


def test_argument_errors() -> None:
    with pytest.raises(UsageError, match="method"):
        max_load_cdf(10, 10, 3, method="normal")
    with pytest.raises(UsageError):
        max_load_cdf(0, 10, 3)
    with pytest.raises(UsageError):
        max_load_sf(10, -1, 3)
    with pytest.raises(UsageError):
        max_load_cdf(10, 10, 2.5)  # type: ignore[arg-type]
    assert max_load_cdf(10.0, 20.0, 5.0) == max_load_cdf(10, 20, 5)  # type: ignore[arg-type]


@pytest.mark.slow
def test_few_buckets_very_many_keys() -> None:
    # 16 shards, 2**34 keys (about a minute). The upper tail against the union bracket (scipy.stats.binom for
    # S1), and the expected maximum against its normal limit: N_i - lambda ~ sigma Z_i with exchangeable Z_i of
    # correlation -1/15, so E[max] ~ lambda + sqrt(lambda) E[max of 16 iid N(0, 1)] (the 1/m terms cancel);
    # the remaining lattice and skewness corrections are O(1) keys out of 1e9.
    m, n = 16, 2**34
    load = n // m
    k = load + 150_000
    s1 = m * stats.binom.sf(k, n, 1 / m)
    assert s1 * (1 - s1) <= max_load_sf(m, n, k + 1) <= s1
    max_of_normals = integrate.quad(lambda x: x * m * stats.norm.pdf(x) * stats.norm.cdf(x) ** (m - 1), -12, 12)[0]
    assert expected_max_load(m, n) == pytest.approx(load + math.sqrt(load) * max_of_normals, abs=5.0)
