"""FNV, poly31, djb2, sdbm, the integer hashes and blake2b_64 against published values, hashlib and plain Python."""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from math import isqrt

import numpy as np
import pyarrow as pa
import pytest

from hashaudit.hashes import fnv, integer, reference
from hashaudit.keys.batch import KeyBatch

MASK32 = 2**32 - 1
MASK64 = 2**64 - 1

# FNV parameters as published in draft-eastlake-fnv (Fowler, Noll, Vo, Eastlake, Hansen), written out here
# rather than imported, so the kernels are checked against the draft and not against themselves
FNV_PRIME = {32: 2**24 + 2**8 + 0x93, 64: 2**40 + 2**8 + 0xB3}  # 16777619, 1099511628211
FNV_OFFSET = {32: 2166136261, 64: 14695981039346656037}

FNV_KERNELS: dict[str, tuple[Callable[[KeyBatch, int], np.ndarray], int, bool]] = {
    # name: (kernel, bits, FNV-1a rather than FNV-1)
    "fnv1_32": (fnv.fnv1_32, 32, False),
    "fnv1a_32": (fnv.fnv1a_32, 32, True),
    "fnv1_64": (fnv.fnv1_64, 64, False),
    "fnv1a_64": (fnv.fnv1a_64, 64, True),
}


def _random_keys(seed: int, count: int = 3000, max_length: int = 300) -> list[bytes]:
    rng = np.random.default_rng(seed)
    return [rng.bytes(int(n)) for n in rng.integers(0, max_length + 1, size=count)]


@pytest.fixture(scope="module")
def keys() -> list[bytes]:
    # every length 0..300 at least once, then random lengths
    rng = np.random.default_rng(8675309)
    return [rng.bytes(n) for n in range(301)] + _random_keys(8675310)


def _hash_one(kernel: Callable[[KeyBatch, int], np.ndarray], key: bytes) -> int:
    return int(kernel(KeyBatch.from_keys([key]), 0)[0])


# ---------------------------------------------------------------------------------------------------------------
# plain-Python references of the textbook definitions


def fnv_reference(key: bytes, bits: int, variant_a: bool, offset: int | None = None) -> int:
    mask = 2**bits - 1
    h = FNV_OFFSET[bits] if offset is None else offset
    for byte in key:
        if variant_a:
            h = ((h ^ byte) * FNV_PRIME[bits]) & mask
        else:
            h = ((h * FNV_PRIME[bits]) & mask) ^ byte
    return h


def poly31_reference(key: bytes) -> int:
    h = 0
    for byte in key:
        h = (31 * h + byte) & MASK32
    return h


def djb2_reference(key: bytes) -> int:
    h = 5381
    for byte in key:
        h = (h * 33 + byte) & MASK32
    return h


def sdbm_reference(key: bytes) -> int:
    h = 0
    for byte in key:
        h = (byte + (h << 6) + (h << 16) - h) & MASK32
    return h


def java_string_hash_code(text: str) -> int:
    """``String.hashCode`` as Java computes it: s[0]*31^(n-1) + ... + s[n-1] in signed 32-bit arithmetic."""
    h = 0
    for char in text:
        h = (31 * h + ord(char)) & MASK32
    return h - 2**32 if h >= 2**31 else h


# ---------------------------------------------------------------------------------------------------------------
# FNV


@pytest.mark.parametrize(
    ("name", "text", "expected"),
    [
        # test vectors of draft-eastlake-fnv (from memory; each also equals fnv_reference, checked below)
        ("fnv1a_32", b"a", 0xE40C292C),
        ("fnv1a_32", b"foobar", 0xBF9CF968),
        ("fnv1a_64", b"a", 0xAF63DC4C8601EC8C),
        ("fnv1a_64", b"foobar", 0x85944171F73967E8),
        ("fnv1_32", b"a", 0x050C5D7E),
        ("fnv1_32", b"foobar", 0x31F0B262),
        ("fnv1_64", b"a", 0xAF63BD4C8601B7BE),
        ("fnv1_64", b"foobar", 0x340D8765A4DDA9C2),
        # the empty string hashes to the offset basis (draft-eastlake-fnv, offset_basis values)
        ("fnv1a_32", b"", 0x811C9DC5),
        ("fnv1_32", b"", 0x811C9DC5),
        ("fnv1a_64", b"", 0xCBF29CE484222325),
        ("fnv1_64", b"", 0xCBF29CE484222325),
    ],
)
def test_fnv_published_vectors(name: str, text: bytes, expected: int) -> None:
    kernel, bits, variant_a = FNV_KERNELS[name]
    assert _hash_one(kernel, text) == expected
    assert fnv_reference(text, bits, variant_a) == expected


@pytest.mark.parametrize("bits", [32, 64])
def test_fnv_offset_basis_is_fnv0_of_signature(bits: int) -> None:
    # draft-eastlake-fnv: the offset basis is the FNV-0 hash (FNV-1 from 0) of this 32-byte string (from memory)
    signature = b"chongo <Landon Curt Noll> /\\../\\"
    assert len(signature) == 32
    assert fnv_reference(signature, bits, variant_a=False, offset=0) == FNV_OFFSET[bits]
    assert FNV_OFFSET[bits] == {32: fnv.FNV32_OFFSET, 64: fnv.FNV64_OFFSET}[bits]
    assert FNV_PRIME[bits] == {32: fnv.FNV32_PRIME, 64: fnv.FNV64_PRIME}[bits]


@pytest.mark.parametrize("name", sorted(FNV_KERNELS))
def test_fnv_matches_reference(keys: list[bytes], name: str) -> None:
    kernel, bits, variant_a = FNV_KERNELS[name]
    out = kernel(KeyBatch.from_keys(keys), 0)
    assert out.dtype == np.uint64 and out.shape == (len(keys),)
    assert out.tolist() == [fnv_reference(k, bits, variant_a) for k in keys]


# ---------------------------------------------------------------------------------------------------------------
# poly31, djb2, sdbm


@pytest.mark.parametrize(
    ("text", "java_value"),
    [
        ("hello", 99162322),  # "hello".hashCode() (from memory)
        ("", 0),  # Java API docs: the hash of the empty string is zero
        ("Aa", 2112),  # "Aa" and "BB" collide, the classic example (from memory)
        ("BB", 2112),
        ("polygenelubricants", -(2**31)),  # hashCode() is Integer.MIN_VALUE, a well-known curiosity (from memory)
    ],
)
def test_poly31_equals_java_string_hash_code(text: str, java_value: int) -> None:
    assert java_string_hash_code(text) == java_value
    # Java's int is signed; the kernel gives the same 32 bits as an unsigned value
    assert _hash_one(fnv.poly31, text.encode("ascii")) == java_value & MASK32


def test_poly31_equals_java_on_random_ascii() -> None:
    rng = np.random.default_rng(1998)
    texts = ["".join(chr(c) for c in rng.integers(32, 127, size=int(n))) for n in rng.integers(0, 60, size=500)]
    out = fnv.poly31(KeyBatch.from_keys([t.encode("ascii") for t in texts]), 0)
    assert out.tolist() == [java_string_hash_code(t) & MASK32 for t in texts]
    # a sign check: some of these overflow into Java's negative range
    assert any(java_string_hash_code(t) < 0 for t in texts)


@pytest.mark.parametrize(
    ("kernel", "reference_function"),
    [(fnv.poly31, poly31_reference), (fnv.djb2, djb2_reference), (fnv.sdbm, sdbm_reference)],
    ids=["poly31", "djb2", "sdbm"],
)
def test_multiply_add_hashes_match_reference(
    keys: list[bytes], kernel: Callable[[KeyBatch, int], np.ndarray], reference_function: Callable[[bytes], int]
) -> None:
    out = kernel(KeyBatch.from_keys(keys), 0)
    assert out.dtype == np.uint64 and out.shape == (len(keys),)
    assert out.tolist() == [reference_function(k) for k in keys]


def test_start_values() -> None:
    # textbook starting values: djb2 starts at 5381 (Bernstein), sdbm and poly31 at 0
    empty = KeyBatch.from_keys([b""])
    assert fnv.djb2(empty, 0).tolist() == [5381]
    assert fnv.sdbm(empty, 0).tolist() == [0]
    assert fnv.poly31(empty, 0).tolist() == [0]
    # one byte: djb2 = 5381*33 + c, sdbm = c
    assert fnv.djb2(KeyBatch.from_keys([b"a"]), 0).tolist() == [5381 * 33 + 97]
    assert fnv.sdbm(KeyBatch.from_keys([b"a"]), 0).tolist() == [97]


def test_sdbm_is_multiplication_by_65599(keys: list[bytes]) -> None:
    # (h << 6) + (h << 16) - h = 65599 h: the shift form is the multiplier 65599 written out (arithmetic identity)
    def times_65599(key: bytes) -> int:
        h = 0
        for byte in key:
            h = (h * 65599 + byte) & MASK32
        return h

    assert fnv.sdbm(KeyBatch.from_keys(keys[:800]), 0).tolist() == [times_65599(k) for k in keys[:800]]


# ---------------------------------------------------------------------------------------------------------------
# the string kernels on buffers the way sources hand them over


STRING_KERNELS = {
    "fnv1_32": fnv.fnv1_32,
    "fnv1a_32": fnv.fnv1a_32,
    "fnv1_64": fnv.fnv1_64,
    "fnv1a_64": fnv.fnv1a_64,
    "poly31": fnv.poly31,
    "djb2": fnv.djb2,
    "sdbm": fnv.sdbm,
}


@pytest.mark.parametrize("name", sorted(STRING_KERNELS))
def test_read_only_arrow_slice(keys: list[bytes], name: str) -> None:
    # a zero-copy view of a pyarrow array sliced at 17 (non-zero array offset); sources may hand over
    # buffers numpy cannot write to, so the data is made read-only here
    kernel = STRING_KERNELS[name]
    array = pa.array(keys[:600], type=pa.large_binary()).slice(17)
    batch = KeyBatch.from_arrow(array)
    batch.data.flags.writeable = False
    assert batch.offsets[0] > 0
    np.testing.assert_array_equal(kernel(batch, 0), kernel(KeyBatch.from_keys(keys[17:600]), 0))


# ---------------------------------------------------------------------------------------------------------------
# identity and fibonacci


def test_golden_multiplier_is_two_to_64_over_phi() -> None:
    # Knuth, TAOCP vol. 3, §6.4: A = 2^64 / phi for w = 2^64. 2^64/phi = 2^63 (sqrt 5 - 1), whose floor is
    # isqrt(5 * 2^126) - 2^63 because 2^63 is an integer; Knuth also asks for A odd
    assert integer.GOLDEN_MULTIPLIER == isqrt(5 << 126) - 2**63 == 11400714819323198485
    assert integer.GOLDEN_MULTIPLIER % 2 == 1


@pytest.fixture(scope="module")
def integers() -> np.ndarray:
    rng = np.random.default_rng(271828)
    edges = np.array([0, 1, 2, 255, 256, 2**32 - 1, 2**32, 2**63, 2**64 - 1], dtype=np.uint64)
    return np.concatenate([edges, rng.integers(0, 2**64, size=5000, dtype=np.uint64, endpoint=False)])


def test_identity_on_uint64_keys(integers: np.ndarray) -> None:
    out = integer.identity(KeyBatch.from_uint64(integers), 0)
    assert out.dtype == np.uint64
    np.testing.assert_array_equal(out, integers)
    assert out.tolist() == [int.from_bytes(k, "little") for k in KeyBatch.from_uint64(integers).to_list()]


def test_fibonacci_on_uint64_keys(integers: np.ndarray) -> None:
    # Knuth, TAOCP vol. 3, §6.4, multiplicative hashing: h(K) = A*K mod w, w = 2^64, computed with Python ints
    out = integer.fibonacci(KeyBatch.from_uint64(integers), 0)
    assert out.dtype == np.uint64
    assert out.tolist() == [(v * 11400714819323198485) % 2**64 for v in integers.tolist()]


def test_integer_hashes_on_short_and_long_keys() -> None:
    # keys shorter than 8 bytes are zero-padded little-endian integers; longer keys use their first 8 bytes
    rng = np.random.default_rng(314159)
    keys = [rng.bytes(int(n)) for n in rng.integers(0, 17, size=3000)]
    expected = [int.from_bytes(k[:8], "little") for k in keys]
    batch = KeyBatch.from_keys(keys)
    assert integer.identity(batch, 0).tolist() == expected
    assert integer.fibonacci(batch, 0).tolist() == [(v * 11400714819323198485) % 2**64 for v in expected]
    batch.data.flags.writeable = False  # as zero-copy views of Arrow buffers may be
    assert integer.identity(batch, 0).tolist() == expected
    assert integer.identity(KeyBatch.from_keys([b"\x01\x02", b"", b"\xff"]), 0).tolist() == [0x0201, 0, 0xFF]


@pytest.mark.parametrize("lead", [1, 3, 8])
def test_integer_hashes_on_unaligned_slices(integers: np.ndarray, lead: int) -> None:
    # the fast path for all-8-byte keys must honour offsets[0] and an unaligned start of the words
    inner = KeyBatch.from_uint64(integers)
    data = np.concatenate([np.full(lead, 0xAB, np.uint8), inner.data])
    data.flags.writeable = False  # as zero-copy views of Arrow buffers may be
    shifted = KeyBatch(data, inner.offsets + lead).slice(3, 4003)
    assert shifted.offsets[0] == 24 + lead
    np.testing.assert_array_equal(integer.identity(shifted, 0), integers[3:4003])
    expected = [(v * 11400714819323198485) % 2**64 for v in integers[3:4003].tolist()]
    assert integer.fibonacci(shifted, 0).tolist() == expected


def test_identity_result_is_not_a_view_of_the_input(integers: np.ndarray) -> None:
    batch = KeyBatch.from_uint64(integers.copy())
    out = integer.identity(batch, 0)
    out[:] = 0
    assert batch.to_list()[1] == (1).to_bytes(8, "little")


# ---------------------------------------------------------------------------------------------------------------
# blake2b_64 (hashlib, standard library, is the outside reference)


def _blake2b_64_reference(key: bytes, blake2_key: bytes = b"") -> int:
    return int.from_bytes(hashlib.blake2b(key, digest_size=8, key=blake2_key).digest(), "little")


def test_blake2b_64_unseeded(keys: list[bytes]) -> None:
    out = reference.blake2b_64(KeyBatch.from_keys(keys), 0)
    assert out.dtype == np.uint64 and out.shape == (len(keys),)
    assert out.tolist() == [_blake2b_64_reference(k) for k in keys]


@pytest.mark.parametrize("seed", [1, 0xDEADBEEF, 2**64 - 1, 2**128 - 1])
def test_blake2b_64_seed_is_the_blake2_key(keys: list[bytes], seed: int) -> None:
    # a non-zero seed is BLAKE2's key parameter (RFC 7693 §2.5), as 16 little-endian bytes
    blake2_key = seed.to_bytes(16, "little")
    out = reference.blake2b_64(KeyBatch.from_keys(keys[:700]), seed)
    assert out.tolist() == [_blake2b_64_reference(k, blake2_key) for k in keys[:700]]
    assert out.tolist() != [_blake2b_64_reference(k) for k in keys[:700]]


def test_blake2b_64_empty_batch_and_slice(keys: list[bytes]) -> None:
    assert reference.blake2b_64(KeyBatch.from_keys([]), 0).shape == (0,)
    sliced = KeyBatch.from_keys(keys).slice(100, 200)
    assert reference.blake2b_64(sliced, 5).tolist() == [
        _blake2b_64_reference(k, (5).to_bytes(16, "little")) for k in keys[100:200]
    ]
