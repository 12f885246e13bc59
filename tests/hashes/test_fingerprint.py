"""The fixed-seed fingerprints and sampling priorities the statistics receive from the hash layer."""

from __future__ import annotations

import numpy as np

from hashaudit.hashes import fingerprint
from hashaudit.hashes.murmur import murmur3_128
from hashaudit.hashes.siphash import siphash24
from hashaudit.hashes.xxh import xxh3_64
from hashaudit.keys.batch import KeyBatch


def test_the_fingerprints_keep_their_seeds():
    batch = KeyBatch.from_keys([b"", b"a", b"user-0001", b"x" * 300])
    assert fingerprint.DISTINCT_SEED == 0x5EED_D157 and fingerprint.HEAVY_SEED == 0x4EA7_0001
    np.testing.assert_array_equal(fingerprint.key_fingerprints_128(batch), murmur3_128(batch, 0x5EED_D157))
    np.testing.assert_array_equal(fingerprint.heavy_fingerprints(batch), xxh3_64(batch, 0x4EA7_0001))
    np.testing.assert_array_equal(fingerprint.member_fingerprints(batch), xxh3_64(batch, 0xF11F_5EED_0A7A_0001))
    np.testing.assert_array_equal(fingerprint.dedup_fingerprints(batch), xxh3_64(batch, 0x6E65_6967_6862_6F72))
    key = (7 ^ (0x6B65_7973_616D_706C << 64)) % 2**128
    np.testing.assert_array_equal(fingerprint.sample_priorities(batch, 7), siphash24(batch, key))
