"""Reference hashes computed per key through hashlib: the near-ideal baseline ``blake2b_64``."""

from __future__ import annotations

import hashlib

import numpy as np

from hashaudit.keys.batch import KeyBatch


def _blake2b_key(seed: int) -> bytes:
    seed %= 1 << 128  # like every other seeded entry: the seed is taken modulo the key size
    return seed.to_bytes(16, "little") if seed else b""


def blake2b_64(batch: KeyBatch, seed: int = 0) -> np.ndarray:
    """BLAKE2b with an 8-byte digest, read little-endian; a non-zero seed is the 16-byte BLAKE2 key."""
    key = _blake2b_key(seed)
    digests = b"".join(hashlib.blake2b(k, digest_size=8, key=key).digest() for k in batch.to_list())
    return np.frombuffer(digests, dtype="<u8").astype(np.uint64)
