"""Numerical helpers shared by the closed forms (:mod:`hashaudit.stats.theory`) and the fullest-bucket law
(:mod:`hashaudit.stats.maxload`): whole-number arguments, the functions ρ(x) = (1 + x) log(1 + x) - x and
x - log(1 + x) accurate near 0, Stirling's remainder, the Poisson log-probability in Loader's form, and the log of
the birthday probability, which the fullest-bucket law uses for a bound of one key per bucket.

Both modules import this one and ``theory`` imports ``maxload`` (for ``plan_capacity``), never the reverse.

References
----------
M. Abramowitz, I. A. Stegun, Handbook of Mathematical Functions, 1964, 6.1.41 (Stirling's series).
C. Loader, "Fast and accurate computation of binomial probabilities", 2000 (the saddle-point form of the Poisson
probability).
W. Feller, An Introduction to Probability Theory and Its Applications, vol. 1, 3rd ed., Wiley 1968, ch. II.3.
D. E. Knuth, The Art of Computer Programming, vol. 3, 2nd ed., Addison-Wesley 1998, §6.4.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import special

from hashaudit.errors import UsageError

_LOG_2PI = math.log(2.0 * math.pi)
# Up to this many keys log Q is summed term by term (exact to a few ulps); beyond, Stirling's series.
_DIRECT_PRODUCT_LIMIT = 1 << 16


def _as_count(value: Any, name: str, minimum: int | None = 0) -> int:
    """Return ``value`` as a Python int if it is a whole number (at least ``minimum``), else raise UsageError."""
    if isinstance(value, bool | np.bool_):
        raise UsageError(f"{name} must be a whole number, not {value!r}")
    if isinstance(value, int | np.integer):
        count = int(value)
    elif isinstance(value, float | np.floating) and math.isfinite(value) and float(value).is_integer():
        count = int(value)
    else:
        raise UsageError(f"{name} must be a whole number, not {value!r}")
    if minimum is not None and count < minimum:
        raise UsageError(f"{name} must be at least {minimum}, not {count}")
    return count


def _rho(x: Any) -> Any:
    """(1 + x) log(1 + x) - x for x >= -1, accurate near 0 (series for |x| < 0.1); scalar in, float out."""
    values = np.asarray(x, dtype=float)
    out = np.empty_like(values)
    small = np.abs(values) < 0.1
    xs = values[small]
    # (1+x)log(1+x) - x = sum_{k>=2} (-x)^k / (k(k-1)); 18 terms leave < 1e-20 relative at |x| = 0.1.
    power = xs * xs
    total = np.zeros_like(xs)
    for k in range(2, 20):
        total += power / (k * (k - 1))
        power = power * -xs
    out[small] = total
    xl = values[~small]
    with np.errstate(divide="ignore", invalid="ignore"):
        direct = (1.0 + xl) * np.log1p(xl) - xl
    out[~small] = np.where(xl == -1.0, 1.0, direct)
    return out if out.ndim else float(out)


def _x_minus_log1p(x: float) -> float:
    """x - log(1 + x) for x > -1, accurate near 0."""
    if abs(x) < 0.1:
        # sum_{k>=2} (-1)^k x^k / k
        total, power = 0.0, x * x
        for k in range(2, 20):
            total += power / k
            power *= -x
        return total
    return x - math.log1p(x)


def _stirling_error(x: Any) -> Any:
    """log Γ(x+1) - (x + 1/2) log x + x - log(2π)/2 for x >= 1 (Stirling's series from 15 on)."""
    values = np.asarray(x, dtype=float)
    out = np.empty_like(values)
    large = values >= 15.0
    inv = 1.0 / values[large]
    inv2 = inv * inv
    # Abramowitz & Stegun 6.1.41: 1/(12x) - 1/(360x^3) + 1/(1260x^5) - 1/(1680x^7) + 1/(1188x^9).
    out[large] = inv * (1 / 12 - inv2 * (1 / 360 - inv2 * (1 / 1260 - inv2 * (1 / 1680 - inv2 / 1188))))
    xs = values[~large]
    out[~large] = special.gammaln(xs + 1.0) - (xs + 0.5) * np.log(xs) + xs - 0.5 * _LOG_2PI
    return out if out.ndim else float(out)


def _poisson_logpmf(j: Any, mu: float) -> np.ndarray:
    """log P(X = j) for X ~ Poisson(mu), j whole numbers >= 0, accurate for large j and mu (Loader's form)."""
    counts = np.asarray(j, dtype=float)
    out = np.empty_like(counts)
    small = counts < 15.0
    cs = counts[small]
    out[small] = special.xlogy(cs, mu) - mu - special.gammaln(cs + 1.0)
    cl = counts[~small]
    # j log(j/mu) - j + mu = mu * rho(j/mu - 1): no cancellation between huge terms.
    out[~small] = -0.5 * np.log(2.0 * np.pi * cl) - _stirling_error(cl) - mu * _rho((cl - mu) / mu)
    return out


def log_p_no_collision(m: int | float, n: int | float) -> float:
    """Natural log of the probability that n keys land in n distinct buckets out of m.

    Parameters
    ----------
    m : int or float
        Number of buckets, at least 1.
    n : int or float
        Number of keys, at least 0.

    Returns
    -------
    float
        log Q(m, n) = sum_{i<n} log(1 - i/m); ``-inf`` when n > m.

    Notes
    -----
    Up to 2**16 keys the sum is taken term by term with ``log1p``. Beyond, Q = m! / ((m-n)! m^n) is
    written with Stirling's series so that the huge log-factorials cancel analytically:
    log Q = -m ρ(-n/m) - ½ log(1 - n/m) + s(m) - s(m-n), with ρ(x) = (1+x)log(1+x) - x (evaluated by its
    power series for small n/m) and s the Stirling remainder. The relative error is a few ulps for all
    m <= 2**64.

    References
    ----------
    Feller, vol. 1, ch. II.3 (the birthday problem); Knuth, TAOCP vol. 3, §6.4 (Q(M, N) and its
    asymptotics); Abramowitz & Stegun 6.1.41.
    """
    buckets = _as_count(m, "m", 1)
    keys = _as_count(n, "n", 0)
    if keys > buckets:
        return -math.inf
    if keys <= 1:
        return 0.0
    if keys <= _DIRECT_PRODUCT_LIMIT:
        return float(np.sum(np.log1p(-np.arange(1, keys, dtype=float) / float(buckets))))
    free = buckets - keys
    if free == 0:
        # log(m!/m^m) = ½ log(2πm) - m + s(m)
        return 0.5 * (_LOG_2PI + math.log(buckets)) - buckets + _stirling_error(buckets)
    fraction_used = keys / buckets
    corrections = _stirling_error(buckets) - _stirling_error(free)
    if fraction_used <= 0.5:
        return -float(buckets) * _rho(-fraction_used) - 0.5 * math.log1p(-fraction_used) + corrections
    # Nearly full: 1 - n/m would lose digits, so use the exact free count h = m - n.
    log_free_fraction = math.log(free / buckets)
    return -(free * log_free_fraction + keys) - 0.5 * log_free_fraction + corrections
