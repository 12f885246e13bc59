"""Tail probabilities, expected extremes and the Poisson test of colliding pairs, shared by the tests of fit (scipy
loaded on first use)."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from hashaudit.stats._lazy import special
from hashaudit.stats.outcome import Effect, FitTest


def poisson_tails(observed: float, mean: float) -> tuple[float, float]:
    """``(P(X >= observed), P(X <= observed))`` for X ~ Poisson(mean); ``observed`` is rounded down to a count."""
    k = math.floor(observed + 1e-9)
    upper = 1.0 if k <= 0 else float(special.pdtrc(k - 1, mean))
    lower = float(special.pdtr(k, mean)) if k >= 0 else 0.0
    return upper, lower


def colliding_pairs_test(
    name: str, observed: int, expected: float, counted: str, method: str, details: dict[str, Any]
) -> FitTest:
    """A count of colliding pairs of distinct keys against a Poisson law of mean ``expected``.

    Parameters
    ----------
    name : str
        The test's name (``full_collisions``, ``seed_independent_collisions``).
    observed : int
        Colliding pairs counted.
    expected : float
        Their expected number for an ideal hash.
    counted : str
        What was counted, in words (the effect's description).
    method, details
        The test's method line and details.

    Returns
    -------
    FitTest
        ``statistic`` and ``observed`` are the count, ``p_upper`` = P(X ≥ observed) and ``p_lower`` =
        P(X ≤ observed) for X ~ Poisson(expected). The effect ``collision_excess`` is (observed - expected) /
        max(expected, 1): relative to the expectation when pairs are expected, in pairs when fewer than one is.

    References
    ----------
    R. Arratia, L. Goldstein, L. Gordon, "Two moments suffice for Poisson approximations: the Chen-Stein method",
    Ann. Probab. 17 (1989) 9-25 (the Poisson law of the number of coincident pairs).
    """
    p_upper, p_lower = poisson_tails(observed, expected)
    effect = Effect("collision_excess", (observed - expected) / max(expected, 1.0), float(observed), expected, counted)
    return FitTest(name, float(observed), expected, float(observed), p_upper, p_lower, method, effect, details)


def expected_max_abs_normal(count: int) -> float:
    """Expected largest absolute value among ``count`` independent standard normal variables.

    E max_i |Z_i| = ∫_0^∞ (1 − (2Φ(x) − 1)^k) dx, by the trapezoidal rule on a fine grid (error below 1e-8 for k up
    to 10^6); k = 0 gives 0.

    References
    ----------
    H. A. David, H. N. Nagaraja, Order Statistics, 3rd ed., Wiley 2003, §3.1 (the mean of a maximum from its
    distribution function); 2Φ(x) − 1 = erf(x/√2) is the distribution function of |Z|.
    """
    k = int(count)
    if k <= 0:
        return 0.0
    upper = math.sqrt(2.0 * math.log(k + 1.0)) + 10.0
    x = np.linspace(0.0, upper, 40001)
    with np.errstate(divide="ignore"):  # log1p(-1) = -inf at x = 0, where the integrand is exactly 1
        integrand = -np.expm1(k * np.log1p(-special.erfc(x / math.sqrt(2.0))))
    return float(np.trapezoid(integrand, x))
