"""CRC-32 and CRC-32C kernels against ``zlib`` (standard library), the ``crc32c`` package and standard check values."""

from __future__ import annotations

import zlib

import crc32c as crc32c_pkg
import numpy as np
import pytest

from hashaudit.hashes.crc import (
    CRC32_POLY_REFLECTED,
    CRC32C_POLY_REFLECTED,
    crc32,
    crc32c,
    slicing_tables,
)
from hashaudit.keys.batch import KeyBatch

SEEDS = [0, 1, 2**31 + 7, 2**32 - 1]
MAX_LENGTH = 300
KEYS_PER_LENGTH = 10

# (kernel, outside reference taking (data, starting value), reflected polynomial)
VARIANTS = {
    "crc32": (crc32, zlib.crc32, CRC32_POLY_REFLECTED),
    "crc32c": (crc32c, crc32c_pkg.crc32c, CRC32C_POLY_REFLECTED),
}


def _random_keys(seed: int) -> list[bytes]:
    rng = np.random.default_rng(seed)
    return [rng.bytes(length) for length in range(MAX_LENGTH + 1) for _ in range(KEYS_PER_LENGTH)]


@pytest.fixture(scope="module")
def keys() -> list[bytes]:
    return _random_keys(31337)


@pytest.mark.parametrize("variant", sorted(VARIANTS))
@pytest.mark.parametrize("seed", SEEDS)
def test_matches_reference(keys: list[bytes], variant: str, seed: int) -> None:
    kernel, reference, _ = VARIANTS[variant]
    out = kernel(KeyBatch.from_keys(keys), seed)
    assert out.dtype == np.uint64 and out.shape == (len(keys),)
    assert out.tolist() == [reference(k, seed) for k in keys]


def test_check_values() -> None:
    # check values of "123456789": CRC-32/ISO-HDLC 0xCBF43926 and CRC-32/ISCSI 0xE3069283, from the
    # catalogue of parametrised CRC algorithms (Cook); CRC-32C per RFC 3720
    batch = KeyBatch.from_keys([b"123456789"])
    assert int(crc32(batch)[0]) == 0xCBF43926
    assert int(crc32c(batch)[0]) == 0xE3069283


@pytest.mark.parametrize(
    ("message", "expected"),
    [
        # RFC 3720 appendix B.4, CRC-32C examples (the RFC lists the CRC bytes least significant first)
        (bytes(32), 0x8A9136AA),
        (b"\xff" * 32, 0x62A8AB43),
        (bytes(range(32)), 0x46DD794E),
        (bytes(range(31, -1, -1)), 0x113FDB5C),
    ],
)
def test_crc32c_rfc3720_examples(message: bytes, expected: int) -> None:
    assert int(crc32c(KeyBatch.from_keys([message]))[0]) == expected


@pytest.mark.parametrize("variant", sorted(VARIANTS))
def test_tables_against_reference(variant: str) -> None:
    _, reference, poly = VARIANTS[variant]
    tables = slicing_tables(poly)
    assert tables.dtype == np.uint32 and tables.shape == (8, 256)
    # table k, entry b: the register after byte b then k zero bytes, starting from a zero register; a
    # starting value of 0xFFFFFFFF presets the reference's register to zero, and its final inversion is undone
    for k in range(8):
        expected = [reference(bytes([b]) + bytes(k), 0xFFFFFFFF) ^ 0xFFFFFFFF for b in range(256)]
        assert tables[k].tolist() == expected


def test_first_table_entries() -> None:
    # first entries of the byte-wise tables as printed in zlib's crc32.h and RFC 3720 B.4 (from memory)
    assert slicing_tables(CRC32_POLY_REFLECTED)[0, :4].tolist() == [0, 0x77073096, 0xEE0E612C, 0x990951BA]
    assert slicing_tables(CRC32C_POLY_REFLECTED)[0, :4].tolist() == [0, 0xF26B8303, 0xE13B70F7, 0x1350F3F4]


@pytest.mark.parametrize("variant", sorted(VARIANTS))
def test_seed_continues_a_crc(keys: list[bytes], variant: str) -> None:
    # the seed is the CRC of earlier data, so hashing a suffix from the prefix's CRC gives the whole CRC
    kernel, _, _ = VARIANTS[variant]
    rng = np.random.default_rng(7)
    for key in keys[::97]:
        cut = int(rng.integers(0, len(key) + 1))
        prefix_crc = int(kernel(KeyBatch.from_keys([key[:cut]]))[0])
        assert kernel(KeyBatch.from_keys([key[cut:]]), prefix_crc)[0] == kernel(KeyBatch.from_keys([key]))[0]


@pytest.mark.parametrize("variant", sorted(VARIANTS))
def test_seed_is_taken_modulo_2_32(keys: list[bytes], variant: str) -> None:
    kernel, _, _ = VARIANTS[variant]
    batch = KeyBatch.from_keys(keys[::7])
    for seed in (2**32 + 5, -1, 2**100 + 3):
        np.testing.assert_array_equal(kernel(batch, seed), kernel(batch, seed % 2**32))


@pytest.mark.parametrize("variant", sorted(VARIANTS))
@pytest.mark.parametrize("lead", [1, 3, 13])
def test_batch_inside_larger_buffer(keys: list[bytes], variant: str, lead: int) -> None:
    kernel, _, _ = VARIANTS[variant]
    inner = KeyBatch.from_keys(keys)
    data = np.concatenate([np.full(lead, 0xA5, np.uint8), inner.data, np.full(7, 0x5A, np.uint8)])
    shifted = KeyBatch(data, inner.offsets + lead)
    np.testing.assert_array_equal(kernel(shifted, 12345), kernel(inner, 12345))


@pytest.mark.parametrize("variant", sorted(VARIANTS))
def test_slice_of_batch(keys: list[bytes], variant: str) -> None:
    kernel, reference, _ = VARIANTS[variant]
    sub = KeyBatch.from_keys(keys).slice(1234, 2345)
    assert sub.offsets[0] > 0
    assert kernel(sub, 9).tolist() == [reference(k, 9) for k in keys[1234:2345]]


@pytest.mark.parametrize("variant", sorted(VARIANTS))
def test_read_only_buffer(keys: list[bytes], variant: str) -> None:
    kernel, reference, _ = VARIANTS[variant]
    batch = KeyBatch.from_keys(keys[:500])
    batch.data.flags.writeable = False
    assert kernel(batch, 5).tolist() == [reference(k, 5) for k in keys[:500]]


def test_empty_batch() -> None:
    assert crc32(KeyBatch.from_keys([])).shape == (0,)
    assert crc32c(KeyBatch.from_keys([b""])).tolist() == [0]
