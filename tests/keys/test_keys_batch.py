"""``KeyBatch.take``, ``concat``, ``compact`` and ``words_le64`` against plain Python lists of bytes."""

from __future__ import annotations

import struct

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hashaudit.keys.batch import KeyBatch

KEYS = [b"alpha", b"", b"b", b"gamma-delta", b"", b"\x00\xff\x10", b"alpha"]

key_lists = st.lists(st.binary(max_size=40), max_size=60)


def padded(keys: list[bytes], before: int = 3, after: int = 5) -> KeyBatch:
    """The keys as a slice of a larger buffer: bytes before and after, offsets not starting at 0."""
    whole = KeyBatch.from_keys([b"x" * before, *keys, b"y" * after])
    return whole.slice(1, len(keys) + 1)


def weighted(keys: list[bytes], weights: list[float]) -> KeyBatch:
    plain = KeyBatch.from_keys(keys)
    return KeyBatch(plain.data, plain.offsets, np.array(weights, dtype=np.float64))


def is_compact(batch: KeyBatch) -> bool:
    return int(batch.offsets[0]) == 0 and len(batch.data) == int(batch.offsets[-1])


class TestTake:
    @pytest.mark.parametrize(
        "positions",
        [[], [0], [6], [0, 2, 3], [1, 4], [6, 0, 3], [2, 2, 2], [5, 1, 5, 0], list(range(7))[::-1], [-1, 0], [-7]],
    )
    def test_matches_list_indexing(self, positions):
        for batch in (KeyBatch.from_keys(KEYS), padded(KEYS)):
            taken = batch.take(np.array(positions, dtype=np.int64))
            assert taken.to_list() == [KEYS[p] for p in positions]
            assert is_compact(taken)

    def test_a_plain_list_of_positions_is_accepted(self):
        assert KeyBatch.from_keys(KEYS).take([3, 0]).to_list() == [KEYS[3], KEYS[0]]

    def test_weights_follow_their_keys(self):
        batch = weighted(KEYS, [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0])
        for positions in ([0, 3, 6], [6, 3, 0], [1, 1]):
            taken = batch.take(positions)
            assert taken.weights is not None
            assert taken.weights.tolist() == [float(p + 1) for p in positions]
        assert KeyBatch.from_keys(KEYS).take([1, 2]).weights is None

    def test_out_of_range_positions_raise(self):
        batch = KeyBatch.from_keys(KEYS)
        for positions in ([7], [0, 9], [-8]):
            with pytest.raises(IndexError):
                batch.take(positions)

    @settings(max_examples=200, deadline=None)
    @given(keys=key_lists, data=st.data())
    def test_any_positions_like_a_list(self, keys, data):
        positions = data.draw(st.lists(st.integers(0, len(keys) - 1), max_size=80)) if keys else []
        for batch in (KeyBatch.from_keys(keys), padded(keys)):
            assert batch.take(np.array(positions, dtype=np.int64)).to_list() == [keys[p] for p in positions]


class TestConcat:
    def test_matches_list_concatenation(self):
        parts = [KEYS[:2], [], KEYS[2:5], KEYS[5:]]
        joined = KeyBatch.concat([padded(p) for p in parts])
        assert joined.to_list() == [k for p in parts for k in p]
        assert is_compact(joined) and joined.weights is None

    def test_no_batches_and_empty_batches(self):
        assert KeyBatch.concat([]).to_list() == []
        assert len(KeyBatch.concat([KeyBatch.from_keys([]), KeyBatch.from_keys([])])) == 0

    def test_weights_when_every_batch_has_them(self):
        joined = KeyBatch.concat([weighted([b"a", b"b"], [2.0, 3.0]), weighted([b"c"], [0.5])])
        assert joined.to_list() == [b"a", b"b", b"c"]
        assert joined.weights is not None and joined.weights.tolist() == [2.0, 3.0, 0.5]

    def test_a_batch_without_weights_weighs_one_per_key(self):
        joined = KeyBatch.concat([weighted([b"a"], [2.0]), KeyBatch.from_keys([b"b", b"c"])])
        assert joined.weights is not None and joined.weights.tolist() == [2.0, 1.0, 1.0]

    @settings(max_examples=100, deadline=None)
    @given(parts=st.lists(key_lists, max_size=5))
    def test_any_batches_like_lists(self, parts):
        assert KeyBatch.concat([padded(p) for p in parts]).to_list() == [k for p in parts for k in p]


class TestCompact:
    def test_a_slice_keeps_only_its_own_bytes(self):
        batch = padded(KEYS, before=100, after=100)
        compact = batch.compact()
        assert compact.to_list() == KEYS
        assert is_compact(compact) and compact.nbytes == sum(map(len, KEYS))
        assert not np.shares_memory(compact.data, batch.data)

    def test_weights_are_kept(self):
        batch = weighted(KEYS, list(range(7))).slice(2, 5)
        compact = batch.compact()
        assert compact.to_list() == KEYS[2:5]
        assert compact.weights is not None and compact.weights.tolist() == [2.0, 3.0, 4.0]

    def test_empty(self):
        assert KeyBatch.from_keys([]).compact().to_list() == []


class TestWordsLe64:
    def test_eight_byte_keys_read_little_endian(self):
        values = [0, 1, 2**64 - 1, 0x0102030405060708]
        keys = [struct.pack("<Q", v) for v in values]
        for batch in (KeyBatch.from_keys(keys), padded(keys)):
            words = batch.words_le64()
            assert words.dtype == np.uint64 and words.shape == (4, 1)
            assert words[:, 0].tolist() == values

    def test_sixteen_byte_keys_give_two_words_each(self):
        keys = [struct.pack("<QQ", 5, 7), struct.pack("<QQ", 2**63, 1)]
        assert KeyBatch.from_keys(keys).words_le64(16).tolist() == [[5, 7], [2**63, 1]]

    def test_empty_batch_takes_the_length_asked(self):
        assert KeyBatch.from_keys([]).words_le64(16).shape == (0, 2)
        assert KeyBatch.from_keys([]).words_le64().shape == (0, 1)

    def test_keys_of_other_lengths_are_refused(self):
        with pytest.raises(ValueError, match="one length"):
            KeyBatch.from_keys([b"12345678", b"1234567"]).words_le64()
        with pytest.raises(ValueError, match="one length"):
            KeyBatch.from_keys([b"123456789"]).words_le64()
        with pytest.raises(ValueError, match="one length"):
            KeyBatch.from_keys([b"12345678"]).words_le64(16)

    def test_the_words_are_a_copy(self):
        batch = KeyBatch.from_uint64(np.arange(3, dtype=np.uint64))
        words = batch.words_le64()
        words[:] = 9
        assert batch.words_le64()[:, 0].tolist() == [0, 1, 2]
