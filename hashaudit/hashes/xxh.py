"""xxHash32, xxHash64 and XXH3-64 (default secret, seeded) as numba batch kernels.

References
----------
Y. Collet, "xxHash fast digest algorithm", specification ``doc/xxhash_spec.md`` in the xxHash
repository, version 0.1.1 (XXH32 and XXH64), and the reference implementation ``xxhash.h`` of
xxHash 0.8 (XXH3 64-bit: length classes, default secret, seed-derived secret, stripe/block layout).
Results are checked bit for bit against the ``xxhash`` package from PyPI in ``tests/hashes/test_xxh.py``.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401  (sets the numba cache folder before numba loads)

# isort: split

import numpy as np
from llvmlite import ir
from numba import njit, types, uint64
from numba.extending import intrinsic

from hashaudit.keys.batch import KeyBatch

P32_1 = 0x9E3779B1
P32_2 = 0x85EBCA77
P32_3 = 0xC2B2AE3D
P32_4 = 0x27D4EB2F
P32_5 = 0x165667B1

P64_1 = 0x9E3779B185EBCA87
P64_2 = 0xC2B2AE3D27D4EB4F
P64_3 = 0x165667B19E3779F9
P64_4 = 0x85EBCA77C2B2AE63
P64_5 = 0x27D4EB2F165667C5

PRIME_MX1 = 0x165667919E3779F9
PRIME_MX2 = 0x9FB21C651E98DF25

MASK32 = 0xFFFFFFFF

# XXH3's default 192-byte secret (kSecret in xxhash.h).
XXH3_DEFAULT_SECRET = np.frombuffer(
    bytes.fromhex(
        "b8fe6c3923a44bbe7c01812cf721ad1c"
        "ded46de9839097db7240a4a4b7b3671f"
        "cb79e64eccc0e578825ad07dccff7221"
        "b8084674f743248ee03590e6813a264c"
        "3c2852bb91c300cb88d0658b1b532ea3"
        "71644897a20df94e3819ef46a9deacd8"
        "a8fa763fe39c343ff9dcbbc7c70b4f1d"
        "8a51e04bcdb45931c89f7ec9d9787364"
        "eac5ac8334d3ebc3c581a0fffa1363eb"
        "170ddd51b7f0da49d316552629d4689e"
        "2b16be587d47a1fc8ff8b8d17ad031ce"
        "45cb3a8f95160428afd7fbcabb4b407e"
    ),
    dtype=np.uint8,
)  # read-only: frombuffer over bytes

_SECRET_SIZE = 192
_STRIPE_LEN = 64
_STRIPES_PER_BLOCK = (_SECRET_SIZE - _STRIPE_LEN) // 8
_BLOCK_LEN = _STRIPE_LEN * _STRIPES_PER_BLOCK


# ---------------------------------------------------------------------------------------------------------
# Shared helpers. Every value is uint64 (numba turns int64/uint64 mixes into float64); 32-bit arithmetic is
# done in uint64 and masked. Rotation amounts are passed as uint64 so numba compiles each helper once instead
# of once per literal.


def _check_byte_array(array, index):  # type: ignore[no-untyped-def]
    return (
        isinstance(array, types.Array)
        and array.dtype == types.uint8
        and array.ndim == 1
        and array.layout == "C"
        and isinstance(index, types.Integer)
    )


def _load_codegen(width):  # type: ignore[no-untyped-def]
    def codegen(context, builder, signature, args):  # type: ignore[no-untyped-def]
        array = context.make_array(signature.args[0])(context, builder, args[0])
        index = context.cast(builder, args[1], signature.args[1], types.intp)
        address = builder.gep(array.data, [index])
        value = builder.load(builder.bitcast(address, ir.IntType(width).as_pointer()), align=1)
        if not np.little_endian:
            value = builder.bswap(value)
        return builder.zext(value, ir.IntType(64)) if width < 64 else value

    return codegen


# One unaligned load instead of byte-by-byte assembly: numba's negative-index wraparound on ``data[p + k]``
# keeps LLVM from merging the eight byte loads, which cost a factor of three on long keys.
@intrinsic
def _read32(typingctx, array, index):  # type: ignore[no-untyped-def]  # pragma: no cover - compiled
    """Little-endian uint32 at ``array[index]`` (C-contiguous uint8, any alignment), as uint64."""
    if not _check_byte_array(array, index):
        return None
    return types.uint64(array, index), _load_codegen(32)


@intrinsic
def _read64(typingctx, array, index):  # type: ignore[no-untyped-def]  # pragma: no cover - compiled
    """Little-endian uint64 at ``array[index]`` (C-contiguous uint8, any alignment)."""
    if not _check_byte_array(array, index):
        return None
    return types.uint64(array, index), _load_codegen(64)


@njit(cache=True, nogil=True)
def _rotl32(x, r):  # pragma: no cover - compiled
    """Rotate a 32-bit value (held in uint64) left by ``r`` (uint64)."""
    return ((x << r) | (x >> (uint64(32) - r))) & uint64(MASK32)


@njit(cache=True, nogil=True)
def _rotl64(x, r):  # pragma: no cover - compiled
    """Rotate a uint64 left by ``r`` (uint64)."""
    return (x << r) | (x >> (uint64(64) - r))


@njit(cache=True, nogil=True)
def _swap64(x):  # pragma: no cover - compiled
    """Byte-swap a uint64."""
    x = ((x & uint64(0x00FF00FF00FF00FF)) << uint64(8)) | ((x >> uint64(8)) & uint64(0x00FF00FF00FF00FF))
    x = ((x & uint64(0x0000FFFF0000FFFF)) << uint64(16)) | ((x >> uint64(16)) & uint64(0x0000FFFF0000FFFF))
    return (x << uint64(32)) | (x >> uint64(32))


@njit(cache=True, nogil=True)
def _mul128_fold64(a, b):  # pragma: no cover - compiled
    """Low half XOR high half of the 128-bit product ``a * b``, from four 32x32 products."""
    m = uint64(MASK32)
    lo_lo = (a & m) * (b & m)
    hi_lo = (a >> uint64(32)) * (b & m)
    lo_hi = (a & m) * (b >> uint64(32))
    hi_hi = (a >> uint64(32)) * (b >> uint64(32))
    # cannot overflow: at most (2^32-1) + (2^32-1) + (2^32-1)^2 = 2^64-1
    cross = (lo_lo >> uint64(32)) + (hi_lo & m) + lo_hi
    high = (hi_lo >> uint64(32)) + (cross >> uint64(32)) + hi_hi
    low = (cross << uint64(32)) | (lo_lo & m)
    return low ^ high


# ---------------------------------------------------------------------------------------------------------
# XXH32


@njit(cache=True, nogil=True)
def _xxh32_round(acc, lane):  # pragma: no cover - compiled
    """One XXH32 lane round."""
    acc = (acc + lane * uint64(P32_2)) & uint64(MASK32)
    return (_rotl32(acc, uint64(13)) * uint64(P32_1)) & uint64(MASK32)


@njit(cache=True, nogil=True)
def _xxh32_kernel(data, offsets, out, seed):  # pragma: no cover - compiled
    m = uint64(MASK32)
    seed = seed & m
    for i in range(len(offsets) - 1):
        p = offsets[i]
        end = offsets[i + 1]
        length = end - p
        if length >= 16:
            v1 = (seed + uint64(P32_1) + uint64(P32_2)) & m
            v2 = (seed + uint64(P32_2)) & m
            v3 = seed
            v4 = (seed - uint64(P32_1)) & m
            limit = end - 16
            while p <= limit:
                v1 = _xxh32_round(v1, _read32(data, p))
                v2 = _xxh32_round(v2, _read32(data, p + 4))
                v3 = _xxh32_round(v3, _read32(data, p + 8))
                v4 = _xxh32_round(v4, _read32(data, p + 12))
                p += 16
            h = _rotl32(v1, uint64(1)) + _rotl32(v2, uint64(7)) + _rotl32(v3, uint64(12)) + _rotl32(v4, uint64(18))
        else:
            h = seed + uint64(P32_5)
        h = (h + uint64(length)) & m
        while p + 4 <= end:
            h = (h + _read32(data, p) * uint64(P32_3)) & m
            h = (_rotl32(h, uint64(17)) * uint64(P32_4)) & m
            p += 4
        while p < end:
            h = (h + uint64(data[p]) * uint64(P32_5)) & m
            h = (_rotl32(h, uint64(11)) * uint64(P32_1)) & m
            p += 1
        h ^= h >> uint64(15)
        h = (h * uint64(P32_2)) & m
        h ^= h >> uint64(13)
        h = (h * uint64(P32_3)) & m
        h ^= h >> uint64(16)
        out[i] = h


# ---------------------------------------------------------------------------------------------------------
# XXH64


@njit(cache=True, nogil=True)
def _xxh64_round(acc, lane):  # pragma: no cover - compiled
    """One XXH64 lane round."""
    acc = acc + lane * uint64(P64_2)
    return _rotl64(acc, uint64(31)) * uint64(P64_1)


@njit(cache=True, nogil=True)
def _xxh64_merge_round(acc, lane):  # pragma: no cover - compiled
    """Fold one lane accumulator into the XXH64 state."""
    acc ^= _xxh64_round(uint64(0), lane)
    return acc * uint64(P64_1) + uint64(P64_4)


@njit(cache=True, nogil=True)
def _xxh64_avalanche(h):  # pragma: no cover - compiled
    """XXH64's final mix (also used by XXH3 for 0-3 byte keys)."""
    h ^= h >> uint64(33)
    h *= uint64(P64_2)
    h ^= h >> uint64(29)
    h *= uint64(P64_3)
    h ^= h >> uint64(32)
    return h


@njit(cache=True, nogil=True)
def _xxh64_kernel(data, offsets, out, seed):  # pragma: no cover - compiled
    for i in range(len(offsets) - 1):
        p = offsets[i]
        end = offsets[i + 1]
        length = end - p
        if length >= 32:
            v1 = seed + uint64(P64_1) + uint64(P64_2)
            v2 = seed + uint64(P64_2)
            v3 = seed
            v4 = seed - uint64(P64_1)
            limit = end - 32
            while p <= limit:
                v1 = _xxh64_round(v1, _read64(data, p))
                v2 = _xxh64_round(v2, _read64(data, p + 8))
                v3 = _xxh64_round(v3, _read64(data, p + 16))
                v4 = _xxh64_round(v4, _read64(data, p + 24))
                p += 32
            h = _rotl64(v1, uint64(1)) + _rotl64(v2, uint64(7)) + _rotl64(v3, uint64(12)) + _rotl64(v4, uint64(18))
            h = _xxh64_merge_round(h, v1)
            h = _xxh64_merge_round(h, v2)
            h = _xxh64_merge_round(h, v3)
            h = _xxh64_merge_round(h, v4)
        else:
            h = seed + uint64(P64_5)
        h += uint64(length)
        while p + 8 <= end:
            h ^= _xxh64_round(uint64(0), _read64(data, p))
            h = _rotl64(h, uint64(27)) * uint64(P64_1) + uint64(P64_4)
            p += 8
        if p + 4 <= end:
            h ^= _read32(data, p) * uint64(P64_1)
            h = _rotl64(h, uint64(23)) * uint64(P64_2) + uint64(P64_3)
            p += 4
        while p < end:
            h ^= uint64(data[p]) * uint64(P64_5)
            h = _rotl64(h, uint64(11)) * uint64(P64_1)
            p += 1
        out[i] = _xxh64_avalanche(h)


# ---------------------------------------------------------------------------------------------------------
# XXH3 64-bit
#
# The secret and the seed are fixed for a whole call, so every secret word a key will ever read (seed already
# added or subtracted) is computed once per call into one uint64 array, laid out as below. The kernel then
# reads aligned words instead of re-reading and re-seeding unaligned secret bytes for every key.

_MIDSIZE_START_OFFSET = 3  # secret offset of the 129-240 byte rounds past the eighth
_MIDSIZE_LAST_OFFSET = 136 - 17  # secret offset of the last 16 bytes of a 129-240 byte key (min secret size - 17)
_LAST_STRIPE_OFFSET = _SECRET_SIZE - _STRIPE_LEN - 7  # secret offset of a long key's final, overlapping stripe
_MERGE_OFFSET = 11  # secret offset of the final merge of the eight accumulators

_K_EMPTY = 0  # 0 bytes
_K_1TO3 = 1  # 1-3 bytes
_K_4TO8 = 2  # 4-8 bytes
_K_9TO16_LO = 3  # 9-16 bytes, first word
_K_9TO16_HI = 4  # 9-16 bytes, last word
_K_MIX = 5  # 16 pairs for 16-byte mixes: pair j < 8 at 16*j, 8 <= j < 15 at 16*(j-8)+3, j = 15 at 119
_K_STRIPE = _K_MIX + 32  # 24 words of the long-key secret at 8*n (words 16-23 also scramble a block)
_K_LAST = _K_STRIPE + 24  # 8 words of the long-key secret for the final stripe
_K_MERGE = _K_LAST + 8  # 8 words of the long-key secret for the final merge
_K_COUNT = _K_MERGE + 8


@njit(cache=True, nogil=True)
def _xxh3_avalanche(h):  # pragma: no cover - compiled
    """XXH3's short final mix."""
    h ^= h >> uint64(37)
    h *= uint64(PRIME_MX1)
    h ^= h >> uint64(32)
    return h


@njit(cache=True, nogil=True)
def _xxh3_rrmxmx(h, length):  # pragma: no cover - compiled
    """XXH3's stronger final mix for 4-8 byte keys (``length`` is uint64)."""
    h ^= _rotl64(h, uint64(49)) ^ _rotl64(h, uint64(24))
    h *= uint64(PRIME_MX2)
    h ^= (h >> uint64(35)) + length
    h *= uint64(PRIME_MX2)
    h ^= h >> uint64(28)
    return h


@njit(cache=True, nogil=True)
def _xxh3_mix16(data, p, key_lo, key_hi):  # pragma: no cover - compiled
    """Mix the 16 bytes at ``data[p]`` with two seeded secret words."""
    return _mul128_fold64(_read64(data, p) ^ key_lo, _read64(data, p + 8) ^ key_hi)


@njit(cache=True, nogil=True)
def _xxh3_0to16(data, p, length, keys):  # pragma: no cover - compiled
    """XXH3-64 of a key of 0 to 16 bytes at ``data[p]``."""
    n = uint64(length)
    if length > 8:
        lo = _read64(data, p) ^ keys[_K_9TO16_LO]
        hi = _read64(data, p + length - 8) ^ keys[_K_9TO16_HI]
        return _xxh3_avalanche(n + _swap64(lo) + hi + _mul128_fold64(lo, hi))
    if length >= 4:
        first = _read32(data, p)
        last = _read32(data, p + length - 4)
        return _xxh3_rrmxmx((last + (first << uint64(32))) ^ keys[_K_4TO8], n)
    if length > 0:
        c1 = uint64(data[p])
        c2 = uint64(data[p + (length >> 1)])
        c3 = uint64(data[p + length - 1])
        combined = (c1 << uint64(16)) | (c2 << uint64(24)) | c3 | (n << uint64(8))
        return _xxh64_avalanche(combined ^ keys[_K_1TO3])
    return _xxh64_avalanche(keys[_K_EMPTY])


@njit(cache=True, nogil=True)
def _xxh3_17to128(data, p, length, keys):  # pragma: no cover - compiled
    """XXH3-64 of a key of 17 to 128 bytes: pairs of 16-byte blocks taken from both ends."""
    acc = uint64(length) * uint64(P64_1)
    end = p + length
    k = keys
    if length > 32:
        if length > 64:
            if length > 96:
                acc += _xxh3_mix16(data, p + 48, k[_K_MIX + 12], k[_K_MIX + 13])
                acc += _xxh3_mix16(data, end - 64, k[_K_MIX + 14], k[_K_MIX + 15])
            acc += _xxh3_mix16(data, p + 32, k[_K_MIX + 8], k[_K_MIX + 9])
            acc += _xxh3_mix16(data, end - 48, k[_K_MIX + 10], k[_K_MIX + 11])
        acc += _xxh3_mix16(data, p + 16, k[_K_MIX + 4], k[_K_MIX + 5])
        acc += _xxh3_mix16(data, end - 32, k[_K_MIX + 6], k[_K_MIX + 7])
    acc += _xxh3_mix16(data, p, k[_K_MIX], k[_K_MIX + 1])
    acc += _xxh3_mix16(data, end - 16, k[_K_MIX + 2], k[_K_MIX + 3])
    return _xxh3_avalanche(acc)


@njit(cache=True, nogil=True)
def _xxh3_129to240(data, p, length, keys):  # pragma: no cover - compiled
    """XXH3-64 of a key of 129 to 240 bytes: 16-byte rounds, re-mixed after the eighth."""
    acc = uint64(length) * uint64(P64_1)
    for r in range(8):
        acc += _xxh3_mix16(data, p + 16 * r, keys[_K_MIX + 2 * r], keys[_K_MIX + 2 * r + 1])
    acc = _xxh3_avalanche(acc)
    # pairs 8-14 of the key table are the shifted secret offsets these rounds use
    for r in range(8, length // 16):
        acc += _xxh3_mix16(data, p + 16 * r, keys[_K_MIX + 2 * r], keys[_K_MIX + 2 * r + 1])
    acc += _xxh3_mix16(data, p + length - 16, keys[_K_MIX + 30], keys[_K_MIX + 31])
    return _xxh3_avalanche(acc)


@njit(cache=True, nogil=True)
def _xxh3_accumulate_pair(acc_even, acc_odd, data, q, key_even, key_odd):  # pragma: no cover - compiled
    """Fold the 16 bytes at ``data[q]`` (two lanes of a stripe) into their two accumulators."""
    value_even = _read64(data, q)
    value_odd = _read64(data, q + 8)
    keyed_even = value_even ^ key_even
    keyed_odd = value_odd ^ key_odd
    # each lane's raw value goes to its neighbour, its keyed 32x32 product to itself
    acc_even += value_odd + (keyed_even & uint64(MASK32)) * (keyed_even >> uint64(32))
    acc_odd += value_even + (keyed_odd & uint64(MASK32)) * (keyed_odd >> uint64(32))
    return acc_even, acc_odd


@njit(cache=True, nogil=True)
def _xxh3_scramble(acc, key):  # pragma: no cover - compiled
    """Scramble one accumulator at the end of a block."""
    return ((acc ^ (acc >> uint64(47))) ^ key) * uint64(P32_1)


@njit(cache=True, nogil=True)
def _xxh3_long(data, p, length, keys):  # pragma: no cover - compiled
    """XXH3-64 of a key over 240 bytes (its key words carry any seed)."""
    # eight scalar accumulators rather than an array: LLVM keeps them in registers, which an array of
    # uint64 next to a uint8 input (may alias) prevents; a lane only ever meets its pair partner
    a0 = uint64(P32_3)
    a1 = uint64(P64_1)
    a2 = uint64(P64_2)
    a3 = uint64(P64_3)
    a4 = uint64(P64_4)
    a5 = uint64(P32_2)
    a6 = uint64(P64_5)
    a7 = uint64(P32_1)
    blocks = (length - 1) // _BLOCK_LEN
    # full blocks, then the tail stripes, which stop short of the last byte, then the final stripe, which
    # overlaps the tail and always ends on the last byte; stripe s of a block is keyed from word s
    tail_stripes = ((length - 1) - blocks * _BLOCK_LEN) // _STRIPE_LEN
    for b in range(blocks + 2):
        if b < blocks:
            stripes = _STRIPES_PER_BLOCK
        elif b == blocks:
            stripes = tail_stripes
        else:
            stripes = 1
        for s in range(stripes):
            if b <= blocks:
                q = p + b * _BLOCK_LEN + s * _STRIPE_LEN
                k = _K_STRIPE + s
            else:
                q = p + length - _STRIPE_LEN
                k = _K_LAST
            a0, a1 = _xxh3_accumulate_pair(a0, a1, data, q, keys[k], keys[k + 1])
            a2, a3 = _xxh3_accumulate_pair(a2, a3, data, q + 16, keys[k + 2], keys[k + 3])
            a4, a5 = _xxh3_accumulate_pair(a4, a5, data, q + 32, keys[k + 4], keys[k + 5])
            a6, a7 = _xxh3_accumulate_pair(a6, a7, data, q + 48, keys[k + 6], keys[k + 7])
        if b < blocks:
            k = _K_STRIPE + _STRIPES_PER_BLOCK
            a0 = _xxh3_scramble(a0, keys[k])
            a1 = _xxh3_scramble(a1, keys[k + 1])
            a2 = _xxh3_scramble(a2, keys[k + 2])
            a3 = _xxh3_scramble(a3, keys[k + 3])
            a4 = _xxh3_scramble(a4, keys[k + 4])
            a5 = _xxh3_scramble(a5, keys[k + 5])
            a6 = _xxh3_scramble(a6, keys[k + 6])
            a7 = _xxh3_scramble(a7, keys[k + 7])
    h = uint64(length) * uint64(P64_1)
    h += _mul128_fold64(a0 ^ keys[_K_MERGE], a1 ^ keys[_K_MERGE + 1])
    h += _mul128_fold64(a2 ^ keys[_K_MERGE + 2], a3 ^ keys[_K_MERGE + 3])
    h += _mul128_fold64(a4 ^ keys[_K_MERGE + 4], a5 ^ keys[_K_MERGE + 5])
    h += _mul128_fold64(a6 ^ keys[_K_MERGE + 6], a7 ^ keys[_K_MERGE + 7])
    return _xxh3_avalanche(h)


@njit(cache=True, nogil=True)
def _xxh3_64_kernel(data, offsets, out, keys):  # pragma: no cover - compiled
    for i in range(len(offsets) - 1):
        p = offsets[i]
        length = offsets[i + 1] - p
        if length <= 16:
            out[i] = _xxh3_0to16(data, p, length, keys)
        elif length <= 128:
            out[i] = _xxh3_17to128(data, p, length, keys)
        elif length <= 240:
            out[i] = _xxh3_129to240(data, p, length, keys)
        else:
            out[i] = _xxh3_long(data, p, length, keys)


def xxh3_seeded_secret(seed: int) -> np.ndarray:
    """The 192-byte secret XXH3 uses for inputs over 240 bytes under ``seed``.

    Parameters
    ----------
    seed : int
        Taken modulo 2^64.

    Returns
    -------
    numpy.ndarray of uint8, length 192
        The default secret for seed 0; otherwise the default secret read as little-endian 64-bit words,
        with the seed added to the even words and subtracted from the odd ones (mod 2^64).

    References
    ----------
    ``XXH3_initCustomSecret`` in ``xxhash.h`` (xxHash 0.8).
    """
    seed %= 2**64
    secret = XXH3_DEFAULT_SECRET.tobytes()
    words = [int.from_bytes(secret[o : o + 8], "little") for o in range(0, _SECRET_SIZE, 8)]
    if seed:
        words = [(w + seed if n % 2 == 0 else w - seed) % 2**64 for n, w in enumerate(words)]
    return np.frombuffer(b"".join(w.to_bytes(8, "little") for w in words), dtype=np.uint8).copy()


def _xxh3_key_words(seed: int) -> np.ndarray:
    """Every seeded secret word XXH3-64 reads under ``seed``, in the ``_K_*`` layout."""
    seed %= 2**64
    mask = 2**64 - 1
    short_secret = XXH3_DEFAULT_SECRET.tobytes()
    long_secret = xxh3_seeded_secret(seed).tobytes()

    def word(secret: bytes, offset: int, size: int = 8) -> int:
        return int.from_bytes(secret[offset : offset + size], "little")

    # 4-8 byte keys put the byte-swapped low half of the seed into its high half
    seed_4to8 = seed ^ (int.from_bytes((seed & MASK32).to_bytes(4, "little"), "big") << 32)
    keys = [0] * _K_COUNT
    keys[_K_EMPTY] = seed ^ word(short_secret, 56) ^ word(short_secret, 64)
    keys[_K_1TO3] = ((word(short_secret, 0, 4) ^ word(short_secret, 4, 4)) + seed) & mask
    keys[_K_4TO8] = ((word(short_secret, 8) ^ word(short_secret, 16)) - seed_4to8) & mask
    keys[_K_9TO16_LO] = ((word(short_secret, 24) ^ word(short_secret, 32)) + seed) & mask
    keys[_K_9TO16_HI] = ((word(short_secret, 40) ^ word(short_secret, 48)) - seed) & mask
    mix_offsets = [16 * j for j in range(8)]
    mix_offsets += [16 * j + _MIDSIZE_START_OFFSET for j in range(7)] + [_MIDSIZE_LAST_OFFSET]
    for j, offset in enumerate(mix_offsets):
        keys[_K_MIX + 2 * j] = (word(short_secret, offset) + seed) & mask
        keys[_K_MIX + 2 * j + 1] = (word(short_secret, offset + 8) - seed) & mask
    for n in range(24):
        keys[_K_STRIPE + n] = word(long_secret, 8 * n)
    for lane in range(8):
        keys[_K_LAST + lane] = word(long_secret, _LAST_STRIPE_OFFSET + 8 * lane)
        keys[_K_MERGE + lane] = word(long_secret, _MERGE_OFFSET + 8 * lane)
    return np.array(keys, dtype=np.uint64)


def _out(batch: KeyBatch) -> np.ndarray:
    return np.empty(len(batch), dtype=np.uint64)


def _arrays(batch: KeyBatch) -> tuple[np.ndarray, np.ndarray]:
    # the unaligned loads need C-contiguous bytes; a contiguous batch passes through without a copy
    return np.ascontiguousarray(batch.data), np.ascontiguousarray(batch.offsets)


def xxh32(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """xxHash32 of every key.

    Parameters
    ----------
    batch : KeyBatch
        Keys to hash.
    seed : int, default 0
        Taken modulo 2^32.

    Returns
    -------
    numpy.ndarray of uint64
        One 32-bit hash per key (values below 2^32).

    References
    ----------
    Y. Collet, xxHash specification ``doc/xxhash_spec.md``, section "xxh32".
    """
    out = _out(batch)
    _xxh32_kernel(*_arrays(batch), out, np.uint64(seed % 2**32))
    return out


def xxh64(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """xxHash64 of every key.

    Parameters
    ----------
    batch : KeyBatch
        Keys to hash.
    seed : int, default 0
        Taken modulo 2^64.

    Returns
    -------
    numpy.ndarray of uint64
        One 64-bit hash per key.

    References
    ----------
    Y. Collet, xxHash specification ``doc/xxhash_spec.md``, section "xxh64".
    """
    out = _out(batch)
    _xxh64_kernel(*_arrays(batch), out, np.uint64(seed % 2**64))
    return out


def xxh3_64(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """XXH3 64-bit of every key, with the default secret and ``seed``.

    Parameters
    ----------
    batch : KeyBatch
        Keys to hash.
    seed : int, default 0
        Taken modulo 2^64. Keys up to 240 bytes mix the seed in directly; longer keys use a secret
        derived from the seed (:func:`xxh3_seeded_secret`).

    Returns
    -------
    numpy.ndarray of uint64
        One 64-bit hash per key.

    References
    ----------
    Y. Collet, ``XXH3_64bits_withSeed`` in ``xxhash.h`` (xxHash 0.8).
    """
    out = _out(batch)
    _xxh3_64_kernel(*_arrays(batch), out, _xxh3_key_words(seed))
    return out
