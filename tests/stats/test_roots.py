"""Brent's method of ``hashaudit.stats._roots`` against ``scipy.optimize.brentq``: the same root to the last bit
(the fullest-bucket law's p-values, and so the reports, must not change with the root finder)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize

from hashaudit.stats._roots import brent_root
from hashaudit.stats.maxload import _truncated_mean

RTOL = 4 * np.finfo(float).eps


def _cases() -> list[tuple[str, object, float, float]]:
    rng = np.random.default_rng(2024)
    cases: list[tuple[str, object, float, float]] = []
    for i in range(300):
        c, p = rng.uniform(-5, 5), int(rng.integers(1, 8))
        cases.append(
            (f"power {i}", lambda x, c=c, p=p: (x - c) ** p - 0.3 * c if p % 2 else (x - c) ** p - 1.0, c, c + 3.0)
        )
    for i in range(300):
        r = rng.uniform(0.1, 50)
        cases.append((f"transcendental {i}", lambda x, r=r: math.exp(x / r) - r * math.cos(x) - r, -2.0, 4.0 * r))
    for i in range(300):  # extremely flat and extremely steep
        s = 10.0 ** rng.uniform(-12, 12)
        cases.append((f"scaled {i}", lambda x, s=s: s * math.atan(x - 0.37), -3.0, 9.0))
    return cases


@pytest.mark.parametrize("xtol", [2e-12, 1e-15, 1e-6])
def test_the_same_root_as_scipy_to_the_last_bit(xtol: float) -> None:
    compared = 0
    for name, f, a, b in _cases():
        try:
            expected = optimize.brentq(f, a, b, xtol=xtol, rtol=RTOL, maxiter=500)
        except (ValueError, RuntimeError) as scipy_error:
            with pytest.raises(type(scipy_error)):
                brent_root(f, a, b, xtol, RTOL, 500)
            continue
        assert brent_root(f, a, b, xtol, RTOL, 500).hex() == expected.hex(), name
        compared += 1
    assert compared > 700


def test_the_roots_the_fullest_bucket_law_takes() -> None:
    """The tilt of the max-load law (``maxload._tilt``): the truncated Poisson mean equal to the load, for loads
    and ceilings an audit meets (up to 2^24 keys per bucket on average)."""
    rng = np.random.default_rng(7)
    for _ in range(400):
        load = float(10.0 ** rng.uniform(-3, 7))
        k = int(math.ceil(load + rng.uniform(0.5, 8) * math.sqrt(load) + 1))
        upper = max(2.0 * load, load + 1.0, 2.0 * k / (k - load))
        while _truncated_mean(upper, k) <= load:
            upper *= 2.0

        def f(x: float, k: int = k, load: float = load) -> float:
            return _truncated_mean(math.exp(x), k) - load

        if f(math.log(load)) * f(math.log(upper)) >= 0:
            continue
        expected = optimize.brentq(f, math.log(load), math.log(upper), xtol=1e-15, rtol=RTOL, maxiter=500)
        assert brent_root(f, math.log(load), math.log(upper), 1e-15, RTOL, 500).hex() == expected.hex()


def test_errors() -> None:
    with pytest.raises(ValueError, match="different signs"):
        brent_root(lambda x: x * x + 1, -1.0, 1.0, 1e-12, RTOL)
    with pytest.raises(RuntimeError, match="converge"):
        brent_root(lambda x: math.atan(1000 * (x - 0.1234)), 0.0, 1.0, 1e-15, RTOL, maxiter=3)
    with pytest.raises(ValueError, match="xtol"):
        brent_root(lambda x: x, -1.0, 1.0, 0.0, RTOL)
    assert brent_root(lambda x: x, 0.0, 1.0, 1e-12, RTOL) == 0.0
