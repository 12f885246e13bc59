"""The cluster's hash-tag rule, CRC16 and hash slots, bit for bit.

References: redis-py (``redis.crc.key_slot``: the client's slot function, CRC from ``binascii.crc_hqx``) and
the standard library's ``binascii.crc_hqx`` (CRC-CCITT, XMODEM parameters with start value 0). Both run in
C, so every comparison uses all 100,000 keys of the shared set.
"""

from __future__ import annotations

import binascii

import numpy as np
import pytest

from hashaudit.keys.batch import KeyBatch
from hashaudit.placements import redis_cluster

crc_module = pytest.importorskip("redis.crc", reason="redis-py is the reference")


def _spec_span(key: bytes) -> tuple[int, int]:
    """The hash-tag rule as the Redis Cluster Specification words it, in plain Python."""
    first_open = key.find(b"{")
    if first_open >= 0:
        first_close = key.find(b"}", first_open + 1)
        if first_close > first_open + 1:
            return first_open + 1, first_close
    return 0, len(key)


def test_slot_matches_redis_py(placement_batch: KeyBatch, placement_keys: list[bytes]) -> None:
    out = redis_cluster.slot(placement_batch)
    assert out.dtype == np.int64 and out.shape == (len(placement_keys),)
    assert out.tolist() == [crc_module.key_slot(k) for k in placement_keys]  # redis-py key_slot


def test_crc16_of_the_hashed_part_matches_redis_py(placement_batch: KeyBatch, placement_keys: list[bytes]) -> None:
    out = redis_cluster.crc16(placement_batch)
    assert out.dtype == np.uint16
    # redis-py key_slot with 65536 buckets is the whole CRC16 of the hashed part
    assert out.tolist() == [crc_module.key_slot(k, 65536) for k in placement_keys]


def test_crc16_of_whole_keys_matches_binascii(placement_batch: KeyBatch, placement_keys: list[bytes]) -> None:
    out = redis_cluster.crc16(placement_batch, hash_tags=False)
    assert out.tolist() == [binascii.crc_hqx(k, 0) for k in placement_keys]  # stdlib CRC-CCITT (XMODEM)


def test_spans_follow_the_specification(placement_batch: KeyBatch, placement_keys: list[bytes]) -> None:
    start, stop = redis_cluster.hash_tag_spans(placement_batch)
    assert start.dtype == np.int64 and stop.dtype == np.int64
    expected = [_spec_span(k) for k in placement_keys]
    assert list(zip(start.tolist(), stop.tolist(), strict=True)) == expected
    tagged = int(np.count_nonzero(stop - start != placement_batch.lengths()))
    assert tagged > 10_000  # the key set exercises the tag branch, not only whole keys


# Redis Cluster Specification, "Hash tags": the examples given there, with the part that is hashed
SPEC_TAG_EXAMPLES = [
    (b"{user1000}.following", b"user1000"),
    (b"{user1000}.followers", b"user1000"),
    (b"foo{}{bar}", b"foo{}{bar}"),
    (b"foo{{bar}}zap", b"{bar"),
    (b"foo{bar}{zap}", b"bar"),
]


def test_specification_examples() -> None:
    keys = [k for k, _ in SPEC_TAG_EXAMPLES]
    start, stop = redis_cluster.hash_tag_spans(KeyBatch.from_keys(keys))
    assert [k[a:b] for k, a, b in zip(keys, start.tolist(), stop.tolist(), strict=True)] == [
        part for _, part in SPEC_TAG_EXAMPLES
    ]
    slots = redis_cluster.slot(KeyBatch.from_keys(keys + [part for _, part in SPEC_TAG_EXAMPLES]))
    assert slots[: len(keys)].tolist() == slots[len(keys) :].tolist()
    # redis-py: a key and its tag share a slot
    pair = redis_cluster.slot(KeyBatch.from_keys([b"user:{42}:cart", b"{42}"])).tolist()
    assert pair[0] == pair[1] == crc_module.key_slot(b"user:{42}:cart") == crc_module.key_slot(b"{42}")


def test_crc16_check_value() -> None:
    # Redis Cluster Specification, appendix "CRC16 reference code": output for "123456789" is 31C3
    assert redis_cluster.crc16(KeyBatch.from_keys([b"123456789"])).tolist() == [0x31C3]
    assert redis_cluster.crc16(KeyBatch.from_keys([b""])).tolist() == [0]


def test_empty_batch_and_a_slice() -> None:
    empty = KeyBatch.from_keys([])
    assert len(redis_cluster.slot(empty)) == 0 and redis_cluster.crc16(empty).dtype == np.uint16
    assert [len(a) for a in redis_cluster.hash_tag_spans(empty)] == [0, 0]
    batch = KeyBatch.from_keys([b"a{b}c", b"{x", b"}{y}", b"{{z}}"] * 5)
    start, stop = redis_cluster.hash_tag_spans(batch.slice(3, 9))
    full_start, full_stop = redis_cluster.hash_tag_spans(batch)
    assert start.tolist() == full_start[3:9].tolist() and stop.tolist() == full_stop[3:9].tolist()
