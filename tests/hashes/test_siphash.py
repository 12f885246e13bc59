"""SipHash-2-4 kernel against a plain-Python SipHash-2-4 written from the paper, and the paper's test vector.

Reference: J.-P. Aumasson, D. J. Bernstein, "SipHash: a fast short-input PRF", INDOCRYPT 2012.
"""

from __future__ import annotations

import numpy as np
import pytest

from hashaudit.hashes.siphash import siphash24
from hashaudit.keys.batch import KeyBatch

MASK64 = (1 << 64) - 1
MAX_LENGTH = 300
KEYS_PER_LENGTH = 10
SEEDS = [0, 1, 2**31 + 7, 2**32 - 1, 2**64 - 1, 2**64, 2**127 + 2**63 + 5, 2**128 - 1]


def _rotl(x: int, r: int) -> int:
    return ((x << r) | (x >> (64 - r))) & MASK64


def _sip_round(v0: int, v1: int, v2: int, v3: int) -> tuple[int, int, int, int]:
    v0 = (v0 + v1) & MASK64
    v1 = _rotl(v1, 13) ^ v0
    v0 = _rotl(v0, 32)
    v2 = (v2 + v3) & MASK64
    v3 = _rotl(v3, 16) ^ v2
    v0 = (v0 + v3) & MASK64
    v3 = _rotl(v3, 21) ^ v0
    v2 = (v2 + v1) & MASK64
    v1 = _rotl(v1, 17) ^ v2
    v2 = _rotl(v2, 32)
    return v0, v1, v2, v3


def reference_siphash24(key: bytes, message: bytes) -> int:
    """SipHash-2-4 straight from the paper's description: 16-byte key, output as a little-endian integer."""
    assert len(key) == 16
    k0 = int.from_bytes(key[:8], "little")
    k1 = int.from_bytes(key[8:], "little")
    v0 = k0 ^ 0x736F6D6570736575
    v1 = k1 ^ 0x646F72616E646F6D
    v2 = k0 ^ 0x6C7967656E657261
    v3 = k1 ^ 0x7465646279746573
    # pad to a multiple of 8 bytes with zeros, the last byte being the length modulo 256
    padded = message + bytes(7 - len(message) % 8) + bytes([len(message) % 256])
    for start in range(0, len(padded), 8):
        m = int.from_bytes(padded[start : start + 8], "little")
        v3 ^= m
        for _ in range(2):
            v0, v1, v2, v3 = _sip_round(v0, v1, v2, v3)
        v0 ^= m
    v2 ^= 0xFF
    for _ in range(4):
        v0, v1, v2, v3 = _sip_round(v0, v1, v2, v3)
    return v0 ^ v1 ^ v2 ^ v3


def _seed_key(seed: int) -> bytes:
    return (seed % 2**128).to_bytes(16, "little")


def _random_keys(seed: int) -> list[bytes]:
    rng = np.random.default_rng(seed)
    return [rng.bytes(length) for length in range(MAX_LENGTH + 1) for _ in range(KEYS_PER_LENGTH)]


@pytest.fixture(scope="module")
def keys() -> list[bytes]:
    return _random_keys(424242)


PAPER_KEY = bytes(range(16))
PAPER_MESSAGE = bytes(range(15))
# Aumasson & Bernstein 2012, appendix A: key 00..0f, message 00..0e gives a129ca6149be45e5 (value from memory)
PAPER_OUTPUT = 0xA129CA6149BE45E5


def test_reference_matches_paper_vector() -> None:
    assert reference_siphash24(PAPER_KEY, PAPER_MESSAGE) == PAPER_OUTPUT


def test_reference_matches_empty_message_vector() -> None:
    # first entry of the reference implementation's vector table (key 00..0f, empty message):
    # bytes 31 0e 0e dd 47 db 6f 72, from memory
    assert reference_siphash24(PAPER_KEY, b"") == 0x726FDB47DD0E0E31


def test_kernel_matches_paper_vector() -> None:
    seed = int.from_bytes(PAPER_KEY, "little")
    assert int(siphash24(KeyBatch.from_keys([PAPER_MESSAGE]), seed)[0]) == PAPER_OUTPUT


@pytest.mark.parametrize("seed", SEEDS)
def test_kernel_matches_reference(keys: list[bytes], seed: int) -> None:
    out = siphash24(KeyBatch.from_keys(keys), seed)
    assert out.dtype == np.uint64 and out.shape == (len(keys),)
    key = _seed_key(seed)
    assert out.tolist() == [reference_siphash24(key, k) for k in keys]


def test_kernel_matches_reference_random_seeds() -> None:
    rng = np.random.default_rng(99)
    messages = [rng.bytes(int(n)) for n in rng.integers(0, 64, 400)]
    batch = KeyBatch.from_keys(messages)
    for _ in range(20):
        seed = int.from_bytes(rng.bytes(16), "little")
        key = _seed_key(seed)
        assert siphash24(batch, seed).tolist() == [reference_siphash24(key, m) for m in messages]


def test_kernel_matches_siphashc(keys: list[bytes]) -> None:
    # a second, independent reference: the C extension from PyPI, when installed (not a project dependency)
    siphashc = pytest.importorskip("siphashc")
    batch = KeyBatch.from_keys(keys)
    for seed in (0, 2**128 - 1, 0x0123456789ABCDEF_FEDCBA9876543210):
        key = _seed_key(seed)
        assert siphash24(batch, seed).tolist() == [siphashc.siphash(key, k) for k in keys]


def test_seed_is_taken_modulo_2_128(keys: list[bytes]) -> None:
    batch = KeyBatch.from_keys(keys[::7])
    for seed in (2**128 + 5, -1, 2**200 + 3):
        np.testing.assert_array_equal(siphash24(batch, seed), siphash24(batch, seed % 2**128))
    # both key halves matter
    assert not np.array_equal(siphash24(batch, 1), siphash24(batch, 0))
    assert not np.array_equal(siphash24(batch, 1 << 64), siphash24(batch, 0))


@pytest.mark.parametrize("lead", [1, 3, 13])
def test_batch_inside_larger_buffer(keys: list[bytes], lead: int) -> None:
    inner = KeyBatch.from_keys(keys)
    data = np.concatenate([np.full(lead, 0xA5, np.uint8), inner.data, np.full(7, 0x5A, np.uint8)])
    shifted = KeyBatch(data, inner.offsets + lead)
    np.testing.assert_array_equal(siphash24(shifted, 2**100 + 1), siphash24(inner, 2**100 + 1))


def test_slice_of_batch(keys: list[bytes]) -> None:
    sub = KeyBatch.from_keys(keys).slice(1234, 2345)
    assert sub.offsets[0] > 0
    key = _seed_key(77)
    assert siphash24(sub, 77).tolist() == [reference_siphash24(key, k) for k in keys[1234:2345]]


def test_read_only_buffer(keys: list[bytes]) -> None:
    batch = KeyBatch.from_keys(keys[:500])
    batch.data.flags.writeable = False
    key = _seed_key(5)
    assert siphash24(batch, 5).tolist() == [reference_siphash24(key, k) for k in keys[:500]]


def test_empty_batch() -> None:
    assert siphash24(KeyBatch.from_keys([])).shape == (0,)
    assert siphash24(KeyBatch.from_keys([b""]), int.from_bytes(PAPER_KEY, "little")).tolist() == [0x726FDB47DD0E0E31]
