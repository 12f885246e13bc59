"""The fullest bucket: distribution of the maximum load when n keys are hashed uniformly into m buckets.

The bucket counts (N_1, ..., N_m) are multinomial, so they are not independent: for small m the tempting
``P(Binomial(n, 1/m) <= k) ** m`` is wrong, and for large m its error is still visible in the tails. This
module computes P(max N_i <= k) for the multinomial itself.

Method
------
Levin's (1981) representation turns the multinomial event into independent Poisson cells: for any μ > 0,

    P(max <= k) = n! / (s^n e^-s) · P(X <= k)^m · P(W = n),      s = m μ,

where X ~ Poisson(μ) and W is the sum of m independent copies of X conditioned on X <= k. The identity is
exact for every μ; μ is chosen so that E[W] = n (exponential tilting), which puts n at the centre of W's
distribution. P(W = n) is then computed in one of two ways:

* ``"inversion"`` (exact up to rounding): W is a lattice variable, so
  P(W = n) = (1/N) Σ_t φ(2πt/N)^m e^{-2πitn/N} holds exactly up to aliasing of probability mass N apart;
  N is 28 standard deviations of W (or more than W's whole range), which makes aliasing negligible. φ is
  summed directly over the support of X (with ``expm1``-style forms so that m·log φ keeps its digits for m
  up to 2**64), or taken from one FFT when m < 64, or when m < 1024 and the support is wide.
* ``"edgeworth"``: Levin's normal approximation of P(W = n) with Edgeworth corrections (here up to
  the order 1/m²; relative error of order m^-3 near the centre). Measured against the inversion: 2e-8 at
  m = 50, 3e-10 at m = 200, 2e-12 at m = 1000, 1e-14 from m = 4096 on; useless for m < 20.

``"auto"`` uses the inversion unless the support of X is wide (more than 4096 points, λ = n/m above about
16000) and m > 2**16, where the Edgeworth series agrees with the inversion to about 1e-15 and is much
faster.

Exact shortcuts: k = 1 is the birthday probability Q(m, n); m·k = n has the closed form n!/(k!^m m^n);
when 2k > n at most one bucket can reach k, so P(max >= k) = m · P(Binomial(n, 1/m) >= k) exactly. Small
upper tails (m · P(N_1 >= k) < 1e-5) use the Bonferroni pair S1 - S2, whose relative error is at most
S1²/6 < 2e-11 because multinomial counts are negatively associated.

References
----------
B. Levin, "A representation for multinomial cumulative distribution functions", Ann. Statist. 9 (1981)
1123-1126.
V. V. Petrov, Sums of Independent Random Variables, Springer 1975, ch. VII (local Edgeworth expansion for
lattice variables; cited from memory).
K. Joag-Dev, F. Proschan, "Negative association of random variables, with applications", Ann. Statist. 11
(1983) 286-295 (multinomial counts are negatively associated).
M. Raab, A. Steger, "'Balls into bins' - a simple and tight analysis", RANDOM 1998, LNCS 1518, 159-170
(where the maximum lies).
C. Loader, "Fast and accurate computation of binomial probabilities", 2000 (saddle-point form of the
binomial probability).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from functools import lru_cache

import numpy as np
from numpy.polynomial import hermite_e
from scipy import special

from hashaudit.errors import UsageError
from hashaudit.stats._lazy import fft

# The numerics shared with the closed forms; hashaudit.stats.theory imports this module, never the reverse.
from hashaudit.stats._numeric import (
    _as_count,
    _poisson_logpmf,
    _rho,
    _stirling_error,
    _x_minus_log1p,
    log_p_no_collision,
)
from hashaudit.stats._roots import brent_root

__all__ = ["METHODS", "expected_max_load", "max_load_cdf", "max_load_quantile", "max_load_sf"]

METHODS = ("auto", "inversion", "edgeworth")
_LOG_2PI = math.log(2.0 * math.pi)
# Upper tails with m·P(N_1 >= k) below this use the Bonferroni pair (relative error <= S1²/6).
_UNION_TAIL_LIMIT = 1e-5
# Direct summation of the characteristic function up to this many support points of X.
_DIRECT_SUPPORT_LIMIT = 4096
# Below this many buckets a wide support is transformed by one FFT; from here on, summed directly.
_FFT_BUCKET_LIMIT = 1 << 10
# Above this many buckets "auto" sends a wide support to the Edgeworth series.
_EDGEWORTH_BUCKETS = 1 << 16
# Below this many buckets the inversion always uses the FFT.
_FEW_BUCKETS = 64
# The expected maximum sums up to this many terms one by one; beyond, a grid of about _GRID_POINTS.
_DIRECT_TERMS = 400
_GRID_POINTS = 256
_ROMBERG_LEVELS = 5
# Probabilities below this are dropped from sums of tail probabilities.
_NEGLIGIBLE = 1e-20
# Standard deviations of W kept on each side of n by the aliasing period.
_PERIOD_SPREAD = 14
# Poisson standard deviations kept on each side of the support window of X.
_WINDOW_SPREAD = 16


# --------------------------------------------------------------------------------------------------------
# Public functions
# --------------------------------------------------------------------------------------------------------


def max_load_cdf(m: int | float, n: int | float, k: int, *, method: str = "auto") -> float:
    """Probability that no bucket holds more than k keys.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.
    k : int
        Load bound (any whole number; P = 0 for k < ceil(n/m)).
    method : {"auto", "inversion", "edgeworth"}
        How P(W = n) in Levin's representation is computed (see the module notes).

    Returns
    -------
    float
        P(max_i N_i <= k) for (N_1..N_m) ~ Multinomial(n; 1/m, ..., 1/m).

    Notes
    -----
    Measured relative error of the inversion: below 7e-12 against exact rational arithmetic (m <= 60,
    n <= 80, every k, down to P ~ 1e-48) and below 2e-13 against an independent float convolution of the
    truncated Poisson law (m up to 3000). Near 1 the value is 1 - P(max >= k + 1) with the upper tail
    computed as in :func:`max_load_sf`.

    References
    ----------
    Levin, Ann. Statist. 9 (1981) 1123-1126; Petrov (1975), ch. VII.
    """
    buckets, keys, bound = _arguments(m, n, k, method)
    trivial = _trivial_cdf(buckets, keys, bound)
    if trivial is not None:
        return trivial
    tail = _union_tail(buckets, keys, bound + 1)
    if tail is not None:
        return 1.0 - tail
    return math.exp(_log_cdf(buckets, keys, bound, method))


def max_load_sf(m: int | float, n: int | float, k: int, *, method: str = "auto") -> float:
    """Probability that some bucket holds at least k keys: P(max >= k) = 1 - P(max <= k - 1).

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.
    k : int
        Load threshold (any whole number; P = 1 for k <= ceil(n/m)).
    method : {"auto", "inversion", "edgeworth"}
        See :func:`max_load_cdf`.

    Returns
    -------
    float
        The upper-tail probability, accurate in relative terms when it is small (p-values down to the
        smallest positive float): exact when 2k > n (to the accuracy of ``scipy.special.betainc``, measured
        at 5e-11 for n ~ 1e10), the Bonferroni pair S1 - S2 when S1 = m·P(N_1 >= k) < 1e-5 (relative error
        <= S1²/6 < 2e-11), and ``-expm1(log P(max <= k-1))`` otherwise (absolute error about 2e-15, so
        relative error <= 2e-10; measured worst 1.5e-10 against exact rationals).

    References
    ----------
    Levin (1981); Joag-Dev & Proschan (1983) for the Bonferroni bound; Feller, vol. 1, ch. IV.5
    (inclusion-exclusion).
    """
    buckets, keys, bound = _arguments(m, n, k, method)
    if bound <= 0:
        return 1.0
    if bound > keys:
        return 0.0
    if buckets * (bound - 1) < keys:
        return 1.0
    tail = _union_tail(buckets, keys, bound)
    if tail is not None:
        return tail
    return -math.expm1(_log_cdf(buckets, keys, bound - 1, method))


def expected_max_load(m: int | float, n: int | float) -> float:
    """Expected number of keys in the fullest bucket.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.

    Returns
    -------
    float
        E[max N_i] = Σ_{k>=1} P(max >= k).

    Notes
    -----
    Terms are exactly 1 up to ceil(n/m). The sum starts where the independent-binomial bound on
    P(max <= k-1) (an upper bound, by negative association) drops below 1e-20 and stops where the union
    bound m·P(N_1 >= k) does, so the truncation error is below 1e-20 per term. Up to 400 remaining terms
    are summed one by one. A wider range (large λ) is summed on a grid of about 256 equally spaced k: with
    many buckets both ends of the sequence are flat and the trapezoid rule is exact up to an exponentially
    small error; with few buckets the terms leave 1 at ceil(n/m) with a kink, which Romberg extrapolation
    (5 nested grids, Euler-Maclaurin in h²) removes. Measured against the full sum for m = 2..50 and
    λ = 400..50000: relative error below 4e-11. Cost: one cdf evaluation per grid point, which for very
    large λ with few buckets (m = 16, n = 2**34) adds up to about half a minute.

    References
    ----------
    Raab & Steger (1998) for the location of the maximum; Levin (1981).
    """
    buckets = _as_count(m, "m", 1)
    keys = _as_count(n, "n", 0)
    if keys == 0:
        return 0.0
    if buckets == 1:
        return float(keys)
    from hashaudit.stats._memo import remembered  # kept on disk: it depends on (m, n) only

    return remembered("expected_max_load", (buckets, keys), lambda: _expected_max_load(buckets, keys, step=None))


def max_load_quantile(m: int | float, n: int | float, q: float) -> int:
    """Smallest k with P(max load <= k) >= q.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.
    q : float
        Probability, 0 < q < 1.

    Returns
    -------
    int

    Notes
    -----
    Bisection between two rigorous brackets (the union bound above, the independent-binomial product
    below); for q > 1/2 the test is P(max >= k+1) <= 1 - q, so quantiles close to 1 keep their precision.

    References
    ----------
    Levin (1981); Joag-Dev & Proschan (1983).
    """
    buckets = _as_count(m, "m", 1)
    keys = _as_count(n, "n", 0)
    if isinstance(q, bool) or not isinstance(q, int | float | np.integer | np.floating) or not 0.0 < q < 1.0:
        raise UsageError(f"q must be a probability strictly between 0 and 1, not {q!r}")
    if keys == 0:
        return 0
    if buckets == 1:
        return keys
    p = 1.0 / buckets
    lowest = -(-keys // buckets)
    # cdf(k) >= 1 - m P(N_1 >= k+1): the first k where that bound reaches q is an upper bracket.
    high = _first_true(lowest, keys, lambda k: buckets * _binomial_sf(keys, p, k + 1) <= 1.0 - q)
    # cdf(k) <= P(N_1 <= k)^m (negative association): below the first k where that reaches q, cdf < q.
    low = _first_true(lowest, high, lambda k: _log_independent_cdf(buckets, keys, k) >= math.log(q)) - 1
    low = max(low, lowest - 1)

    def reached(k: int) -> bool:
        if q > 0.5:
            return max_load_sf(buckets, keys, k + 1) <= 1.0 - q
        return max_load_cdf(buckets, keys, k) >= q

    return _first_true(low + 1, high, reached)


# --------------------------------------------------------------------------------------------------------
# Argument checks and exact shortcuts
# --------------------------------------------------------------------------------------------------------


def _arguments(m: object, n: object, k: object, method: str) -> tuple[int, int, int]:
    """Validated (m, n, k) as Python ints; UsageError for anything else or an unknown method."""
    if method not in METHODS:
        raise UsageError(f"method must be one of {', '.join(METHODS)}, not {method!r}")
    return _as_count(m, "m", 1), _as_count(n, "n", 0), _as_count(k, "k", None)


def _trivial_cdf(m: int, n: int, k: int) -> float | None:
    """P(max <= k) when it is 0 or 1 by counting alone, else None."""
    if k < 0:
        return 0.0
    if k >= n:
        return 1.0
    if m * k < n:
        return 0.0
    return None


def _first_true(low: int, high: int, predicate: Callable[[int], bool]) -> int:
    """Smallest k in [low, high] with predicate(k), for a predicate false then true; high if none earlier."""
    while low < high:
        middle = (low + high) // 2
        if predicate(middle):
            high = middle
        else:
            low = middle + 1
    return high


def _binomial_sf(n: int, p: float, k: int) -> float:
    """P(Binomial(n, p) >= k), accurate in relative terms in the upper tail."""
    if k <= 0:
        return 1.0
    if k > n:
        return 0.0
    return float(special.betainc(k, n - k + 1, p))


def _log_independent_cdf(m: int, n: int, k: int) -> float:
    """m · log P(Binomial(n, 1/m) <= k): the log of an upper bound on P(max <= k)."""
    if k >= n:
        return 0.0
    if k < 0:
        return -math.inf
    upper = _binomial_sf(n, 1.0 / m, k + 1)
    if upper < 0.5:
        return m * math.log1p(-upper)
    lower = float(special.betainc(n - k, k + 1, 1.0 - 1.0 / m))
    return m * math.log(lower) if lower > 0 else -math.inf


def _binomial_logpmf(a: np.ndarray, n: int, p: float) -> np.ndarray:
    """log P(Binomial(n, p) = a) for 1 <= a <= n-1, in Loader's saddle-point form (no log-factorial cancellation)."""
    a = np.asarray(a, dtype=float)
    mean = n * p
    rest = n - mean
    return (
        _stirling_error(float(n))
        - _stirling_error(a)
        - _stirling_error(n - a)
        - mean * _rho((a - mean) / mean)
        - rest * _rho((mean - a) / rest)
        + 0.5 * np.log(n / (2.0 * np.pi * a * (n - a)))
    )


def _union_tail(m: int, n: int, k: int) -> float | None:
    """P(max >= k) for 2 <= k <= n when exact (2k > n) or a Bonferroni pair suffices; else None."""
    p = 1.0 / m
    single = m * _binomial_sf(n, p, k)
    if 2 * k > n:
        return min(1.0, single)  # at most one bucket can hold k keys: the events are disjoint
    if single > _UNION_TAIL_LIMIT:
        return None
    return single - math.comb(m, 2) * _pair_tail(m, n, k)


def _pair_tail(m: int, n: int, k: int) -> float:
    """P(N_1 >= k and N_2 >= k) = Σ_a P(N_1 = a) P(Binomial(n - a, 1/(m-1)) >= k)."""
    p = 1.0 / m
    total = 0.0
    start, chunk = k, 1024
    while start <= n - k:
        a = np.arange(start, min(n - k, start + chunk - 1) + 1, dtype=float)
        first = np.exp(_binomial_logpmf(a, n, p))
        second = special.betainc(k, n - a - k + 1, 1.0 / (m - 1))
        terms = first * second
        total += float(terms.sum())
        # Past k the pmf of N_1 decreases (k is above the mode whenever this is called).
        if terms[-1] <= 1e-30 * total or first[-1] == 0.0:
            break
        start += chunk
        chunk *= 2
    return total


# --------------------------------------------------------------------------------------------------------
# Levin's representation
# --------------------------------------------------------------------------------------------------------


@lru_cache(maxsize=1024)  # the hash functions of an audit meet the same (m, n) and often the same maximum
def _log_cdf(m: int, n: int, k: int, method: str) -> float:
    """log P(max <= k) for 1 <= k < n and m k >= n (so m >= 2)."""
    if m * k == n:
        # Every bucket holds exactly k keys: n! / (k!^m m^n), by Stirling's formula since n = m k.
        return (
            0.5 * (_LOG_2PI + math.log(n))
            + _stirling_error(n)
            - m * (0.5 * (_LOG_2PI + math.log(k)) + _stirling_error(k))
        )
    if k == 1:
        return log_p_no_collision(m, n)
    return _log_cdf_levin(m, n, k, method)


def _ratio_series(ratios_from: Callable[[int, int], np.ndarray]) -> float:
    """Σ_{i>=1} Π_{l<i} r_l for ratios r_l < 1 given in chunks by ``ratios_from(start, count)`` (empty = end)."""
    total, term, start, count = 0.0, 1.0, 0, 256
    while True:
        ratios = ratios_from(start, count)
        if ratios.size == 0:
            return total
        terms = term * np.cumprod(ratios)
        total += float(terms.sum())
        term = float(terms[-1])
        if term <= 1e-18 * total:
            return total
        start += ratios.size
        count *= 2


def _poisson_hazard(k: int, mu: float) -> float:
    """P(X = k) / P(X <= k) for X ~ Poisson(mu), from ratio series of neighbouring probabilities.

    (``scipy.special.gammainc`` 1.17 was measured to lose digits in the far tails once k is in the millions:
    relative error 2e-2 six standard deviations out at k = 1e7, 0.7 at k = 1e9; so it is not used here.)
    """
    log_pmf_k = float(_poisson_logpmf(np.array([float(k)]), mu)[0])
    if k >= mu:
        # P(X > k) / P(X = k) = Σ_{i>=1} Π_{l=1..i} mu / (k + l)
        above = _ratio_series(lambda start, count: mu / (k + 1.0 + np.arange(start, start + count)))
        return math.exp(log_pmf_k - math.log1p(-math.exp(log_pmf_k) * above))
    # P(X <= k) / P(X = k) = 1 + Σ_{i=1..k} Π_{l<i} (k - l) / mu
    below = _ratio_series(lambda start, count: (k - np.arange(start, min(start + count, k), dtype=float)) / mu)
    return 1.0 / (1.0 + below)


def _truncated_mean(mu: float, k: int) -> float:
    """E[X | X <= k] for X ~ Poisson(mu) = mu (1 - P(X = k) / P(X <= k))."""
    return mu * (1.0 - _poisson_hazard(k, mu))


def _tilt(load: float, k: int, gap: float) -> float:
    """The Poisson mean μ whose truncation at k has mean ``load`` (``gap`` = k - load > 0)."""
    if _truncated_mean(load, k) >= load:
        return load  # the truncation removes no visible mass
    upper = max(2.0 * load, load + 1.0, 2.0 * k / gap)
    while _truncated_mean(upper, k) <= load:
        upper *= 2.0
    log_mu = brent_root(
        lambda x: _truncated_mean(math.exp(x), k) - load,
        math.log(load),
        math.log(upper),
        xtol=1e-15,
        rtol=4 * np.finfo(float).eps,
        maxiter=500,
    )
    return math.exp(log_mu)


def _log_cdf_levin(m: int, n: int, k: int, method: str) -> float:
    """log P(max <= k) by Levin's representation with a tilted Poisson mean (2 <= k < n, n < m k)."""
    load = n / m
    mu = _tilt(load, k, (m * k - n) / m)
    centre = min(mu, float(k))
    low = max(0, math.floor(centre - _WINDOW_SPREAD * math.sqrt(centre) - _WINDOW_SPREAD))
    high = min(k, math.ceil(mu + _WINDOW_SPREAD * math.sqrt(mu) + _WINDOW_SPREAD))
    support = np.arange(low, high + 1, dtype=float)
    log_pmf = _poisson_logpmf(support, mu)
    log_window_mass = float(special.logsumexp(log_pmf))
    weights = np.exp(log_pmf - log_window_mass)
    weights /= weights.sum()
    if k >= mu:
        # P(X > k) summed term by term up to mu + 16 sd (further mass is below e^-128).
        beyond = np.arange(k + 1, max(k + 41, math.ceil(mu + _WINDOW_SPREAD * math.sqrt(mu) + 40)) + 1)
        upper = math.exp(float(special.logsumexp(_poisson_logpmf(beyond, mu))))
        log_poisson_cdf = math.log1p(-upper)
    else:
        # The window holds all of [0, k] but a lower tail below e^-128.
        log_poisson_cdf = log_window_mass
    log_prefactor = (
        0.5 * (_LOG_2PI + math.log(n))
        + _stirling_error(float(n))
        + n * _x_minus_log1p((mu - load) / load)
        + m * log_poisson_cdf
    )
    return log_prefactor + _log_point_probability(weights, support, load, m, n, k, method)


def _log_point_probability(
    weights: np.ndarray, support: np.ndarray, load: float, m: int, n: int, k: int, method: str
) -> float:
    """log P(W = n), W the sum of m independent copies of Y (pmf ``weights`` on ``support``)."""
    offsets = support - load
    mean_shift = float(weights @ offsets)  # E[Y] - n/m, zero up to the tilting tolerance
    variance = float(weights @ (offsets - mean_shift) ** 2)
    wide = support.size > _DIRECT_SUPPORT_LIMIT
    if method == "edgeworth" or (method == "auto" and wide and m > _EDGEWORTH_BUCKETS):
        result = _log_point_edgeworth(weights, offsets, mean_shift, variance, m)
        if result is not None:
            return result
    spread = math.sqrt(m * variance)
    period = min(max(n, m * k - n) + 1, 2 * math.ceil(_PERIOD_SPREAD * spread + _PERIOD_SPREAD) + 1)
    # With few buckets |φ|^m decays slowly in θ, so many frequencies count and one FFT is cheapest.
    if m < _FEW_BUCKETS or (wide and m < _FFT_BUCKET_LIMIT):
        return _log_point_fft(weights, support, load, m, n, period)
    return _log_point_direct(weights, offsets, mean_shift, m, period)


def _sin_minus_identity(x: np.ndarray) -> np.ndarray:
    """sin(x) - x, accurate near 0 (Taylor polynomial in x² for |x| < 0.5, |error| < 1e-17 |x|³)."""
    x2 = x * x
    # -1/3! + x²/5! - x⁴/7! + ... up to x^12/15!, by Horner's rule
    series = np.full_like(x, -1.0 / 1307674368000.0)
    for order in range(13, 1, -2):
        series = series * x2 + (-1.0) ** ((order - 1) // 2) / math.factorial(order)
    return np.where(np.abs(x) < 0.5, series * x2 * x, np.sin(x) - x)


def _symmetric_weights(t: np.ndarray, period: int) -> np.ndarray:
    """Weights folding frequencies t and -t of a length-``period`` sum onto t >= 0."""
    weights = np.full(t.size, 2.0)
    weights[t == 0] = 1.0
    if period % 2 == 0:
        weights[t == period // 2] = 1.0
    return weights


def _log_point_direct(weights: np.ndarray, offsets: np.ndarray, mean_shift: float, m: int, period: int) -> float:
    """log P(W = n) by the exact inversion sum, with φ summed over the support at each frequency."""
    last = period // 2
    # |φ|^m falls like exp(-m Var(Y) θ²/2) near 0; the first block reaches about e^-60 on that estimate.
    spread = math.sqrt(m * float(weights @ (offsets * offsets)))
    rows = max(16, min(1024, (1 << 21) // offsets.size, math.ceil(1.9 * period / max(spread, 1.0))))
    total = 0.0
    buckets = float(m)
    start = 0
    while start <= last:
        t = np.arange(start, min(last, start + rows - 1) + 1, dtype=float)
        theta = 2.0 * np.pi * t / period
        angles = theta[:, None] * offsets[None, :]
        half_sine = np.sin(0.5 * angles)
        # E[exp(iθ(Y - λ))] - 1, real part as -2 E sin²(θd/2) and imaginary part as E(sin θd - θd) + θ E d.
        real = -2.0 * (half_sine * half_sine) @ weights
        imag = _sin_minus_identity(angles) @ weights + theta * mean_shift
        with np.errstate(divide="ignore"):
            log_modulus = 0.5 * np.log1p(2.0 * real + real * real + imag * imag)
        phase = np.arctan2(imag, 1.0 + real)
        exponent = buckets * log_modulus
        fold = _symmetric_weights(t, period)
        total += float(fold @ (np.exp(exponent) * np.cos(buckets * phase)))
        if float(exponent[t.size // 2 :].max()) < -50.0:
            break  # |φ|^m has fallen below e^-50 and keeps falling
        start += t.size
    return math.log(total / period)


def _log_point_fft(weights: np.ndarray, support: np.ndarray, load: float, m: int, n: int, period: int) -> float:
    """log P(W = n) by the exact inversion sum, with φ at all frequencies from one FFT (small m only)."""
    period = fft.next_fast_len(period)
    anchor = round(load)
    folded = np.bincount(((support - anchor) % period).astype(np.int64), weights=weights, minlength=period)
    spectrum = np.conj(fft.rfft(folded))  # φ of Y - anchor at θ_t = 2πt/period
    modulus = np.abs(spectrum)
    # Frequencies where |φ|^m < e^-60 add nothing visible; skip their exp and cos.
    kept = np.flatnonzero(modulus > math.exp(-60.0 / m))
    exponent = m * np.log(modulus[kept])
    theta = 2.0 * np.pi * kept / period
    phase = m * np.angle(spectrum[kept]) - theta * float(n - m * anchor)
    fold = _symmetric_weights(kept, period)
    total = float(fold @ (np.exp(exponent) * np.cos(phase)))
    return math.log(total / period)


def _log_point_edgeworth(
    weights: np.ndarray, offsets: np.ndarray, mean_shift: float, variance: float, m: int
) -> float | None:
    """log P(W = n) by the local Edgeworth expansion to order 1/m²; None if the series breaks down."""
    centred = offsets - mean_shift
    powers = [float(weights @ centred**r) for r in range(2, 7)]
    m2, m3, m4, m5, m6 = powers
    k3 = m3
    k4 = m4 - 3.0 * m2 * m2
    k5 = m5 - 10.0 * m3 * m2
    k6 = m6 - 15.0 * m4 * m2 - 10.0 * m3 * m3 + 30.0 * m2**3
    sd = math.sqrt(variance)
    g3, g4, g5, g6 = k3 / sd**3, k4 / sd**4, k5 / sd**5, k6 / sd**6
    buckets = float(m)
    x = -buckets * mean_shift / math.sqrt(buckets * variance)

    def he(order: int) -> float:
        return float(hermite_e.hermeval(x, [0.0] * order + [1.0]))

    p1 = g3 / 6.0 * he(3)
    p2 = g4 / 24.0 * he(4) + g3 * g3 / 72.0 * he(6)
    p3 = g5 / 120.0 * he(5) + g3 * g4 / 144.0 * he(7) + g3**3 / 1296.0 * he(9)
    p4 = (
        g6 / 720.0 * he(6)
        + (g4 * g4 / 1152.0 + g3 * g5 / 720.0) * he(8)
        + g3 * g3 * g4 / 1728.0 * he(10)
        + g3**4 / 31104.0 * he(12)
    )
    root = math.sqrt(buckets)
    correction = 1.0 + p1 / root + p2 / buckets + p3 / (buckets * root) + p4 / (buckets * buckets)
    if correction <= 0.0:
        return None
    return -0.5 * (_LOG_2PI + math.log(buckets * variance)) - 0.5 * x * x + math.log(correction)


# --------------------------------------------------------------------------------------------------------
# Expected maximum
# --------------------------------------------------------------------------------------------------------


@lru_cache(maxsize=256)  # every hash function of an audit asks it for the same tables: compute each (m, n) once
def _expected_max_load(m: int, n: int, step: int | None = None) -> float:
    """Σ_k P(max >= k) for m >= 2, n >= 1; ``step`` forces the grid spacing (None: automatic)."""
    p = 1.0 / m
    lowest = -(-n // m)
    # Union bound: beyond `high` every term is below 1e-20 and falls off at least geometrically.
    high = _first_true(lowest + 1, n + 1, lambda k: m * _binomial_sf(n, p, k) <= _NEGLIGIBLE)
    # Up to `low` every term is 1 - P(max <= k-1) >= 1 - 1e-20 (independent-binomial upper bound).
    low = _first_true(lowest, high, lambda k: _log_independent_cdf(m, n, k) > math.log(_NEGLIGIBLE))
    low = max(lowest, low)
    count = high - low - 1
    if step is None:
        step = 1 if count <= _DIRECT_TERMS else math.ceil(count / _GRID_POINTS)
    if step == 1:
        return low + sum(max_load_sf(m, n, k) for k in range(low + 1, high))
    # With few buckets the terms leave 1 at the pigeonhole bound with a kink (P(max <= lowest + t) grows
    # like a polynomial in t), so the grid starts just past it and Richardson extrapolation in h² removes
    # the Euler-Maclaurin terms of that end; with many buckets both ends are flat and the trapezoid rule
    # alone is exact up to an exponentially small error.
    kinked = low == lowest
    start = lowest + 1 if kinked else low
    levels = _ROMBERG_LEVELS if kinked else 1
    coarse = step * 2 ** (levels - 1)
    finest = math.ceil((high - start) / coarse) * 2 ** (levels - 1)
    values = np.array([max_load_sf(m, n, start + i * step) for i in range(finest + 1)])
    steps, sums = [], []
    for level in range(levels):
        stride = 2**level
        sample = values[::stride]
        ends = 0.5 * (sample[0] + sample[-1])
        steps.append(float(step * stride))
        sums.append(step * stride * (float(sample.sum()) - ends) + ends)  # U(h) = trapezoid + (f_a + f_b)/2
    return (start - 1) + _extrapolate_to_unit_step(steps, sums)


def _extrapolate_to_unit_step(steps: list[float], sums: list[float]) -> float:
    """Neville's polynomial extrapolation in h² of U(h) = U(1) + Σ_j c_j (h^{2j} - 1) to h = 1."""
    squares = [h * h for h in steps]
    table = list(sums)
    for order in range(1, len(table)):
        for i in range(len(table) - order):
            table[i] = ((1.0 - squares[i + order]) * table[i] + (squares[i] - 1.0) * table[i + 1]) / (
                squares[i] - squares[i + order]
            )
    return table[0]
