"""Bucketing schemes against plain-Python definitions with Python's arbitrary-precision integers."""

from __future__ import annotations

import numpy as np
import pytest

from hashaudit.errors import UsageError
from hashaudit.tables.schemes import add_counts, bucket_index, check_scheme, is_power_of_two
from hashaudit.tables.sizes import auto_sizes, is_prime, prime_below

RNG = np.random.default_rng(20261202)
H64 = np.concatenate(
    [RNG.integers(0, 2**64, size=5000, dtype=np.uint64), np.array([0, 1, 2**63, 2**64 - 1], dtype=np.uint64)]
)
H32 = H64 >> np.uint64(32)


def reference(h: int, scheme: str, m: int, width: int) -> int:
    # Definitions: Knuth TAOCP vol. 3 §6.4 (division, bit selection); Lemire 2019 (multiply-high reduction)
    if scheme == "mod":
        return h % m
    if scheme == "mask":
        return h & (m - 1)
    if scheme == "high":
        bits = m.bit_length() - 1
        return h >> (width - bits) if bits else 0
    return (h * m) >> width


@pytest.mark.parametrize("scheme", ["mod", "mask", "high", "range"])
@pytest.mark.parametrize("m", [1, 2, 1024, 1 << 20, 1 << 32])
@pytest.mark.parametrize("width", [32, 64])
def test_power_of_two_tables_match_reference(scheme, m, width):
    hashes = H64 if width == 64 else H32
    got = bucket_index(hashes, scheme, m, width)
    want = [reference(int(h), scheme, m, width) for h in hashes]
    assert got.tolist() == want
    assert int(got.max()) < m


@pytest.mark.parametrize("scheme", ["mod", "range"])
@pytest.mark.parametrize("m", [3, 1000, 65521, 4294967291, 3 * 2**30 + 1])
@pytest.mark.parametrize("width", [32, 64])
def test_any_size_tables_match_reference(scheme, m, width):
    hashes = H64 if width == 64 else H32
    got = bucket_index(hashes, scheme, m, width)
    assert got.tolist() == [reference(int(h), scheme, m, width) for h in hashes]


def test_128_bit_hashes_use_the_low_word():
    pairs = np.stack([H64, H64[::-1]], axis=1)
    assert np.array_equal(bucket_index(pairs, "mask", 4096, 128), bucket_index(H64, "mask", 4096, 64))


@pytest.mark.parametrize("scheme", ["mod", "mask", "high", "range"])
def test_add_counts_equals_bincount_of_indices(scheme):
    counts = np.zeros(4096, dtype=np.int64)
    add_counts(H64, scheme, 4096, 64, counts)
    assert np.array_equal(counts, np.bincount(bucket_index(H64, scheme, 4096, 64).astype(np.int64), minlength=4096))


@pytest.mark.parametrize(
    ("scheme", "m", "fragment"),
    [
        ("mask", 1000, "power-of-two"),
        ("high", 12, "power-of-two"),
        ("modulo", 16, "unknown scheme"),
        ("mod", 0, "positive integer"),
        ("mod", -5, "positive integer"),
        ("mod", 2**33, "maximum"),
    ],
)
def test_bad_scheme_or_size_is_a_usage_error(scheme, m, fragment):
    with pytest.raises(UsageError, match=fragment):
        check_scheme(scheme, m)


def test_sizes_helpers():
    assert is_power_of_two(1) and is_power_of_two(1 << 40) and not is_power_of_two(0) and not is_power_of_two(12)
    # primes below powers of two: 65521 < 2^16 and 4294967291 < 2^32 are the familiar largest primes
    # (common practice: used as table sizes and in Adler-32)
    assert prime_below(1 << 16) == 65521
    assert prime_below(1 << 32) == 4294967291
    assert [p for p in range(60) if is_prime(p)] == [2, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37, 41, 43, 47, 53, 59]
    assert not is_prime(3215031751)  # strong pseudoprime to bases 2, 3, 5, 7 (Pomerance, Selfridge, Wagstaff 1980)
    powers, primes = auto_sizes(100_000)
    assert powers == [1 << 16, 1 << 17, 1 << 18] and primes == [prime_below(1 << 17)]
    powers, primes = auto_sizes(10**9)
    assert max(powers) == 1 << 22  # capped so memory does not grow with the key count


def test_values_wider_than_the_declared_width_are_refused():
    """A 32-bit function's values must fit 32 bits: ``high`` and ``range`` read the top of the declared width, so
    a wider value would index past the table."""
    import numpy as np
    import pytest

    from hashaudit.errors import UsageError
    from hashaudit.tables.schemes import add_counts, bucket_index

    with pytest.raises(UsageError, match="wider than the declared 32 bits"):
        bucket_index(np.array([2**40], np.uint64), "high", 4, 32)
    with pytest.raises(UsageError, match="wider"):
        add_counts(np.array([2**33], np.uint64), "range", 4, 32, np.zeros(4, np.int64))
    assert bucket_index(np.array([2**32 - 1], np.uint64), "high", 4, 32).tolist() == [3]
