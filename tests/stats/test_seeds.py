"""Seed sensitivity: the seed runs, the collision search across seeds, ``seed_spread`` and
``seed_independent_collisions``.

Where expected values come from:

* "Aa" and "BB" share one ``h = 31*h + byte`` value (31*65 + 97 = 31*66 + 66 = 2112; the classic example for
  Java's String.hashCode, from memory, checked in tests/hashes/test_simple_hashes.py), so every string made of
  such blocks shares one poly31 value.
* Seed-independent MurmurHash3 x86_32 collisions: the idea (a difference put into the state by one block and
  cancelled by the next, whatever the seed) is from Aumasson, Bernstein & Boßlet, "Hash-flooding DoS reloaded",
  29C3 (2012), from memory; the two differences used here (2^18 after the block mixing, which the state's
  rotation by 13 and multiplication by 5 turn into 2^31, then 2^31) are derived in ``murmur3_collision_keys``.
  The test itself checks that the keys collide (no outside value is trusted).
* Group counts: a brute-force ``collections.Counter`` over the tuples of every seed's hash value.
* Expected pairs C(n, 2) / 2^(b·S): exact rationals (``fractions.Fraction``).
* The one-sided Kolmogorov–Smirnov p-value: the exact formula of Birnbaum & Tingey (1951), written out here in
  plain Python; E D+ for 8 draws: a Monte Carlo estimate with a fixed seed.
* The 64-bit mixer of the test plugins is the splitmix64 finalizer (Steele, Lea & Flood, "Fast splittable
  pseudorandom number generators", OOPSLA 2014; constants from memory). Any strong mixer would do.
"""

from __future__ import annotations

import itertools
import math
from collections import Counter
from fractions import Fraction

import numpy as np
import pytest
from scipy import stats

from hashaudit.checks import Thresholds, judge
from hashaudit.errors import UsageError
from hashaudit.hashes.fnv import poly31
from hashaudit.hashes.registry import HashSpec, get_hash
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats.seeds import (
    CAUTION,
    DEFAULT_SEEDS,
    SeedRuns,
    expected_ks_plus,
    randomised_p_values,
    seed_runs,
    seed_tests,
)

SEEDS = list(range(1, 9))
N = 1 << 14
TABLES = [("mask", 1 << 10), ("mask", 1 << 14), ("mod", 16381)]  # 16381 = 2^14 - 3 is prime
STRONG = ["siphash24", "xxh3_64", "murmur3_32"]
_U64 = np.uint64


def mix64(x: np.ndarray) -> np.ndarray:
    """The splitmix64 finalizer on a uint64 array (wrapping arithmetic)."""
    x = x ^ (x >> _U64(30))
    x = x * _U64(0xBF58476D1CE4E5B9)
    x = x ^ (x >> _U64(27))
    x = x * _U64(0x94D049BB133111EB)
    return x ^ (x >> _U64(31))


def seed_word(seed: int) -> np.uint64:
    return mix64(np.array([seed & (2**64 - 1)], dtype=np.uint64))[0]


def mixed_poly31(batch: KeyBatch, seed: int) -> np.ndarray:
    """A strong mix of (seed, poly31(key)): 64 bits out, but keys with equal poly31 collide under every seed."""
    return mix64(poly31(batch) ^ seed_word(seed))


def poly31_xor_seed(batch: KeyBatch, seed: int) -> np.ndarray:
    """poly31 with the seed XORed into the output: under a power-of-two mask the seed only relabels buckets."""
    return poly31(batch) ^ _U64(seed & 0xFFFFFFFF)


MIXED_POLY31 = HashSpec("mixed_poly31", 64, True, "kernel", mixed_poly31)
POLY31_XOR_SEED = HashSpec("poly31_xor_seed", 32, True, "kernel", poly31_xor_seed)


def spec_runs(
    spec: HashSpec, keys: KeyBatch, tables: list, seeds: list[int] | tuple[int, ...] = DEFAULT_SEEDS, null_seed: int = 0
) -> SeedRuns:
    """``seed_runs`` of a registry entry: its batch function, width, use of the seed and name."""
    return seed_runs(spec.hash_batch, spec.width, keys, tables, seeds, null_seed, spec.seeded, spec.name)


def random_keys(n: int = N, seed: int = 20240611) -> KeyBatch:
    """Distinct random 8-byte integer keys."""
    values = np.random.default_rng(seed).choice(2**62, size=n, replace=False).astype(np.uint64)
    return KeyBatch.from_uint64(values)


def crafted_keys(blocks: int) -> KeyBatch:
    """All 2^blocks strings of the blocks "Aa" and "BB"."""
    return KeyBatch.from_keys(b"".join(choice) for choice in itertools.product([b"Aa", b"BB"], repeat=blocks))


def murmur3_collision_keys(segments: int, seed: int = 7) -> KeyBatch:
    """2^segments keys of 8·segments bytes with one MurmurHash3 x86_32 value under every seed.

    A block x enters the state as k = rotl(x·c1, 15)·c2, then h = rotl(h ^ k, 13)·5 + n. If two blocks give k
    values differing in bit 18 only, h ^ k differs in bit 18, the rotation moves it to bit 31, and multiplying by
    5 and adding n keep a difference in bit 31 alone (adding 2^31 flips only the top bit, mod 2^32). If the next
    blocks give k values differing in bit 31, the XOR cancels it: the states are equal again, whatever the seed
    h started from. Each 8-byte segment is one of two such block pairs, chosen independently.
    """
    c1, c2, mask = 0xCC9E2D51, 0x1B873593, 0xFFFFFFFF  # MurmurHash3 x86_32 constants (hashaudit.hashes.murmur)
    c1_inverse, c2_inverse = pow(c1, -1, 1 << 32), pow(c2, -1, 1 << 32)

    def block(k: int) -> bytes:
        x = (k * c2_inverse) & mask
        x = ((x >> 15) | (x << 17)) & mask  # rotr 15
        return ((x * c1_inverse) & mask).to_bytes(4, "little")

    rng = np.random.default_rng(seed)
    pairs = []
    for _ in range(segments):
        k1, k2 = (int(v) for v in rng.integers(0, 1 << 32, size=2))
        pairs.append((block(k1) + block(k2), block(k1 ^ (1 << 18)) + block(k2 ^ (1 << 31))))
    return KeyBatch.from_keys(b"".join(choice) for choice in itertools.product(*pairs))


def verdicts(name: str, runs: SeedRuns) -> dict[str, str]:
    tests = seed_tests(runs)
    findings = judge([(name, None, None, runs.keys, t) for t in tests], Thresholds())
    return {f.check: f.verdict for f in findings}


def by_name(runs: SeedRuns) -> dict:
    return {t.name: t for t in seed_tests(runs)}


# ---------------------------------------------------------------------------------------------------------
# The keys the tests rely on


def test_crafted_keys_share_one_poly31_value_and_are_distinct():
    keys = crafted_keys(12)
    assert len(set(keys.to_list())) == 4096
    assert np.unique(poly31(keys)).tolist() == [int(poly31(KeyBatch.from_keys([b"Aa" * 12]))[0])]


def test_murmur3_collision_keys_collide_under_any_seed():
    keys = murmur3_collision_keys(6)
    assert len(set(keys.to_list())) == 64
    murmur = get_hash("murmur3_32")
    for seed in (0, 1, 0xDEADBEEF, 2**32 - 1):
        assert len(np.unique(murmur.hash_batch(keys, seed))) == 1


# ---------------------------------------------------------------------------------------------------------
# seed_independent_collisions


def test_collisions_of_the_inner_hash_survive_every_seed():
    """mix(seed, poly31(key)) is a fine 64-bit function of poly31's value, but keys sharing that value collide
    whatever the seed: one group of all 4,096 crafted keys under all 8 seeds."""
    runs = spec_runs(MIXED_POLY31, crafted_keys(12), [], SEEDS)
    assert runs.candidates == (4096,) * 8
    assert runs.group_sizes.tolist() == [4096]
    assert runs.colliding_pairs == math.comb(4096, 2)
    test = by_name(runs)["seed_independent_collisions"]
    assert test.observed == test.statistic == math.comb(4096, 2)
    assert test.p_upper == 0.0  # Poisson tail of 8,386,560 pairs against C(4096, 2) / 2^512, about 2^-489, expected
    assert test.effect.name == "collision_excess"
    assert test.effect.value > Thresholds().collision_excess
    assert test.details["largest_groups"] == [4096]
    assert test.details["keys_in_collisions"] == 4096
    assert test.details["caution"] == CAUTION
    assert "SipHash (Aumasson & Bernstein 2012)" in CAUTION and "security policy" in CAUTION
    assert verdicts("mixed_poly31", runs)["seed_independent_collisions"] == "fail"


@pytest.mark.parametrize("name", STRONG + ["murmur3_128"])
def test_strong_seeded_functions_have_no_seed_independent_collisions(name):
    spec = get_hash(name)
    for keys in (crafted_keys(12), random_keys()):
        runs = spec_runs(spec, keys, [], SEEDS)
        test = by_name(runs)["seed_independent_collisions"]
        assert runs.colliding_pairs == 0 and runs.candidates[-1] == 0
        assert test.p_upper == 1.0 and test.effect.value <= 0
        assert "caution" not in test.details and "SipHash" in test.details["note"]
        assert verdicts(name, runs)["seed_independent_collisions"] == "pass"


def test_differential_keys_make_murmur3_fail_while_siphash_passes():
    """Passing on "Aa"/"BB" keys is no security claim: keys crafted against MurmurHash3 itself collide under
    every seed, and the check says so; SipHash-2-4 and XXH3 do not collide on the same keys."""
    keys = murmur3_collision_keys(8)
    murmur = spec_runs(get_hash("murmur3_32"), keys, [], SEEDS)
    assert murmur.group_sizes.tolist() == [256]
    assert verdicts("murmur3_32", murmur)["seed_independent_collisions"] == "fail"
    for name in ("siphash24", "xxh3_64"):
        assert spec_runs(get_hash(name), keys, [], SEEDS).colliding_pairs == 0


def test_expected_pairs_and_poisson_tail():
    runs = spec_runs(get_hash("murmur3_32"), random_keys(5000), [], [1, 2])
    test = by_name(runs)["seed_independent_collisions"]
    exact = Fraction(math.comb(5000, 2), 2 ** (32 * 2))  # C(n, 2) / 2^(b·S)
    assert test.expected == pytest.approx(float(exact), rel=1e-15)
    assert test.details["width"] == 32 and test.details["seeds"] == [1, 2]
    # 128-bit values under 8 seeds: 4950 / 2^1024 is still a float; under 10 seeds it underflows to 0 and the test
    # still runs (no pair: p = 1)
    wide = spec_runs(get_hash("murmur3_128"), random_keys(100), [], SEEDS)
    assert wide.expected_pairs == pytest.approx(float(Fraction(4950, 2**1024)), rel=1e-12)
    wider = spec_runs(get_hash("murmur3_128"), random_keys(100), [], list(range(10)))
    assert wider.expected_pairs == 0.0
    assert by_name(wider)["seed_independent_collisions"].p_upper == 1.0


def small_values(batch: KeyBatch, seed: int) -> np.ndarray:
    """Three bits of a strong mix of (seed, key): many random collisions under every seed."""
    return mix64(batch.words_le64(8)[:, 0] ^ seed_word(seed)) & _U64(7)


def small_values_128(batch: KeyBatch, seed: int) -> np.ndarray:
    """Two bits in the low word and one in the high word (tells the two words apart)."""
    mixed = mix64(batch.words_le64(8)[:, 0] ^ seed_word(seed))
    return np.stack([mixed & _U64(3), (mixed >> _U64(40)) & _U64(1)], axis=1)


@pytest.mark.parametrize(("width", "function"), [(32, small_values), (128, small_values_128)])
def test_collision_search_matches_brute_force(width, function):
    spec = HashSpec(f"small_{width}", width, True, "kernel", function)
    keys = random_keys(400, seed=5)
    seeds = [3, 1, 4]
    runs = spec_runs(spec, keys, [], seeds)
    every_seed = zip(
        *(map(tuple, spec.hash_batch(keys, s).reshape(len(keys), -1).tolist()) for s in seeds), strict=True
    )
    groups = sorted((g for g in Counter(every_seed).values() if g > 1), reverse=True)
    assert runs.group_sizes.tolist() == groups
    assert runs.colliding_pairs == sum(math.comb(g, 2) for g in groups) > 0
    # with the tables requested the values come from the full hashes, not a second pass: same answer
    with_tables = spec_runs(spec, keys, [("mod", 7)], seeds)
    assert with_tables.group_sizes.tolist() == groups


def test_without_tables_only_the_candidates_are_hashed():
    sizes: list[int] = []

    def counted(batch: KeyBatch, seed: int) -> np.ndarray:
        """12 bits of a strong mix: about 20 colliding pairs among 400 keys under one seed."""
        sizes.append(len(batch))
        return mix64(batch.words_le64(8)[:, 0] ^ seed_word(seed)) & _U64(0xFFF)

    runs = seed_runs(counted, 32, random_keys(400, seed=5), [], [3, 1, 4])
    assert 0 < runs.candidates[0] < 100
    # the first seed hashes every key, each later seed only the keys still in a group (none once they are gone)
    assert sizes == [400] + [c for c in runs.candidates[:-1] if c]


def test_repeated_keys_are_refused():
    keys = KeyBatch.from_keys([b"alpha", b"beta", b"alpha"])
    with pytest.raises(UsageError, match="distinct keys"):
        spec_runs(get_hash("xxh3_64"), keys, [], SEEDS)


# ---------------------------------------------------------------------------------------------------------
# seed_spread


@pytest.mark.parametrize("name", STRONG)
def test_seed_spread_passes_for_strong_seeded_functions(name):
    runs = spec_runs(get_hash(name), random_keys(), TABLES, SEEDS)
    test = by_name(runs)["seed_spread"]
    assert test.p_upper > 0.05  # fixed keys and seeds: a deterministic check, not a flaky one
    assert test.effect.name == "lookup_cost_excess"
    assert abs(test.effect.value) < 0.01 < Thresholds().lookup_cost_excess
    for table in test.details["tables"]:
        cost = table["lookup_cost"]
        assert cost["min"] <= cost["median"] <= cost["max"]
        assert len(table["p_values"]) == 8 and not table["same_chi_square_every_seed"]
    assert set(verdicts(name, runs).values()) == {"pass"}


def test_seed_spread_fails_when_the_seed_only_xors_a_weak_hash():
    """poly31(key) ^ seed on the decimal counters "0" .. "16383": under a mask the seed only relabels the buckets,
    so every seed gives the same skewed counts. poly31 maps these keys to distinct values, so no pair collides
    under every seed: the two checks see different faults."""
    keys = KeyBatch.from_keys(str(i).encode() for i in range(N))
    assert len(np.unique(poly31(keys))) == N
    runs = spec_runs(POLY31_XOR_SEED, keys, TABLES, SEEDS)
    # measured: under mask 2^10 χ² = 5,830 against 1,023 expected (p = 0 in double precision) for every seed; under
    # mask 2^14 p = 5.9e-8 for every seed; modulo the prime 16381 the XOR is no relabelling and χ² changes with the
    # seed (more even than random for most seeds)
    same = [bool(np.all(runs.chi_square[:, t] == runs.chi_square[0, t])) for t in range(3)]
    assert same == [True, True, False]
    assert np.all(runs.p_upper[:, 0] == 0.0) and np.all(runs.p_upper[:, 1] < 1e-6)
    test = by_name(runs)["seed_spread"]
    assert test.p_upper < 1e-12
    assert test.statistic == 1.0  # D+ = 1 - (largest p-value) under mask 2^10: all 8 piled up at 0
    assert test.details["worst_table"] == {"scheme": "mask", "buckets": 1 << 10}
    assert test.effect.value == pytest.approx(runs.lookup_cost[0, 0] / runs.ideal_lookup_cost[0] - 1)
    assert test.effect.value > Thresholds().lookup_cost_excess  # +26 % probes per lookup
    assert [t["same_chi_square_every_seed"] for t in test.details["tables"]] == same
    found = verdicts("poly31_xor_seed", runs)
    assert found == {"seed_spread": "fail", "seed_independent_collisions": "pass"}


def test_seed_xor_on_integer_counters_fails_both_checks():
    """On 8-byte little-endian counters below 2^14, poly31 = 31^6 (31·b0 + b1) mod 2^32 takes only 31·255 + 63 + 1
    = 7,969 values (b0 the low byte, b1 < 64 the next), so most keys share their value with others under every
    seed too."""
    keys = KeyBatch.from_uint64(np.arange(N, dtype=np.uint64))
    assert len(np.unique(poly31(keys))) == 31 * 255 + 63 + 1
    runs = spec_runs(POLY31_XOR_SEED, keys, TABLES, SEEDS)
    assert len(runs.group_sizes) < 7969 and runs.keys_in_collisions > N // 2
    assert verdicts("poly31_xor_seed", runs) == {"seed_spread": "fail", "seed_independent_collisions": "fail"}


def test_crc32_seed_only_relabels_masked_buckets_of_equal_length_keys():
    """CRC is affine over GF(2): for keys of one length the starting value (the seed) XORs the same constant into
    every value (common knowledge, from memory), so a mask sees the same counts under every seed; a prime modulus
    does not. The KS verdict then depends on where that one p-value falls, so only the counts are asserted."""
    runs = spec_runs(get_hash("crc32"), random_keys(), TABLES, SEEDS)
    details = by_name(runs)["seed_spread"].details["tables"]
    assert [t["same_chi_square_every_seed"] for t in details] == [True, True, False]


def birnbaum_tingey_sf(d: float, n: int) -> float:
    """P(D+_n ≥ d) for 0 < d ≤ 1 (Birnbaum & Tingey 1951)."""
    total = sum(
        math.comb(n, j) * (1 - d - j / n) ** (n - j) * (d + j / n) ** (j - 1)
        for j in range(math.floor(n * (1 - d)) + 1)
    )
    return d * total


def test_ks_p_value_is_the_one_sided_exact_law():
    """One table with λ = 16 (a continuous χ² law, so the p-values are used as they are)."""
    runs = spec_runs(get_hash("xxh64"), random_keys(), [("mask", 1 << 10)], SEEDS)
    test = by_name(runs)["seed_spread"]
    p = np.sort(runs.p_upper[:, 0])
    d_plus = max((i + 1) / 8 - p[i] for i in range(8))
    assert test.statistic == pytest.approx(d_plus, abs=1e-12)
    assert test.p_upper == pytest.approx(birnbaum_tingey_sf(d_plus, 8), rel=1e-9)
    assert test.details["tables"][0]["all_small_p"] == pytest.approx(p[-1] ** 8)  # P(8 uniforms all ≤ max)


def test_expected_d_plus_matches_simulation():
    draws = np.sort(np.random.default_rng(99).random((200_000, 8)), axis=1)
    d_plus = np.max(np.arange(1, 9) / 8 - draws, axis=1).clip(min=0)
    standard_error = d_plus.std() / math.sqrt(len(d_plus))
    assert expected_ks_plus(8) == pytest.approx(d_plus.mean(), abs=4 * standard_error)
    assert expected_ks_plus(1) == pytest.approx(0.5, abs=1e-6)  # D+_1 = 1 - U


def test_randomised_p_values_are_uniform_for_a_discrete_law():
    """Poisson(0.3) statistics: the raw upper-tail p-values are 1 most of the time (they pile up at 1), the
    randomised ones are uniform (Habiger & Peña 2011); a continuous law (atom 0) is left unchanged."""
    rng = np.random.default_rng(12)
    x = rng.poisson(0.3, size=4000)
    upper, lower = stats.poisson.sf(x - 1, 0.3), stats.poisson.cdf(x, 0.3)
    assert stats.kstest(upper, "uniform", alternative="less").pvalue < 1e-100
    randomised = randomised_p_values(upper, lower, rng.random(4000))
    assert stats.kstest(randomised, "uniform").pvalue > 0.05
    continuous = np.array([1e-300, 0.25, 0.9])
    assert randomised_p_values(continuous, 1 - continuous, np.array([0.1, 0.5, 0.9])).tolist() == continuous.tolist()


# ---------------------------------------------------------------------------------------------------------
# General


def test_unseeded_functions_are_not_applicable():
    runs = spec_runs(get_hash("fnv1a_32"), random_keys(100), TABLES, SEEDS)
    assert not runs.seeded and runs.p_upper.shape == (0, 3)
    assert seed_tests(runs) == []


def test_no_keys_no_tests():
    runs = spec_runs(get_hash("xxh3_64"), KeyBatch.from_keys([]), TABLES, SEEDS)
    assert runs.keys == 0 and runs.colliding_pairs == 0
    assert seed_tests(runs) == []


def test_results_are_deterministic():
    keys = random_keys()
    first = seed_tests(spec_runs(get_hash("murmur3_32"), keys, TABLES, SEEDS))
    second = seed_tests(spec_runs(get_hash("murmur3_32"), keys, TABLES, SEEDS))
    assert first == second
    assert [t.name for t in first] == ["seed_spread", "seed_independent_collisions"]


@pytest.mark.parametrize("seeds", [[1], [1, 2, 1], [1, -2], [1, 2.5]])
def test_bad_seeds_are_refused(seeds):
    with pytest.raises(UsageError, match="seed"):
        spec_runs(get_hash("xxh3_64"), random_keys(10), [], seeds)
