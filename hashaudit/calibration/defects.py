"""Hash functions with a planted defect of known size, for the power study (:mod:`hashaudit.calibration.departures`).

Each is XXH3 (or, for :func:`xor_rotations`, a GF(2)-linear function) with one defect added; where only some keys
carry the defect, a per-key coin that is a fixed function of the key picks them, so the result is still a function.

References
----------
A. F. Webster, S. E. Tavares, "On the design of S-boxes", CRYPTO '85, LNCS 218 (1986) 523-534 (avalanche).
"""

from __future__ import annotations

import numpy as np

from hashaudit.calibration._common import MASK64, kernel_spec
from hashaudit.hashes.registry import HashSpec
from hashaudit.keys.batch import KeyBatch

_COIN_SALT = 0x5EED_C01E_0F_A11  # seeds the per-key coin of a departure apart from the hash it perturbs
_BIT_SALT = 0x0B17_1EA4


def _xxh3(batch: KeyBatch, seed: int) -> np.ndarray:
    from hashaudit.hashes.xxh import xxh3_64

    return xxh3_64(batch, seed & MASK64)


def _coin(batch: KeyBatch, seed: int, salt: int = _COIN_SALT) -> np.ndarray:
    """A uniform number in [0, 1) per key, a fixed function of the key (a hash must be a function)."""
    return (_xxh3(batch, seed ^ salt) >> np.uint64(11)).astype(np.float64) * 2.0**-53


def weak_low_bits(share: float, bits: int = 4) -> HashSpec:
    """XXH3 whose low ``bits`` bits are cleared for a share ``share`` of the keys (chosen by a hash of the key):
    a ``mask`` table of m buckets sends those keys to m / 2^bits of its buckets."""

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        out = _xxh3(batch, seed)
        out[_coin(batch, seed) < share] &= np.uint64(MASK64 ^ ((1 << bits) - 1))
        return out

    return kernel_spec(
        f"weak_low_bits_{share:g}", 64, function, f"XXH3, low {bits} bits cleared for {share:.1%} of keys"
    )


def biased_bit(ones_share: float, bit: int = 7) -> HashSpec:
    """XXH3 whose output bit ``bit`` is forced to 1 for a share 2·(``ones_share`` − ½) of the keys, so that the
    bit is set in a share ``ones_share`` of them; every other bit, and the pairs, stay fair and independent."""
    forced = 2.0 * (ones_share - 0.5)
    if not 0.0 <= forced <= 1.0:
        raise ValueError(f"ones_share must be between 0.5 and 1, not {ones_share}")

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        out = _xxh3(batch, seed)
        out[_coin(batch, seed) < forced] |= np.uint64(1 << bit)
        return out

    return kernel_spec(f"biased_bit_{ones_share:g}", 64, function, f"XXH3, bit {bit} set in {ones_share:.2%} of keys")


def leaky_input_bit(share: float) -> HashSpec:
    """XXH3, except that for a share ``share`` of the keys output bit 0 is input bit 0 (the lowest bit of the first
    byte) XORed with a hash of the rest of the key.

    Which keys leak, and the hash of the rest, are computed with input bit 0 cleared, so a key and its neighbour
    across that bit agree on both: flipping input bit 0 flips output bit 0 with probability ½ + share / 2 (an
    avalanche bias of share / 2 in one cell of the input × output matrix), and every other cell stays at ½.
    """

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        out = _xxh3(batch, seed)
        starts = batch.offsets[:-1][batch.lengths() > 0]
        cleared = batch.data.copy()
        cleared[starts] &= np.uint8(0xFE)
        rest = KeyBatch(cleared, batch.offsets)
        leak = np.zeros(len(batch), dtype=bool)
        leak[batch.lengths() > 0] = _coin(rest, seed)[batch.lengths() > 0] < share
        first_bit = np.zeros(len(batch), dtype=np.uint64)
        first_bit[batch.lengths() > 0] = batch.data[starts] & np.uint8(1)
        linear = (_xxh3(rest, seed ^ _BIT_SALT) ^ first_bit) & np.uint64(1)
        out[leak] = (out[leak] & np.uint64(MASK64 ^ 1)) | linear[leak]
        return out

    return kernel_spec(
        f"leaky_input_bit_{share:g}", 64, function, f"XXH3, input bit 0 leaks into output bit 0 ({share:.0%})"
    )


def _rotl(x: np.ndarray, r: int) -> np.ndarray:
    return (x << np.uint64(r)) | (x >> np.uint64(64 - r))


def xor_rotations() -> HashSpec:
    """A GF(2)-linear function of 16-byte keys: x = w0 XOR rotl(w1, 29), h = x XOR rotl(x, 13) XOR rotl(x, 41) for
    the two little-endian 64-bit words w0, w1. Its values are uniform on random keys, so only the avalanche checks
    can see it: every input bit flips the same three output bits, always."""

    def function(batch: KeyBatch, seed: int) -> np.ndarray:
        lengths = batch.lengths()
        if len(batch) and not np.all(lengths == 16):
            raise ValueError("xor_rotations hashes 16-byte keys only")
        words = batch.words_le64(16)
        x = words[:, 0] ^ _rotl(words[:, 1], 29)
        return x ^ _rotl(x, 13) ^ _rotl(x, 41) ^ np.uint64(seed & MASK64)

    return kernel_spec("xor_rotations", 64, function, "x ^ rotl(x, 13) ^ rotl(x, 41): linear over GF(2)")
