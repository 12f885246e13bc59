"""Table sizes: the defaults an audit derives from the key count, and primes for ``mod`` tables."""

from __future__ import annotations

import math

from hashaudit.settings import parse_size
from hashaudit.tables.schemes import is_power_of_two

__all__ = ["auto_sizes", "is_prime", "parse_size", "prime_above"]

DEFAULT_LOAD_FACTORS = (0.5, 1.0, 2.0)
MAX_AUTO_BUCKETS = 1 << 22  # 32 MiB of counts per table; memory stays flat however many keys there are
MIN_AUTO_BUCKETS = 2


def is_prime(n: int) -> bool:
    """Deterministic Miller-Rabin for n < 3.3e24 (bases 2..41; Sorenson & Webster 2015)."""
    if n < 2:
        return False
    small = (2, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37, 41)
    for p in small:
        if n % p == 0:
            return n == p
    d, r = n - 1, 0
    while d % 2 == 0:
        d //= 2
        r += 1
    for a in small:
        x = pow(a, d, n)
        if x in (1, n - 1):
            continue
        for _ in range(r - 1):
            x = x * x % n
            if x == n - 1:
                break
        else:
            return False
    return True


def prime_below(n: int) -> int:
    """The largest prime ≤ n (n ≥ 2)."""
    candidate = n
    while candidate >= 2 and not is_prime(candidate):
        candidate -= 1
    return candidate


def prime_above(n: int) -> int:
    """The smallest prime ≥ n."""
    candidate = max(n, 2)
    while not is_prime(candidate):
        candidate += 1
    return candidate


def auto_sizes(keys: int) -> tuple[list[int], list[int]]:
    """Default table sizes for ``keys`` keys: powers of two at load factors near 0.5, 1 and 2, and a prime near
    the load factor 1 size. Returns ``(powers_of_two, primes)``; sizes are capped at ``MAX_AUTO_BUCKETS``."""
    powers: list[int] = []
    for load in DEFAULT_LOAD_FACTORS:
        target = max(keys / load, 1.0)
        size = 1 << max(0, round(math.log2(target)))
        size = min(max(size, MIN_AUTO_BUCKETS), MAX_AUTO_BUCKETS)
        if size not in powers:
            powers.append(size)
    powers.sort()
    middle = min(max(1 << max(0, round(math.log2(max(keys, 1)))), MIN_AUTO_BUCKETS), MAX_AUTO_BUCKETS)
    primes = [prime_below(middle)] if middle >= 3 else []
    assert all(is_power_of_two(p) for p in powers)
    return powers, primes
