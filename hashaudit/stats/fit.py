"""Tests of fit of bucket counts against simple uniform hashing.

Each test returns a ``FitTest``: the statistic, its expected value under uniform hashing, the p-values of
both tails (upper = more uneven than random, the direction that can fail; lower = more even than random,
which is informational), the method used for the null distribution, and an effect size in operational units.

Null distributions, chosen by table size m and load factor λ = n/m (see DESIGN.md "Statistical notes"):

* small tables (m ≤ 1024 with λ < 5, or m < 32): a simulated multinomial null with a fixed seed, shared by all
  statistics of that (m, n);
* rare collisions (fewer than 50 colliding pairs expected): Pearson's χ² is an affine function of the number of
  colliding pairs, whose law is nearly Poisson (Arratia, Goldstein & Gordon 1989); χ², the pairs and (as an
  approximation) G take that law, and the empty-bucket count that of the keys landing in occupied buckets;
* Pearson's χ² with λ ≥ 5: χ²(m − 1); the colliding pairs, an affine function of χ², share its p-values;
* sparse large tables: a normal law with the exact moments of Pearson's statistic, and the moments of
  Morris (1975) for G (any statistic Σ f(c_i) of multinomial counts is asymptotically normal with
  mean m·E f(C) and variance m·(Var f(X) − Cov(f(X), X)²/λ), X Poisson);
* empty buckets and colliding pairs: their exact mean and variance with a normal law, or a Poisson law
  when the expected count is small (Arratia, Goldstein & Gordon 1989);
* maximum load: the multinomial distribution of the maximum (``hashaudit.stats.maxload``);
* G with λ ≥ 5 and m ≤ 1000: χ²(m − 1) after Williams's (1976) correction of its mean; for larger m, a normal
  law with the exact mean and Morris's variance.

References
----------
C. Morris, "Central limit theorems for multinomial sums", Ann. Statist. 3 (1975) 165-188.
D. A. Williams, "Improved likelihood ratio tests for complete contingency tables", Biometrika 63 (1976) 33-37.
R. Arratia, L. Goldstein, L. Gordon, "Two moments suffice for Poisson approximations: the Chen-Stein
method", Ann. Probab. 17 (1989) 9-25.
W. Feller, An Introduction to Probability Theory and Its Applications, vol. 1, 3rd ed., ch. II & IV.
"""

from __future__ import annotations

import math
from functools import lru_cache
from typing import Any

import numpy as np
from scipy import special

from hashaudit.stats import maxload, theory
from hashaudit.stats.buckets import BucketCountsResult
from hashaudit.stats.outcome import Effect, FitTest
from hashaudit.stats.tails import poisson_tails
from hashaudit.tables.schemes import bucket_index

SIMULATION_DRAWS = 9999
SPARSE_LOAD = 5.0
SIMULATED_MAX_BUCKETS = 1024  # sparse tables up to this size use the simulated null
RARE_PAIRS = 50.0  # below this many expected colliding pairs (or empty buckets), Poisson laws
WILLIAMS_MAX_BUCKETS = 1000  # above, G's chi-square approximation is off even with Williams's correction


def _square_sum(counts: np.ndarray) -> int:
    """Σ c² in integers: exact, and no BLAS call (whose threads cost milliseconds to wake on a busy machine)."""
    c = counts.astype(np.int64, copy=False)
    return int(np.dot(c, c))


def _colliding_pairs(counts: np.ndarray) -> float:
    return float((_square_sum(counts) - int(counts.sum())) / 2.0)


def _g_statistic(counts: np.ndarray, expected_per_bucket: float) -> float:
    c = counts[counts > 0].astype(np.float64)
    terms = c / expected_per_bucket  # then c·log(c/e) in place: the same values as the expression, fewer arrays
    np.log(terms, out=terms)
    terms *= c
    return float(2.0 * np.sum(terms))


def _chi_square(counts: np.ndarray, keys: int, buckets: int) -> float:
    # X^2 = (m/n) Σ c^2 - n, with Σ c^2 exact, in one pass over the counts
    return float(buckets / keys * float(_square_sum(counts)) - keys)


def _lookup_cost(keys: int, pairs: float) -> float:
    """Mean probes of a successful search in a chained table: 1 + (colliding pairs) / n."""
    return 1.0 + pairs / keys if keys else 1.0


SIMULATION_CHUNK = 512  # draws simulated at once: the peak memory is a few chunk-sized arrays, not every draw's


@lru_cache(maxsize=64)
def _simulated_null(buckets: int, keys: int, seed: int) -> dict[str, np.ndarray]:
    """Statistics of SIMULATION_DRAWS multinomial tables (uniform hashing), fixed seed.

    The tables are drawn a chunk at a time from one generator: the same draws as all at once, in a few MiB."""
    rng = np.random.default_rng([seed, buckets, keys])
    lam = keys / buckets
    probabilities = np.full(buckets, 1.0 / buckets)
    names = ("chi_square", "g_test", "empty_buckets", "colliding_pairs", "max_load")
    out = {name: np.empty(SIMULATION_DRAWS, dtype=np.float64) for name in names}
    for start in range(0, SIMULATION_DRAWS, SIMULATION_CHUNK):
        size = min(SIMULATION_CHUNK, SIMULATION_DRAWS - start)
        draws = rng.multinomial(keys, probabilities, size=size).astype(np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            g_terms = np.where(draws > 0, draws * np.log(draws / lam), 0.0)
        part = slice(start, start + size)
        out["chi_square"][part] = buckets / keys * np.einsum("ij,ij->i", draws, draws) - keys
        out["g_test"][part] = 2.0 * g_terms.sum(axis=1)
        out["empty_buckets"][part] = (draws == 0).sum(axis=1)
        out["colliding_pairs"][part] = np.einsum("ij,ij->i", draws, draws - 1.0) / 2.0
        out["max_load"][part] = draws.max(axis=1)
    return out


def _simulated_p(null: np.ndarray, observed: float) -> tuple[float, float]:
    # (1 + #as extreme) / (S + 1): a valid p-value for a Monte Carlo test (Davison & Hinkley 1997, §4.2)
    tol = 1e-9 * max(1.0, abs(observed))
    upper = (1 + int(np.count_nonzero(null >= observed - tol))) / (len(null) + 1)
    lower = (1 + int(np.count_nonzero(null <= observed + tol))) / (len(null) + 1)
    return upper, lower


def _normal_p(observed: float, mean: float, variance: float) -> tuple[float, float]:
    if variance <= 0:
        return (1.0 if observed <= mean else 0.0), (1.0 if observed >= mean else 0.0)
    z = (observed - mean) / math.sqrt(variance)
    return float(special.ndtr(-z)), float(special.ndtr(z))


def _use_simulation(buckets: int, keys: int) -> bool:
    return buckets < 32 or (buckets <= SIMULATED_MAX_BUCKETS and keys / buckets < SPARSE_LOAD)


def _expected_surplus(buckets: int, keys: int) -> float:
    """Expected keys landing in an occupied bucket, n - m(1 - (1 - 1/m)^n), without cancellation:
    the alternating series sum_{k>=2} (-1)^k C(n, k) / m^(k-1)."""
    total, term, k = 0.0, keys * (keys - 1) / (2.0 * buckets), 2
    while term > 1e-17 * max(total, 1e-300) and k <= keys:
        total += term if k % 2 == 0 else -term
        term *= (keys - k) / ((k + 1.0) * buckets)
        k += 1
    if not math.isfinite(total) or keys > buckets:  # series only used when collisions are rare (n << m)
        return keys - buckets + theory.expected_empty_buckets(buckets, keys)
    return total


def _morris_g_moments(buckets: int, keys: int) -> tuple[float, float]:
    """Null mean and variance of G for sparse tables (Morris 1975)."""
    lam = keys / buckets
    top = int(lam + 12.0 * math.sqrt(lam) + 40)
    k = np.arange(top + 1, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(k > 0, 2.0 * k * np.log(k / lam), 0.0)
    binom_pmf = theory.expected_occupancy(buckets, keys, top) / buckets
    pois_pmf = np.exp(k * math.log(lam) - lam - special.gammaln(k + 1.0))
    mean = buckets * float(np.dot(binom_pmf, f))
    ef = float(np.dot(pois_pmf, f))
    var_f = float(np.dot(pois_pmf, (f - ef) ** 2))
    cov_fx = float(np.dot(pois_pmf, (f - ef) * (k - lam)))
    return mean, buckets * max(var_f - cov_fx**2 / lam, 0.0)


def bucket_tests(result: BucketCountsResult, seed: int = 0, *, with_max_load: bool = True) -> list[FitTest]:
    """Every bucket-count test of fit for one table: chi_square, g_test, empty_buckets, colliding_pairs,
    max_load.

    Parameters
    ----------
    result : BucketCountsResult
        The counts of one (hash, scheme, m).
    seed : int
        Seed of the simulated null for small tables (recorded in each test's ``method``).
    with_max_load : bool
        Include ``max_load`` (its distribution is the costly part; callers that only need the other tests skip it).
    """
    # every statistic needs only the occupied buckets (n of them at most)
    return occupied_bucket_tests(result.occupied, result.keys, result.buckets, seed, with_max_load=with_max_load)


def occupied_counts(hashes: np.ndarray, scheme: str, buckets: int, width: int) -> np.ndarray:
    """The keys of every occupied bucket, in bucket order, without a count per bucket: for a few keys in a large
    table (``result.counts[result.counts > 0]`` of the same keys, in time and memory that follow the keys, not m)."""
    return np.unique(bucket_index(hashes, scheme, buckets, width), return_counts=True)[1]


def occupied_bucket_tests(
    counts: np.ndarray, n: int, m: int, seed: int = 0, *, with_max_load: bool = True
) -> list[FitTest]:
    """:func:`bucket_tests` from the counts of the occupied buckets only (in bucket order), with n keys in m
    buckets."""
    if n == 0:
        return []
    lam = n / m
    pairs = _colliding_pairs(counts)
    ideal_cost = 1.0 + (n - 1) / (2.0 * m)
    cost_effect = Effect(
        "lookup_cost_excess",
        _lookup_cost(n, pairs) / ideal_cost - 1.0,
        _lookup_cost(n, pairs),
        ideal_cost,
        "probes per successful chained lookup",
    )
    chi2 = _chi_square(counts, n, m)
    g = _g_statistic(counts, lam)
    empty = float(m - len(counts))
    max_load_observed = float(counts.max())
    expected_empty = theory.expected_empty_buckets(m, n)
    expected_pairs = theory.expected_colliding_pairs(m, n)
    expected_max = maxload.expected_max_load(m, n) if with_max_load else math.nan
    empty_effect = Effect(
        "empty_excess", (empty - expected_empty) / m, empty / m, expected_empty / m, "fraction of buckets left empty"
    )
    max_effect = Effect(
        "max_load_ratio",
        max_load_observed / expected_max if expected_max > 0 else 1.0,
        max_load_observed,
        expected_max,
        "keys in the hottest bucket",
    )

    simulate = _use_simulation(m, n)
    if simulate:
        null = _simulated_null(m, n, seed)
        method = f"simulated multinomial null ({SIMULATION_DRAWS} draws, seed {seed})"
        chi_p = _simulated_p(null["chi_square"], chi2)
        g_p = _simulated_p(null["g_test"], g)
        g_mean = float(null["g_test"].mean())
        empty_p = _simulated_p(null["empty_buckets"], empty)
        pairs_p = _simulated_p(null["colliding_pairs"], pairs)
        chi_method = g_method = empty_method = pairs_method = method
    elif expected_pairs < RARE_PAIRS:
        # Collisions are rare. X^2 = 2m·pairs/n + m - n exactly, so X^2 and the pairs share the Poisson law of the
        # number of colliding pairs; G depends on the same few collisions and takes that law too (an
        # approximation). Normal laws would turn one ordinary collision into a tiny p-value.
        pairs_p = poisson_tails(pairs, expected_pairs)
        chi_p = g_p = pairs_p
        g_mean = _morris_g_moments(m, n)[0]
        chi_method = pairs_method = "Poisson law of the colliding pairs (collisions are rare)"
        g_method = "Poisson law of the colliding pairs (collisions are rare; approximation for G)"
        # Keys that land in an already occupied bucket: n - m + empty, rare and nearly Poisson too.
        surplus = n - (m - empty)
        empty_p = poisson_tails(surplus, _expected_surplus(m, n))
        empty_method = "Poisson law of the keys landing in occupied buckets (collisions are rare)"
    else:
        chi_mean, chi_var = theory.chi_square_moments(m, n)
        if lam >= SPARSE_LOAD:
            chi_p = (float(special.chdtrc(m - 1, chi2)), float(special.chdtr(m - 1, chi2)))
            chi_method = f"chi-square with {m - 1} degrees of freedom"
        else:
            chi_p = _normal_p(chi2, chi_mean, chi_var)
            chi_method = "normal with the exact moments of Pearson's statistic (sparse table)"
        if lam >= SPARSE_LOAD and m <= WILLIAMS_MAX_BUCKETS:
            # G's mean exceeds m - 1 by about (m^2 - 1)/(6n): Williams's correction divides it out
            williams = 1.0 + (m + 1.0) / (6.0 * n)
            g_p = (float(special.chdtrc(m - 1, g / williams)), float(special.chdtr(m - 1, g / williams)))
            g_mean = float(m - 1) * williams
            g_method = f"chi-square with {m - 1} degrees of freedom, Williams (1976) correction"
        else:
            # for many buckets the corrected chi-square still misplaces G's mean by several standard deviations
            g_mean, g_var = _morris_g_moments(m, n)
            g_p = _normal_p(g, g_mean, g_var)
            g_method = "normal with the exact mean and Morris (1975) variance"
        # the pairs are an affine function of X^2: the same p-values
        pairs_p, pairs_method = chi_p, chi_method + " (colliding pairs are an affine function of X^2)"
        if expected_empty < RARE_PAIRS:
            empty_p, empty_method = poisson_tails(empty, expected_empty), "Poisson approximation"
        else:
            empty_p = _normal_p(empty, expected_empty, theory.var_empty_buckets(m, n))
            empty_method = "normal with exact mean and variance"
    tests = [
        FitTest("chi_square", chi2, float(m - 1), chi2, *chi_p, chi_method, cost_effect, {"degrees_of_freedom": m - 1}),
        FitTest("g_test", g, g_mean, g, *g_p, g_method, cost_effect),
        FitTest("empty_buckets", empty, expected_empty, empty, *empty_p, empty_method, empty_effect),
        FitTest("colliding_pairs", pairs, expected_pairs, pairs, *pairs_p, pairs_method, cost_effect),
    ]
    if not with_max_load:
        return tests
    k = int(max_load_observed)
    max_p = (float(maxload.max_load_sf(m, n, k)), float(maxload.max_load_cdf(m, n, k)))
    return [
        *tests,
        FitTest(
            "max_load",
            max_load_observed,
            expected_max,
            max_load_observed,
            *max_p,
            "multinomial maximum (hashaudit.stats.maxload)",
            max_effect,
        ),
    ]


def occupancy_table(result: BucketCountsResult, max_rows: int = 64) -> dict[str, Any]:
    """Buckets holding exactly k keys, observed and expected under uniform hashing (binomial)."""
    occupied = result.occupied
    observed = np.bincount(occupied, minlength=1)
    observed[0] = result.buckets - len(occupied)
    top = min(len(observed) - 1, max_rows)
    expected = theory.expected_occupancy(result.buckets, result.keys, top)
    tail_observed = float(observed[top + 1 :].sum())
    expected_tail = float(result.buckets * special.bdtrc(top, result.keys, 1.0 / result.buckets))
    return {
        "k": list(range(top + 1)),
        "observed": [float(x) for x in observed[: top + 1]],
        "expected": [float(x) for x in expected[: top + 1]],
        "observed_above": tail_observed,
        "expected_above": expected_tail,
    }
