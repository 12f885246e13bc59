"""Closed forms of simple uniform hashing: n keys thrown independently and uniformly into m buckets.

These are the numbers a finding is compared with: the probability that no two keys share a bucket, the
birthday threshold, the exact moments of the empty-bucket, colliding-pair and Pearson statistics, the
expected occupancy profile, and the classic expected probe counts of chained and open-addressing tables.
The distribution of the fullest bucket lives in :mod:`hashaudit.stats.maxload`.

Every function accepts ``m`` (buckets) and ``n`` (keys) as Python ints, integer-valued floats or numpy
integers, and stays accurate for m up to 2**64 and n up to about 2**40: nothing forms ``1 - 1/m`` directly,
products become sums of ``log1p`` terms, and differences that cancel are rewritten (series when n/m is
tiny, ``expm1`` of log differences otherwise).

References
----------
D. E. Knuth, The Art of Computer Programming, vol. 3, 2nd ed., Addison-Wesley 1998, §6.4.
T. H. Cormen, C. E. Leiserson, R. L. Rivest, C. Stein, Introduction to Algorithms, 3rd ed., MIT Press 2009,
ch. 5.4 and 11.
W. Feller, An Introduction to Probability Theory and Its Applications, vol. 1, 3rd ed., Wiley 1968, ch. II, IV.
M. Abramowitz, I. A. Stegun, Handbook of Mathematical Functions, 1964, 6.1.41 (Stirling's series).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from typing import Any, NamedTuple

import numpy as np

from hashaudit.errors import UsageError

# log_p_no_collision lives with the shared numerics (the fullest-bucket law needs it too) and is public here
from hashaudit.stats._numeric import _as_count, _poisson_logpmf, _x_minus_log1p, log_p_no_collision

__all__ = [
    "CapacityPlan",
    "ChiSquareMoments",
    "chi_square_moments",
    "expected_colliding_pairs",
    "expected_empty_buckets",
    "expected_occupancy",
    "expected_probes",
    "keys_for_even_odds",
    "log_p_no_collision",
    "p_no_collision",
    "plan_capacity",
    "var_colliding_pairs",
    "var_empty_buckets",
]

# Below this load factor the variance of the empty-bucket count is summed as an exact series.
_EMPTY_VARIANCE_SERIES_LOAD = 0.01
# Exact integer arithmetic settles the birthday threshold for tables up to this size.
_EXACT_BIRTHDAY_LIMIT = 1 << 20
PROBE_SCHEMES = ("chaining", "linear", "quadratic", "double")


# --------------------------------------------------------------------------------------------------------
# Collisions
# --------------------------------------------------------------------------------------------------------


def p_no_collision(m: int | float, n: int | float) -> float:
    """Probability Q(m, n) that n keys hashed uniformly into m buckets never share a bucket.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.

    Returns
    -------
    float
        Q(m, n) = prod_{i<n} (1 - i/m); 0.0 when n > m.

    References
    ----------
    Feller, vol. 1, ch. II.3; Knuth, TAOCP vol. 3, §6.4. See :func:`log_p_no_collision` for the method.
    """
    return math.exp(log_p_no_collision(m, n))


def keys_for_even_odds(m: int | float) -> int:
    """Smallest number of keys for which a collision in m buckets is at least as likely as not.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.

    Returns
    -------
    int
        The smallest n with P(at least one collision) = 1 - Q(m, n) >= 1/2 (23 for m = 365).

    Notes
    -----
    For m <= 2**20 the condition 2·m(m-1)···(m-n+1) <= m^n is checked in exact integer arithmetic. Larger
    tables start from the asymptotic n ≈ ½ + sqrt(¼ + 2 m ln 2) and step to the exact boundary with the
    stable log Q; consecutive values of log Q differ by about n/m >= 2**-33 there, far above its rounding
    error, so the answer is exact.

    References
    ----------
    Feller, vol. 1, ch. II.3; Cormen et al., Introduction to Algorithms, 3rd ed., §5.4.1.
    """
    buckets = _as_count(m, "m", 1)
    if buckets <= _EXACT_BIRTHDAY_LIMIT:
        keys, falling, power = 1, buckets, buckets
        while 2 * falling > power:
            falling *= buckets - keys
            power *= buckets
            keys += 1
        return keys
    threshold = -math.log(2.0)
    keys = math.ceil(0.5 + math.sqrt(0.25 + 2.0 * buckets * math.log(2.0)))
    if buckets > 2**100:
        # log Q of neighbouring n differ by about n/m < 2^-50 here, below its rounding: the asymptotic value (whose
        # relative error is below 1/sqrt(m)) is as exact as floating point allows
        return keys
    while keys > 2 and log_p_no_collision(buckets, keys - 1) <= threshold:
        keys -= 1
    while log_p_no_collision(buckets, keys) > threshold:
        keys += 1
    return keys


def expected_colliding_pairs(m: int | float, n: int | float) -> float:
    """Expected number of pairs of keys that share a bucket: C(n, 2) / m.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.

    Returns
    -------
    float

    References
    ----------
    Cormen et al., Introduction to Algorithms, 3rd ed., §5.4.1 (expected number of pairs with the same
    birthday).
    """
    buckets = _as_count(m, "m", 1)
    keys = _as_count(n, "n", 0)
    return math.comb(keys, 2) / buckets


def var_colliding_pairs(m: int | float, n: int | float) -> float:
    """Variance of the number of colliding pairs: C(n, 2) (1/m)(1 - 1/m).

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.

    Returns
    -------
    float

    Notes
    -----
    The count is a sum over key pairs {i, j} of indicators I_ij = [h(i) = h(j)], each Bernoulli(1/m). Two
    indicators of disjoint pairs are independent. Two that share a key, I_ij and I_il, are independent
    too: P(h(i) = h(j) and h(i) = h(l)) = m · m^-3 = 1/m^2 = P(I_ij) P(I_il). So the indicators are pairwise
    independent (not mutually: three pairs of a triangle are not), every covariance vanishes, and the
    variance is the sum of the C(n, 2) Bernoulli variances.

    References
    ----------
    Feller, vol. 1, ch. IX (variance of a sum of pairwise uncorrelated variables).
    """
    buckets = _as_count(m, "m", 1)
    keys = _as_count(n, "n", 0)
    return math.comb(keys, 2) * (buckets - 1) / (buckets * buckets)


# --------------------------------------------------------------------------------------------------------
# Empty buckets and occupancy
# --------------------------------------------------------------------------------------------------------


def expected_empty_buckets(m: int | float, n: int | float) -> float:
    """Expected number of empty buckets: m (1 - 1/m)^n.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.

    Returns
    -------
    float

    References
    ----------
    Feller, vol. 1, ch. IV.2 (occupancy problems); Knuth, TAOCP vol. 3, §6.4.
    """
    buckets = _as_count(m, "m", 1)
    keys = _as_count(n, "n", 0)
    if keys == 0:
        return float(buckets)
    if buckets == 1:
        return 0.0
    return buckets * math.exp(keys * math.log1p(-1.0 / buckets))


def var_empty_buckets(m: int | float, n: int | float) -> float:
    """Variance of the number of empty buckets.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.

    Returns
    -------
    float
        Var = m(m-1)(1-2/m)^n + m(1-1/m)^n - m^2 (1-1/m)^{2n}.

    Notes
    -----
    The three terms are of order m^2 and cancel down to about C(n,2)/m when n << m, so the formula is never
    evaluated as written. With a = (1-1/m)^n it is rearranged exactly into

        Var = m a [ (1 - a) - (m-1) a (1 - (1 - (m-1)^-2)^n) ],

    where both brackets come from ``expm1`` of ``n log1p(...)``; this keeps 13 or more digits for
    n/m >= 0.01. For smaller n/m, expanding the three powers by the binomial theorem gives the exact series

        Var = sum_{j>=1} c_j / m^j,
        c_j = (-1)^j [2^{j+2} C(n, j+2) - C(2n, j+2) + (2^{j+1} - 1) C(n, j+1)],

    (c_1 = C(n, 2)), whose integer coefficients are computed exactly and whose terms shrink roughly like
    (2n/m)^j.

    References
    ----------
    Feller, vol. 1, ch. IV.2 and IX.3 (moments of the number of empty cells).
    """
    buckets = _as_count(m, "m", 1)
    keys = _as_count(n, "n", 0)
    if buckets == 1 or keys <= 1:
        return 0.0  # the number of empty buckets is fixed
    if keys <= _EMPTY_VARIANCE_SERIES_LOAD * buckets:
        return _var_empty_series(buckets, keys)
    log_a = keys * math.log1p(-1.0 / buckets)
    a = math.exp(log_a)
    one_minus_a = -math.expm1(log_a)
    if buckets == 2:
        pair_term = 1.0  # (1 - 2/m)^n = 0
    else:
        pair_term = -math.expm1(keys * math.log1p(-1.0 / (buckets - 1) ** 2))
    return max(0.0, buckets * a * (one_minus_a - (buckets - 1) * a * pair_term))


def _var_empty_series(m: int, n: int) -> float:
    """Exact series for the empty-bucket variance in powers of 1/m (used when n/m is small)."""
    total = Fraction(0)
    j = 1
    while j + 2 <= 2 * n:
        coefficient = (2 ** (j + 2)) * math.comb(n, j + 2) - math.comb(2 * n, j + 2)
        coefficient += (2 ** (j + 1) - 1) * math.comb(n, j + 1)
        if j % 2:
            coefficient = -coefficient
        term = Fraction(coefficient, m**j)
        total += term
        if j >= 2 and abs(term) <= abs(total) * Fraction(1, 10**25):
            break
        j += 1
    return float(total)


def expected_occupancy(m: int | float, n: int | float, kmax: int) -> np.ndarray:
    """Expected number of buckets holding exactly k keys, for k = 0 .. kmax.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.
    kmax : int
        Largest occupancy reported, at least 0.

    Returns
    -------
    numpy.ndarray
        float64 array of length kmax + 1 with m · P(Binomial(n, 1/m) = k).

    Notes
    -----
    The binomial probability is written as a Poisson(λ = n/m) probability times two corrections,
    log C(n,k) p^k (1-p)^{n-k} = log Poisson(k; λ) + sum_{i<k} log(1 - i/n) + n(log(1-p) + p) - k log(1-p),
    with p = 1/m, so that nothing cancels between log-factorials of size n log n even for n ~ 2**40 and
    p ~ 2**-64. It agrees with ``scipy.stats.binom.pmf`` where both apply.

    References
    ----------
    Feller, vol. 1, ch. IV.2 and VI.5 (occupancy numbers, Poisson approximation to the binomial);
    C. Loader, "Fast and accurate computation of binomial probabilities", 2000 (the saddle-point form of
    the Poisson term).
    """
    buckets = _as_count(m, "m", 1)
    keys = _as_count(n, "n", 0)
    top = _as_count(kmax, "kmax", 0)
    out = np.zeros(top + 1, dtype=float)
    if keys == 0:
        out[0] = float(buckets)
        return out
    if buckets == 1:
        if keys <= top:
            out[keys] = 1.0
        return out
    last = min(top, keys)
    k = np.arange(last + 1, dtype=float)
    p = 1.0 / buckets
    load = keys / buckets
    log1p_minus_p = math.log1p(-p)
    # n (log(1-p) + p) = -n (x - log1p(x)) at x = -p: small and negative, no cancellation.
    log_correction = -keys * _x_minus_log1p(-p)
    falling = np.concatenate(([0.0], np.cumsum(np.log1p(-np.arange(last, dtype=float) / keys))))
    log_pmf = _poisson_logpmf(k, load) + falling + log_correction - k * log1p_minus_p
    out[: last + 1] = buckets * np.exp(log_pmf)
    return out


# --------------------------------------------------------------------------------------------------------
# Pearson's statistic
# --------------------------------------------------------------------------------------------------------


class ChiSquareMoments(NamedTuple):
    """Exact mean and variance of Pearson's statistic for m equiprobable cells and n keys."""

    mean: float
    variance: float


def chi_square_moments(m: int | float, n: int | float) -> ChiSquareMoments:
    """Exact mean and variance of Pearson's X² = sum (N_i - n/m)² / (n/m) under uniform hashing.

    Parameters
    ----------
    m : int or float
        Number of buckets (cells), at least 1.
    n : int or float
        Number of keys, at least 1.

    Returns
    -------
    ChiSquareMoments
        ``(mean, variance)`` = (m - 1, 2 (m - 1)(1 - 1/n)); a named tuple, so it unpacks as a pair.

    Notes
    -----
    X² = (m/n) sum N_i² - n. With E N_i² = n/m + n(n-1)/m² the mean is m - 1 exactly. The general variance
    for cell probabilities p_i is 2(m-1) + (sum 1/p_i - m² - 2m + 2)/n; with p_i = 1/m the sum is m² and it
    reduces to 2(m-1)(1 - 1/n), for any n >= 1 (no large-sample approximation). For n = 1 the statistic is
    the constant m - 1.

    References
    ----------
    J. B. S. Haldane, "The exact value of the moments of the distribution of χ², used as a test of goodness
    of fit, when expectations are small", Biometrika 29 (1937) 133-143 (cited from memory);
    C. Morris, "Central limit theorems for multinomial sums", Ann. Statist. 3 (1975) 165-188.
    """
    buckets = _as_count(m, "m", 1)
    keys = _as_count(n, "n", 1)
    return ChiSquareMoments(float(buckets - 1), 2.0 * (buckets - 1) * (keys - 1) / keys)


# --------------------------------------------------------------------------------------------------------
# Probes
# --------------------------------------------------------------------------------------------------------


def expected_probes(load_factor: float) -> dict[str, dict[str, float]]:
    """Expected probes per lookup at load factor α for the classic table organisations.

    Parameters
    ----------
    load_factor : float
        α = keys / slots (or keys / chains), finite and >= 0.

    Returns
    -------
    dict
        ``{"chaining": {"hit": .., "miss": ..}, "linear": {..}, "quadratic": {..}, "double": {..}}``.
        "hit" is a successful search, "miss" an unsuccessful one. Open-addressing entries are
        ``float("inf")`` when α >= 1 (the table is full or over-full); chaining is finite for every α.

    Notes
    -----
    The large-table limits, as tabulated by Knuth:

    =========================  =======================  ==============================
    organisation               hit                      miss
    =========================  =======================  ==============================
    separate chaining          1 + α/2                  α + e^-α
    linear probing             ½ (1 + 1/(1-α))          ½ (1 + 1/(1-α)²)
    quadratic (secondary       1 - ln(1-α) - α/2        1/(1-α) - α - ln(1-α)
    clustering model)
    double hashing (uniform    (1/α) ln(1/(1-α))        1/(1-α)
    probing model)
    =========================  =======================  ==============================

    At α = 0 every entry is its limit, 1.

    References
    ----------
    Knuth, TAOCP vol. 3, 2nd ed., §6.4 (Algorithms C, L and D and the table of average probe counts);
    Cormen et al., Introduction to Algorithms, 3rd ed., Theorems 11.1, 11.2, 11.6 and 11.8.
    """
    if isinstance(load_factor, bool) or not isinstance(load_factor, int | float | np.integer | np.floating):
        raise UsageError(f"load factor must be a number, not {load_factor!r}")
    alpha = float(load_factor)
    if not math.isfinite(alpha) or alpha < 0:
        raise UsageError(f"load factor must be a finite number >= 0, not {load_factor!r}")
    probes = {"chaining": {"hit": 1.0 + alpha / 2.0, "miss": alpha + math.exp(-alpha)}}
    if alpha >= 1.0:
        for scheme in PROBE_SCHEMES[1:]:
            probes[scheme] = {"hit": math.inf, "miss": math.inf}
        return probes
    log_inverse_free = -math.log1p(-alpha)  # ln(1/(1-α))
    inverse_free = 1.0 / (1.0 - alpha)
    probes["linear"] = {"hit": 0.5 * (1.0 + inverse_free), "miss": 0.5 * (1.0 + inverse_free * inverse_free)}
    probes["quadratic"] = {
        "hit": 1.0 + log_inverse_free - alpha / 2.0,
        "miss": inverse_free - alpha + log_inverse_free,
    }
    probes["double"] = {
        "hit": log_inverse_free / alpha if alpha > 0 else 1.0,
        "miss": inverse_free,
    }
    return probes


# --------------------------------------------------------------------------------------------------------
# Capacity plan
# --------------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CapacityPlan:
    """What simple uniform hashing predicts for a number of keys in a table.

    Attributes
    ----------
    keys : int
        Number of keys n.
    buckets : int
        Table size m (given, or ceil(n / λ) from a target load factor, at least 1).
    load_factor : float
        The load factor actually reached, n / m (may sit just below a requested target).
    p_no_collision : float
        Probability that no two keys share a bucket.
    keys_for_even_odds : int
        Keys at which this table has an even chance of at least one collision.
    expected_empty_buckets : float
    expected_colliding_pairs : float
    expected_max_load : float
        Expected keys in the fullest bucket.
    expected_probes : dict
        Probes per hit and per miss by table organisation (see :func:`expected_probes`).
    """

    keys: int
    buckets: int
    load_factor: float
    p_no_collision: float
    keys_for_even_odds: int
    expected_empty_buckets: float
    expected_colliding_pairs: float
    expected_max_load: float
    expected_probes: dict[str, dict[str, float]]

    def to_dict(self) -> dict[str, Any]:
        """JSON-able view: ints, floats and nested dicts; infinite probe counts become ``None``."""

        def finite_or_none(value: float) -> float | None:
            return float(value) if math.isfinite(value) else None

        return {
            "keys": self.keys,
            "buckets": self.buckets,
            "load_factor": float(self.load_factor),
            "p_no_collision": float(self.p_no_collision),
            "keys_for_even_odds": self.keys_for_even_odds,
            "expected_empty_buckets": float(self.expected_empty_buckets),
            "expected_colliding_pairs": float(self.expected_colliding_pairs),
            "expected_max_load": float(self.expected_max_load),
            "expected_probes": {
                scheme: {kind: finite_or_none(value) for kind, value in costs.items()}
                for scheme, costs in self.expected_probes.items()
            },
        }


def plan_capacity(
    n_keys: int | float, buckets: int | float | None = None, load_factor: float | None = None
) -> CapacityPlan:
    """Predict collisions, empty buckets, the fullest bucket and probe counts for a table.

    Parameters
    ----------
    n_keys : int or float
        Number of keys, at least 0.
    buckets : int or float, optional
        Table size. Give exactly one of ``buckets`` and ``load_factor``.
    load_factor : float, optional
        Target keys per bucket λ > 0; the table gets ceil(n / λ) buckets (at least 1), computed exactly.

    Returns
    -------
    CapacityPlan

    Raises
    ------
    hashaudit.errors.UsageError
        When both or neither of ``buckets`` and ``load_factor`` are given, or a value is out of range.

    References
    ----------
    See :func:`p_no_collision`, :func:`keys_for_even_odds`, :func:`expected_empty_buckets`,
    :func:`expected_colliding_pairs`, :func:`expected_probes` and
    :func:`hashaudit.stats.maxload.expected_max_load`.
    """
    # imported here, the one function of this module that needs the fullest-bucket law
    from hashaudit.stats.maxload import expected_max_load

    keys = _as_count(n_keys, "n_keys", 0)
    if (buckets is None) == (load_factor is None):
        raise UsageError("give exactly one of buckets or load_factor")
    if buckets is not None:
        table_size = _as_count(buckets, "buckets", 1)
    else:
        if isinstance(load_factor, bool) or not isinstance(load_factor, int | float | np.integer | np.floating):
            raise UsageError(f"load_factor must be a number, not {load_factor!r}")
        target = float(load_factor)
        if not math.isfinite(target) or target <= 0:
            raise UsageError(f"load_factor must be a finite number > 0, not {load_factor!r}")
        table_size = max(1, math.ceil(Fraction(keys) / Fraction(target)))
    return CapacityPlan(
        keys=keys,
        buckets=table_size,
        load_factor=keys / table_size,
        p_no_collision=p_no_collision(table_size, keys),
        keys_for_even_odds=keys_for_even_odds(table_size),
        expected_empty_buckets=expected_empty_buckets(table_size, keys),
        expected_colliding_pairs=expected_colliding_pairs(table_size, keys),
        expected_max_load=expected_max_load(table_size, keys),
        expected_probes=expected_probes(keys / table_size),
    )
