"""``String.hashCode`` of UTF-8 keys, ``Math.abs(h % n)`` and ``HashMap`` buckets, bit for bit.

Reference: a plain-Python evaluation of the formula of the Java SE API documentation of
``String.hashCode``, ``s[0]*31^(n-1) + ... + s[n-1]`` modulo 2^32 over the UTF-16 code units of
``key.decode("utf-8", "replace").encode("utf-16-le")``; as a sum of powers, not the kernel's Horner loop. It
runs at a few microseconds per key, so every comparison uses all 100,000 keys of the shared set.
"""

from __future__ import annotations

import array
import sys

import numpy as np
import pytest

from hashaudit.keys.batch import KeyBatch
from hashaudit.placements import jvm

_MASK = 0xFFFFFFFF
_MAX_UNITS = 4096  # no more UTF-16 units than bytes: the longest generated key has 4096 bytes
# 31^k modulo 2^32, the weights of the formula
_POWERS = [pow(31, k, 1 << 32) for k in range(_MAX_UNITS + 1)]


def _utf16_units(key: bytes) -> array.array:
    units = array.array("H", key.decode("utf-8", "replace").encode("utf-16-le"))
    if sys.byteorder == "big":
        units.byteswap()
    return units


def java_string_hashcode(key: bytes) -> int:
    """``s[0]*31^(n-1) + ... + s[n-1]`` as a Java ``int``, over the UTF-16 units of the UTF-8 key."""
    units = _utf16_units(key)
    n = len(units)
    h = sum(u * p for u, p in zip(units, _POWERS[n - 1 :: -1] if n else [], strict=True)) & _MASK
    return h - (1 << 32) if h >= 1 << 31 else h


def java_abs_rem(h: int, n: int) -> int:
    """``Math.abs(h % n)`` with Java's truncating ``%`` (Java SE Language Specification 15.17.3)."""
    remainder = abs(h) % n
    return abs(-remainder if h < 0 else remainder)


@pytest.fixture(scope="module")
def reference_hashcodes(placement_keys: list[bytes]) -> list[int]:
    return [java_string_hashcode(k) for k in placement_keys]


def test_hashcode_matches_the_formula(placement_batch: KeyBatch, reference_hashcodes: list[int]) -> None:
    out = jvm.string_hashcode(placement_batch)
    assert out.dtype == np.int32 and out.shape == (len(reference_hashcodes),)
    assert out.tolist() == reference_hashcodes


# computed by the formula of the Java SE API documentation of String.hashCode; the first five are common
# knowledge ("Aa" and "BB" are the classic colliding pair)
PUBLISHED_HASHCODES = [
    ("", 0),
    ("a", 97),
    ("hello", 99162322),
    ("Aa", 2112),
    ("BB", 2112),
    ("polygenelubricants", -(2**31)),  # a widely quoted string whose hash code is Integer.MIN_VALUE
    ("\U0001f600", 31 * 0xD83D + 0xDE00),  # U+1F600: the surrogate pair D83D DE00
    ("\u00e9", 0xE9),  # one unit for a 2-byte UTF-8 character
    ("\u20ac", 0x20AC),  # one unit for a 3-byte UTF-8 character
]


def test_published_values() -> None:
    keys = [s.encode("utf-8") for s, _ in PUBLISHED_HASHCODES]
    expected = [v for _, v in PUBLISHED_HASHCODES]
    assert jvm.string_hashcode(KeyBatch.from_keys(keys)).tolist() == expected
    assert [java_string_hashcode(k) for k in keys] == expected  # the reference agrees


# ill-formed UTF-8 and the characters Python's "replace" decoding gives (one U+FFFD per maximal subpart)
ILL_FORMED = [
    (b"\xe2\x82", "\ufffd"),  # truncated 3-byte sequence at the end: one
    (b"\xe2\x82A", "\ufffdA"),  # truncated before ASCII: one, and the ASCII byte survives
    (b"\xed\xa0\x80", "\ufffd" * 3),  # encoded surrogate: ED then A0, 80 each on their own
    (b"\xc0\xaf", "\ufffd" * 2),  # overlong "/": C0 can never start a sequence
    (b"\xe0\x80\x80", "\ufffd" * 3),  # overlong 3-byte form
    (b"\xf4\x90\x80\x80", "\ufffd" * 4),  # above U+10FFFF
    (b"\xf0\x9f\x98", "\ufffd"),  # truncated 4-byte sequence
    (b"\xf0\x9f\x98\xf0\x9f\x98\x80", "\ufffd\U0001f600"),  # truncated, then a whole one
    (b"\x80\xbf", "\ufffd" * 2),  # stray continuation bytes
    (b"\xf5\xff", "\ufffd" * 2),  # bytes that never occur in UTF-8
]


@pytest.mark.parametrize(("key", "decoded"), ILL_FORMED)
def test_ill_formed_utf8_is_replaced_per_maximal_subpart(key: bytes, decoded: str) -> None:
    assert key.decode("utf-8", "replace") == decoded  # the rule is Python's
    expected = jvm.string_hashcode(KeyBatch.from_keys([decoded.encode("utf-8")])).tolist()
    assert jvm.string_hashcode(KeyBatch.from_keys([key])).tolist() == expected


@pytest.mark.parametrize("n", [1, 2, 3, 10, 16, 1000, 2**31 - 1])
def test_hashcode_mod(placement_batch: KeyBatch, reference_hashcodes: list[int], n: int) -> None:
    out = jvm.hashcode_mod(placement_batch, n)
    assert out.dtype == np.int64
    assert out.tolist() == [java_abs_rem(h, n) for h in reference_hashcodes]


def test_hashcode_mod_of_integer_min_value() -> None:
    # Math.abs(Integer.MIN_VALUE % 10) == Math.abs(-8) == 8; no overflow since the remainder is small
    assert jvm.hashcode_mod(KeyBatch.from_keys([b"polygenelubricants"]), 10).tolist() == [8]


@pytest.mark.parametrize("table_size", [1, 16, 1024, 2**30])
def test_hashmap_spread_and_bucket(placement_batch: KeyBatch, reference_hashcodes: list[int], table_size: int) -> None:
    # java.util.HashMap.hash: h ^ (h >>> 16); bucket (n - 1) & hash
    spread = [(h & _MASK) ^ ((h & _MASK) >> 16) for h in reference_hashcodes]
    out = jvm.hashmap_spread(placement_batch)
    assert out.dtype == np.uint32 and out.tolist() == spread
    bucket = jvm.hashmap_bucket(placement_batch, table_size)
    assert bucket.dtype == np.int64 and bucket.tolist() == [s & (table_size - 1) for s in spread]


def test_errors_empty_batch_and_a_slice() -> None:
    batch = KeyBatch.from_keys([b"k"])
    for bad in (0, 3, 24, 2**31):
        with pytest.raises(ValueError, match="power of two"):
            jvm.hashmap_bucket(batch, bad)
    for bad in (0, -5, 2**31):
        with pytest.raises(ValueError, match="Java int"):
            jvm.hashcode_mod(batch, bad)
    empty = KeyBatch.from_keys([])
    assert jvm.string_hashcode(empty).dtype == np.int32 and len(jvm.hashmap_bucket(empty, 16)) == 0
    many = KeyBatch.from_keys(["k\u00e9y-\U0001f600-{n}".encode() for n in range(40)])
    assert jvm.string_hashcode(many.slice(5, 31)).tolist() == jvm.string_hashcode(many)[5:31].tolist()
