"""Avalanche and bit independence: the key sample, the flips, the flip counts and the tests of fit."""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest
from scipy import stats

import hashaudit.stats.avalanche as avalanche_module
from hashaudit.errors import MergeError, UsageError
from hashaudit.hashes.fingerprint import PRIORITY_DOMAIN, member_fingerprints, sample_priorities
from hashaudit.hashes.registry import from_callable, get_hash
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats.avalanche import (
    KeySample,
    _binomial_two_sided,
    avalanche_matrix,
    avalanche_tests,
    expected_max_abs_normal,
    expected_max_bias,
    flip_batch,
)
from hashaudit.stats.sample import _bottom_k


def realistic_keys(n: int = 3000, seed: int = 20240611) -> list[bytes]:
    """Half random user ids, half sequential item paths: the kinds of keys a cache or a table really sees."""
    rng = np.random.default_rng(seed)
    users = [b"user-%08d" % v for v in rng.choice(10**8, n // 2, replace=False)]
    items = [b"/api/v2/items/%d" % v for v in range(1, n - n // 2 + 1)]
    return users + items


REALISTIC = realistic_keys()
REALISTIC_SAMPLE = KeySample(4096, 0).update(KeyBatch.from_keys(REALISTIC))

# A hash whose output is the key's first 8 bytes read little-endian: flipping input bit i flips output bit i and
# nothing else, so every flip count is known exactly (the identity-hash fixture of STYLE.md).
FIRST_EIGHT_BYTES = from_callable("first_eight_bytes", lambda key: int.from_bytes(key[:8], "little"), width=64)


def function_of(name: str):  # type: ignore[no-untyped-def]
    """The batch function and width of a registered hash: what the statistics take."""
    spec = get_hash(name)
    return spec.hash_batch, spec.width


def stream_with_repeats(seed: int = 5, n: int = 1200) -> list[bytes]:
    rng = np.random.default_rng(seed)
    keys = [rng.bytes(int(length)) for length in rng.integers(0, 24, n)]
    repeats = [keys[int(i)] for i in rng.integers(0, n, n // 4)]
    stream = keys + repeats + [b"", b"hot"] * 50
    order = rng.permutation(len(stream))
    return [stream[int(i)] for i in order]


STREAM = stream_with_repeats()
STREAM_BATCH = KeyBatch.from_keys(STREAM)


class TestKeySample:
    size = 100
    seed = 7

    def make(self) -> KeySample:
        return KeySample(self.size, self.seed)

    def whole(self) -> KeySample:
        return self.make().update(STREAM_BATCH)

    def test_matches_a_plain_python_bottom_k(self):
        sample = self.whole()
        priorities = sample_priorities(STREAM_BATCH, self.seed).tolist()
        priority = dict(zip(STREAM, priorities, strict=True))
        reference = sorted(set(STREAM), key=lambda key: (priority[key], key))[: self.size]
        assert sample.keys().to_list() == reference
        assert sample.keys_seen_ == len(STREAM)

    def test_priorities_are_siphash24_under_the_seeded_key(self):
        # outside reference: the siphashc package (C implementation of SipHash-2-4), key = 16 little-endian bytes
        siphashc = pytest.importorskip("siphashc")
        keys = STREAM[:40]
        for seed in (0, self.seed, 2**64 + 3):
            key = ((seed ^ (PRIORITY_DOMAIN << 64)) % 2**128).to_bytes(16, "little")
            expected = [siphashc.siphash(key, k) for k in keys]
            assert sample_priorities(KeyBatch.from_keys(keys), seed).tolist() == expected

    @pytest.mark.parametrize("chunk", [1, 2, 50, len(STREAM), len(STREAM) + 42])
    def test_chunking_does_not_change_the_sample(self, chunk):
        sample = self.make()
        for start in range(0, len(STREAM), chunk):
            sample.update(STREAM_BATCH.slice(start, min(start + chunk, len(STREAM))))
        assert sample == self.whole()

    def test_order_and_repeats_do_not_change_the_keys(self):
        distinct = sorted(set(STREAM))
        once = KeySample(self.size, self.seed).update(KeyBatch.from_keys(distinct))
        assert once.keys().to_list() == self.whole().keys().to_list()

    def test_merge_of_partitions_equals_one_pass(self):
        parts = [STREAM_BATCH.slice(a, min(a + 317, len(STREAM))) for a in range(0, len(STREAM), 317)]
        samples = [self.make().update(p) for p in parts]
        left = samples[0].copy()
        for s in samples[1:]:
            left.merge(s)
        right = samples[-1].copy()
        for s in reversed(samples[:-1]):
            right.merge(s)
        assert left == right == self.whole()
        assert self.make().merge(self.whole()) == self.whole()

    def test_merge_refuses_other_settings(self):
        with pytest.raises(MergeError, match="size or seed differ"):
            self.make().merge(KeySample(self.size, self.seed + 1))
        with pytest.raises(MergeError):
            self.make().merge(KeySample(self.size + 1, self.seed))

    def test_same_seed_same_sample_other_seed_other_sample(self):
        assert self.whole() == self.whole()
        other = KeySample(self.size, self.seed + 1).update(STREAM_BATCH)
        assert other.keys().to_list() != self.whole().keys().to_list()

    def test_small_streams_keep_every_distinct_key(self):
        sample = KeySample(10_000, 3).update(STREAM_BATCH)
        assert len(sample) == len(set(STREAM))
        assert sorted(sample.keys().to_list()) == sorted(set(STREAM))

    def test_copy_is_independent_and_pickles(self):
        sample = self.whole()
        twin = sample.copy()
        twin.update(KeyBatch.from_keys([b"one more key %d" % i for i in range(500)]))
        assert twin != sample
        assert pickle.loads(pickle.dumps(sample)) == sample
        assert sample.result().to_list() == sample.keys().to_list()

    def test_sample_is_uniform_over_the_keys(self):
        # 1000 of the integers 0..9999 fall evenly in ten deciles (chi-square with 9 d.f., scipy.stats)
        sample = KeySample(1000, 11).update(KeyBatch.from_uint64(np.arange(10_000, dtype=np.uint64)))
        values = sample.keys().words_le64(8)[:, 0]
        counts = np.bincount(values // 1000, minlength=10)
        assert stats.chisquare(counts).pvalue > 1e-3

    def test_ties_in_priority_are_ordered_by_bytes_and_repeats_dropped(self):
        batch = KeyBatch.from_keys([b"b", b"a", b"a", b"c", b""])
        priorities = np.array([5, 5, 5, 1, 5], dtype=np.uint64)
        # by hand: c (priority 1), then the priority-5 run sorted by bytes: "", "a" (first copy), "b"
        assert _bottom_k(batch, priorities, 3).tolist() == [3, 4, 1]
        assert _bottom_k(batch, priorities, 10).tolist() == [3, 4, 1, 0]

    @pytest.mark.parametrize("size, seed", [(0, 0), (-1, 0), (2.5, 0), (10, -1)])
    def test_bad_settings_are_usage_errors(self, size, seed):
        with pytest.raises(UsageError):
            KeySample(size, seed)


def reference_flips(keys: list[bytes], max_bytes: int) -> tuple[list[bytes], list[int], list[int]]:
    flips, bits, parents = [], [], []
    for index, key in enumerate(keys):
        for j in range(min(len(key), max_bytes)):
            for b in range(8):
                changed = bytearray(key)
                changed[j] ^= 1 << b
                flips.append(bytes(changed))
                bits.append(8 * j + b)
                parents.append(index)
    return flips, bits, parents


class TestFlipBatch:
    @pytest.mark.parametrize("max_bytes", [1, 3, 16])
    def test_matches_plain_python(self, max_bytes):
        keys = [b"", b"a", b"user-00000042", bytes(range(40)), b"\xff\x00"]
        flips, bits = flip_batch(KeyBatch.from_keys(keys), max_bytes)
        expected_flips, expected_bits, _ = reference_flips(keys, max_bytes)
        assert flips.to_list() == expected_flips
        assert bits.tolist() == expected_bits
        assert bits.dtype == np.int64

    def test_empty_keys_and_batches_give_nothing(self):
        for keys in ([], [b"", b""]):
            flips, bits = flip_batch(KeyBatch.from_keys(keys))
            assert len(flips) == 0 and len(bits) == 0

    @pytest.mark.parametrize("max_bytes", [0, -3, 1.5])
    def test_bad_max_bytes_is_a_usage_error(self, max_bytes):
        with pytest.raises(UsageError, match="max_bytes"):
            flip_batch(KeyBatch.from_keys([b"x"]), max_bytes)


def reference_matrix(spec, keys: list[bytes], max_bytes: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, int]:
    """Flip counts, trials and pair counts one key at a time, with pairs inside the sample counted once."""
    keys = list(dict.fromkeys(keys))
    present = set(keys)
    width = spec.width
    counts = np.zeros((8 * max_bytes, width), dtype=np.int64)
    trials = np.zeros(8 * max_bytes, dtype=np.int64)
    pairs = np.zeros((width, width), dtype=np.int64)
    skipped = 0
    for key in keys:
        base = spec.hash_key(key)
        for flipped, bit, _ in zip(*reference_flips([key], max_bytes), strict=True):
            if flipped in present and (key[bit // 8] >> (bit % 8)) & 1:
                skipped += 1
                continue
            diff = base ^ spec.hash_key(flipped)
            on = [j for j in range(width) if (diff >> j) & 1]
            trials[bit] += 1
            counts[bit, on] += 1
            pairs[np.ix_(on, on)] += 1
    return counts, trials, pairs, skipped


SMALL_KEYS = [b"/api/v2/items/%d" % v for v in range(1, 31)] + [b"user-00000001", b"", b"x", b"user-00000001"]


class TestAvalancheMatrix:
    @pytest.mark.parametrize("name", ["fnv1a_32", "murmur3_128", "xxh3_64"])
    def test_matches_a_plain_python_reference(self, name):
        spec = get_hash(name)
        result = avalanche_matrix(spec.hash_batch, spec.width, KeyBatch.from_keys(SMALL_KEYS), 0, max_bytes=16)
        counts, trials, pairs, skipped = reference_matrix(spec, SMALL_KEYS, 16)
        assert result.pairs_counted_once == skipped > 0  # sequential ids: many keys one bit apart
        np.testing.assert_array_equal(result.trials, trials)
        np.testing.assert_array_equal(result.flip_counts, counts)
        np.testing.assert_array_equal(result.pair_counts, pairs)
        assert result.flips == trials.sum()
        assert result.keys == len(set(SMALL_KEYS))
        assert result.flip_counts.shape == (128, spec.width)

    def test_first_eight_bytes_hash_flips_exactly_the_flipped_bit(self):
        rng = np.random.default_rng(3)
        keys = [rng.bytes(int(n)) for n in rng.integers(8, 13, 200)]
        result = avalanche_matrix(FIRST_EIGHT_BYTES.hash_batch, 64, KeyBatch.from_keys(keys), max_bytes=8)
        assert result.pairs_counted_once == 0  # random keys: no two one bit apart
        np.testing.assert_array_equal(result.trials, np.full(64, 200))
        np.testing.assert_array_equal(result.flip_counts, 200 * np.eye(64, dtype=np.int64))
        np.testing.assert_array_equal(result.pair_counts, 200 * np.eye(64, dtype=np.int64))

    def test_a_pair_of_sample_keys_one_bit_apart_is_counted_once(self):
        pad = b"\x00" * 7
        keys = [b"\x00" + pad, b"\x01" + pad, b"\x03" + pad]
        result = avalanche_matrix(FIRST_EIGHT_BYTES.hash_batch, 64, KeyBatch.from_keys(keys), max_bytes=8)
        # by hand: bit 0 joins 00-01 (counted from 00) and 03-02 (02 is not a sample key); bit 1 joins 00-02 and
        # 01-03 (counted from 01); every other bit has three separate pairs
        assert result.trials[:2].tolist() == [2, 2]
        assert (result.trials[2:] == 3).all()
        assert result.pairs_counted_once == 2

    def test_sample_and_batch_of_the_same_keys_agree(self):
        spec = get_hash("murmur3_32")
        from_sample = avalanche_matrix(
            spec.hash_batch, spec.width, KeySample(100, 1).update(KeyBatch.from_keys(SMALL_KEYS)), 5
        )
        from_batch = avalanche_matrix(spec.hash_batch, spec.width, KeyBatch.from_keys(SMALL_KEYS[::-1]), 5)
        assert from_sample.sample_seed == 1 and from_batch.sample_seed is None
        for field in ("trials", "flip_counts", "pair_counts"):
            np.testing.assert_array_equal(getattr(from_sample, field), getattr(from_batch, field))

    def test_chunk_budget_does_not_change_the_counts(self, monkeypatch):
        spec = get_hash("siphash24")
        whole = avalanche_matrix(spec.hash_batch, spec.width, KeyBatch.from_keys(SMALL_KEYS), 9)
        monkeypatch.setattr(avalanche_module, "FLIP_CHUNK_FLIPS", 100)
        chunked = avalanche_matrix(spec.hash_batch, spec.width, KeyBatch.from_keys(SMALL_KEYS), 9)
        for field in ("trials", "flip_counts", "pair_counts"):
            np.testing.assert_array_equal(getattr(whole, field), getattr(chunked, field))

    def test_the_hash_seed_is_used(self):
        spec = get_hash("xxh3_64")
        a = avalanche_matrix(spec.hash_batch, spec.width, KeyBatch.from_keys(SMALL_KEYS), 1)
        b = avalanche_matrix(spec.hash_batch, spec.width, KeyBatch.from_keys(SMALL_KEYS), 2)
        assert not np.array_equal(a.flip_counts, b.flip_counts)
        assert a.hash_seed == 1

    def test_no_flips_no_tests(self):
        for keys in ([], [b"", b""]):
            result = avalanche_matrix(*function_of("crc32"), KeyBatch.from_keys(keys))
            assert result.flips == 0
            assert avalanche_tests(result) == []

    def test_result_is_read_only(self):
        result = avalanche_matrix(*function_of("crc32"), KeyBatch.from_keys(SMALL_KEYS))
        with pytest.raises(ValueError):
            result.flip_counts[0, 0] = 1

    def test_flip_probability_is_nan_for_input_bits_no_key_has(self):
        result = avalanche_matrix(FIRST_EIGHT_BYTES.hash_batch, 64, KeyBatch.from_keys([b"ab", b"c"]), max_bytes=4)
        probability = result.flip_probability()
        assert result.trials.tolist() == [2] * 8 + [1] * 8 + [0] * 16
        assert np.isnan(probability[16:]).all()
        np.testing.assert_array_equal(probability[:16, :16], np.eye(16))


class TestAvalancheTests:
    def first_eight_bytes_tests(self):
        rng = np.random.default_rng(3)
        keys = [rng.bytes(int(n)) for n in rng.integers(8, 13, 200)]
        return avalanche_tests(
            avalanche_matrix(FIRST_EIGHT_BYTES.hash_batch, 64, KeyBatch.from_keys(keys), max_bytes=8)
        )

    def test_statistics_of_the_first_eight_bytes_hash_by_hand(self):
        aval, independence = self.first_eight_bytes_tests()
        # every cell has S = 200 and C = S (diagonal) or 0: each z^2 = (2C - S)^2 / S = 200, over 64 * 64 cells
        assert aval.statistic == pytest.approx(64 * 64 * 200)
        assert aval.expected == 64 * 64
        assert aval.p_upper == 0.0
        assert aval.effect.value == 0.5
        assert aval.details["worst_flip_probability"] in (0.0, 1.0)
        # each flip flips exactly one output bit: N = 64 * 200 flips, a_j = 200, both = 0, so
        # phi = (0 - 200^2) / (200 * (N - 200)) = -1/63 for every pair and N * phi^2 summed over C(64, 2) pairs
        n = 64 * 200
        assert independence.details["worst_phi"] == pytest.approx(-1 / 63)
        assert independence.statistic == pytest.approx(n * 2016 / 63**2)
        assert independence.expected == 2016

    def test_phi_matches_numpy_corrcoef(self):
        spec = get_hash("murmur3_32")
        keys = list(dict.fromkeys(SMALL_KEYS))
        result = avalanche_matrix(spec.hash_batch, spec.width, KeyBatch.from_keys(keys))
        rows = []
        for key in keys:
            base = spec.hash_key(key)
            for flipped, bit, _ in zip(*reference_flips([key], 16), strict=True):
                if flipped in keys and (key[bit // 8] >> (bit % 8)) & 1:
                    continue
                diff = base ^ spec.hash_key(flipped)
                rows.append([(diff >> j) & 1 for j in range(32)])
        correlation = np.corrcoef(np.array(rows, dtype=np.float64), rowvar=False)  # outside reference: numpy
        upper = correlation[np.triu_indices(32, 1)]
        independence = avalanche_tests(result)[1]
        assert independence.statistic == pytest.approx(len(rows) * np.sum(upper**2), rel=1e-9)
        assert abs(independence.details["worst_phi"]) == pytest.approx(np.abs(upper).max(), rel=1e-9)

    @pytest.mark.parametrize("name", ["crc32", "poly31", "djb2"])
    def test_weak_hashes_fail_on_realistic_keys(self, name):
        aval, independence = avalanche_tests(avalanche_matrix(*function_of(name), REALISTIC_SAMPLE))
        assert aval.p_upper < 1e-12
        assert aval.effect.value > 0.25 > 4 * aval.effect.ideal  # some cells flip (almost) always or never
        assert independence.p_upper < 1e-12
        assert independence.effect.value > 10 * independence.effect.ideal

    @pytest.mark.parametrize("name", ["xxh3_64", "murmur3_32", "siphash24", "blake2b_64"])
    def test_strong_hashes_pass_on_realistic_keys(self, name):
        result = avalanche_matrix(*function_of(name), REALISTIC_SAMPLE)
        assert result.keys == len(REALISTIC) and result.pairs_counted_once > 0
        for test in avalanche_tests(result):
            assert test.p_upper > 1e-3, test
            assert 0.7 < test.effect.value / test.effect.ideal < 1.5, test

    @pytest.mark.parametrize("name", ["xxh3_64", "siphash24"])
    def test_null_calibration_over_sample_seeds(self, name):
        # 30 samples of 512 keys out of 6000 (nearly independent samples); under the null the chi-square p-values
        # are uniform and the combined p_upper (Bonferroni of two p-values) is at least uniform
        spec = get_hash(name)
        population = KeyBatch.from_keys(realistic_keys(6000, seed=99))
        rows = []
        for seed in range(30):
            aval, independence = avalanche_tests(
                avalanche_matrix(spec.hash_batch, spec.width, KeySample(512, seed).update(population))
            )
            rows.append(
                [
                    aval.details["chi_square_p_upper"],
                    independence.details["chi_square_p_upper"],
                    aval.p_upper,
                    independence.p_upper,
                ]
            )
        p = np.array(rows)
        assert p.min() > 1e-3
        for column in (0, 1):
            assert stats.kstest(p[:, column], "uniform").pvalue > 0.01

    def test_expected_max_bias_small_cases_by_hand(self):
        # S = 2: |X/2 - 1/2| is 1/2 with probability 1/2 and 0 otherwise, so E = 1/4
        assert expected_max_bias(np.array([2])) == pytest.approx(0.25, abs=1e-3)
        # S = 1: always 1/2 (the trapezoidal rule loses half a grid step at the jump)
        assert expected_max_bias(np.array([1])) == pytest.approx(0.5, abs=1e-3)
        assert expected_max_bias(np.array([], dtype=np.int64)) == 0.0

    def test_expected_maxima_match_monte_carlo(self):
        rng = np.random.default_rng(2024)
        trials = np.repeat([40, 200, 1000], 64)
        draws = rng.binomial(trials, 0.5, size=(4000, len(trials)))
        simulated = np.abs(draws / trials - 0.5).max(axis=1)
        tolerance = 4 * simulated.std() / math.sqrt(len(simulated))
        assert expected_max_bias(trials) == pytest.approx(simulated.mean(), abs=tolerance)
        normals = np.abs(rng.standard_normal((4000, 500))).max(axis=1) * 0.01
        tolerance = 4 * normals.std() / math.sqrt(len(normals))
        assert 0.01 * expected_max_abs_normal(500) == pytest.approx(normals.mean(), abs=tolerance)

    def test_two_sided_binomial_matches_scipy(self):
        successes = np.array([0, 3, 10, 20, 57, 100])
        trials = np.array([5, 10, 20, 20, 100, 100])
        expected = [stats.binomtest(int(k), int(n), 0.5).pvalue for k, n in zip(successes, trials, strict=True)]
        np.testing.assert_allclose(_binomial_two_sided(successes, trials), expected, rtol=1e-9)

    def test_details_name_the_worst_cell_and_the_seeds(self):
        aval, independence = avalanche_tests(avalanche_matrix(*function_of("crc32"), REALISTIC_SAMPLE, seed=3))
        for test in (aval, independence):
            assert test.details["sample_seed"] == 0 and test.details["hash_seed"] == 3
            assert test.details["keys"] == len(REALISTIC)
            assert test.p_lower >= 0.0
        assert 0 <= aval.details["worst_input_bit"] < 128 and 0 <= aval.details["worst_output_bit"] < 32
        assert aval.details["cells"] == aval.details["input_bits_used"] * 32


class TestKeyFunctions:
    """The statistics take the hash and the key fingerprints as functions, not registry entries."""

    def test_a_plain_batch_function_and_a_name(self):
        def low_word(batch: KeyBatch, seed: int) -> np.ndarray:
            return batch.words_le64(8)[:, 0] ^ np.uint64(seed)

        keys = KeyBatch.from_uint64(np.arange(100, dtype=np.uint64) * np.uint64(977))
        result = avalanche_matrix(low_word, 64, keys, seed=5, max_bytes=8, name="low word")
        assert result.hash_name == "low word" and result.width == 64
        np.testing.assert_array_equal(result.flip_counts, np.diag(result.trials))

    def test_a_width_the_tables_cannot_take_is_refused(self):
        with pytest.raises(UsageError, match="width must be 32, 64 or 128"):
            avalanche_matrix(get_hash("xxh3_64").hash_batch, 48, KeyBatch.from_keys(SMALL_KEYS))

    def test_the_default_member_fingerprint_is_the_hash_layers(self):
        batch = KeyBatch.from_keys(SMALL_KEYS)
        default = avalanche_matrix(*function_of("murmur3_32"), batch, 3)
        explicit = avalanche_matrix(*function_of("murmur3_32"), batch, 3, fingerprint=member_fingerprints)
        for field in ("trials", "flip_counts", "pair_counts"):
            np.testing.assert_array_equal(getattr(default, field), getattr(explicit, field))

    def test_a_sample_takes_its_priorities_from_the_function_given(self):
        def by_length(batch: KeyBatch, seed: int) -> np.ndarray:
            return batch.lengths().astype(np.uint64)

        keys = [b"ccc", b"a", b"bb", b"dddd", b"a"]
        sample = KeySample(2, 0, priority=by_length).update(KeyBatch.from_keys(keys))
        assert sample.keys().to_list() == [b"a", b"bb"]
        assert sample.copy() == sample and sample.copy().priority is by_length
        with pytest.raises(MergeError, match="different functions"):
            KeySample(2, 0).merge(sample)
        assert KeySample(2, 0) != KeySample(2, 0, priority=by_length)


class TestFewFlips:
    """Up to EXACT_BELOW_FLIPS candidate flips the tests simulate their null laws on the keys' own flip graph."""

    def test_two_keys_sharing_neighbours(self):
        from hashaudit.stats.avalanche import EXACT_BELOW_FLIPS

        spec = get_hash("xxh3_64")
        result = avalanche_matrix(spec.hash_batch, spec.width, KeyBatch.from_keys([b"a", b"b"]))
        graph = result.graph
        assert graph is not None and result.flips == 16 <= EXACT_BELOW_FLIPS
        # 'a' ^ 0x03 == 'b': flipping bit 0 of one and bit 1 of the other reach the same key ('`' and 'c')
        assert graph.vertices == 2 + 14
        assert sorted(np.bincount(graph.ends.ravel(), minlength=graph.vertices)[2:].tolist()) == [1] * 12 + [2, 2]
        np.testing.assert_array_equal(graph.input_bit, np.tile(np.arange(8), 2))
        tests = {t.name: t for t in avalanche_tests(result)}
        independence = tests["bit_independence"]
        assert "simulated ideal hashes" in independence.method
        assert independence.p_upper > 0.01  # once p = 9.6e-06 from chi-square laws that need many flips
        assert 0 < independence.effect.ideal <= 1.0  # the expected largest |phi| is a correlation
        assert "simulated ideal hashes" in tests["avalanche"].method

    def test_many_flips_keep_the_chi_square_laws(self):
        spec = get_hash("xxh3_64")
        result = avalanche_matrix(spec.hash_batch, spec.width, KeyBatch.from_keys(SMALL_KEYS))
        assert result.graph is None
        assert all("chi-square" in t.method for t in avalanche_tests(result))

    def test_graph_flips_agree_with_the_counts(self):
        spec = get_hash("murmur3_128")
        keys = KeyBatch.from_keys([b"k1", b"k3", b"zz"])
        result = avalanche_matrix(spec.hash_batch, spec.width, keys, 4)
        graph = result.graph
        assert graph is not None and len(graph.xors) == result.flips
        np.testing.assert_array_equal(np.bincount(graph.input_bit, minlength=128), result.trials)
        bits = np.unpackbits(graph.xors.astype("<u8").view(np.uint8), axis=1, bitorder="little")
        np.testing.assert_array_equal(bits.T.astype(np.int64) @ bits.astype(np.int64), result.pair_counts)

    @pytest.mark.slow
    def test_the_simulated_null_is_calibrated(self):
        # 200 sets of three random 4-byte keys through siphash24 (an ideal hash): p-values not too small
        spec = get_hash("siphash24")
        rng = np.random.default_rng(47)
        p = []
        for run in range(200):
            keys = KeyBatch.from_keys([rng.bytes(4) for _ in range(3)])
            result = avalanche_matrix(spec.hash_batch, spec.width, keys, run)
            p.append([t.details["chi_square_p_upper"] for t in avalanche_tests(result)])
        share = (np.array(p) <= 0.05).mean(axis=0)
        assert (share <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / 200)).all(), share


@pytest.mark.parametrize("kept", [True, False])
def test_flips_made_once_give_every_hash_its_own_matrix(kept: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    """``avalanche_flips`` made once and passed to several hash functions (what an audit does) gives each the
    matrix, counts and small-sample graph it gets alone, whether the flips are kept or made again per use."""
    from hashaudit.stats.avalanche import avalanche_flips

    if not kept:
        monkeypatch.setattr(avalanche_module, "SHARED_FLIPS_BYTES", 0)
    for sample in (REALISTIC_SAMPLE, KeyBatch.from_keys(SMALL_KEYS)):
        flips = avalanche_flips(sample, 16)
        assert (flips.kept is not None) == kept
        for name in ("murmur3_32", "xxh3_64", "crc32"):
            alone = avalanche_matrix(*function_of(name), sample, 3)
            shared = avalanche_matrix(*function_of(name), sample, 3, flips=flips)
            for field in ("flip_counts", "pair_counts", "trials"):
                assert np.array_equal(getattr(shared, field), getattr(alone, field)), (name, field)
            assert (shared.flips, shared.pairs_counted_once, shared.sample_seed, shared.keys) == (
                alone.flips,
                alone.pairs_counted_once,
                alone.sample_seed,
                alone.keys,
            )
            assert (shared.graph is None) == (alone.graph is None)
            if alone.graph is not None:
                assert np.array_equal(shared.graph.ends, alone.graph.ends)
                assert np.array_equal(shared.graph.xors, alone.graph.xors)
    with pytest.raises(UsageError, match="max_bytes 8"):
        avalanche_matrix(
            *function_of("crc32"), REALISTIC_SAMPLE, flips=avalanche_flips(REALISTIC_SAMPLE, 16), max_bytes=8
        )
