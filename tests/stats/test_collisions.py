"""Full-hash collisions: the accumulator (in memory and spilled), its kernels, and the birthday test.

Reference values: group counts come from ``collections.Counter`` over Python ints; the birthday expectation
C(d, 2) / 2^b is computed here with exact rationals (``fractions.Fraction``); Poisson tails with mpmath at 50
digits. The 4.66 pairs of 200 000 keys in 32 bits is C(200000, 2) / 2^32 = 19 999 900 000 / 4 294 967 296.
"""

from __future__ import annotations

import dataclasses
import gc
import math
import os
import pickle
import time
from collections import Counter
from fractions import Fraction

import mpmath
import numpy as np
import pytest

from hashaudit.errors import MergeError, UsageError
from hashaudit.stats import collisions
from hashaudit.stats.collisions import (
    LARGEST_GROUPS,
    PARTITIONS,
    CollisionGroup,
    FullCollisions,
    _count_groups,
    _count_groups_kernel,
    _partition_kernel,
    _sort_rows,
    collision_tests,
)
from hashaudit.stats.tails import poisson_tails

N = 5_000


def as_ints(values: np.ndarray) -> list[int]:
    """Hash values as Python ints (128-bit rows: high word above low word)."""
    if values.ndim == 1:
        return [int(v) for v in values]
    return [(int(hi) << 64) | int(lo) for lo, hi in values]


def reference(values: np.ndarray) -> tuple[int, int, int, list[CollisionGroup]]:
    """(pairs, keys in collisions, groups, largest groups) by counting with a Counter."""
    shared = {v: g for v, g in Counter(as_ints(values)).items() if g > 1}
    largest = sorted((CollisionGroup(v, g) for v, g in shared.items()), key=lambda c: (-c.keys, c.hash_value))
    return sum(math.comb(g, 2) for g in shared.values()), sum(shared.values()), len(shared), largest[:LARGEST_GROUPS]


def planted_values(width: int, n: int, seed: int) -> np.ndarray:
    """Random values with planted groups of 7, 5, 5, 3 and 2 equal values spread over the array; for 128 bits
    also rows that share only the high word or only the low word."""
    rng = np.random.default_rng(seed)
    top = 1 << width if width < 64 else 1 << 64
    shape = (n, 2) if width == 128 else (n,)
    values = rng.integers(0, top, size=shape, dtype=np.uint64)
    positions = rng.permutation(n)
    start = 0
    for size in (7, 5, 5, 3, 2):
        group = positions[start : start + size]
        values[group] = values[group[0]]
        start += size
    if width == 128:
        values[positions[start], 1] = values[positions[start + 1], 1]  # same high word, different low word
        values[positions[start + 2], 0] = values[positions[start + 3], 0]  # same low word, different high word
    return values


class TestFullCollisions:
    width = 64
    memory_bytes = 1 << 30
    spilled = False

    @pytest.fixture(autouse=True)
    def _spill_folder(self, tmp_path):
        self.spill_dir = str(tmp_path)
        self.values = planted_values(self.width, N, seed=self.width)

    def make(self, hash_name: str = "h", seed: int = 0) -> FullCollisions:
        return FullCollisions(hash_name, seed, self.width, self.memory_bytes, self.spill_dir)

    def whole(self) -> FullCollisions:
        return self.make().update(self.values)

    def test_result_matches_a_counter(self):
        acc = self.whole()
        assert acc.spilled == self.spilled
        result = acc.result()
        pairs, keys, groups, largest = reference(self.values)
        assert (result.colliding_pairs, result.keys_in_collisions, result.groups) == (pairs, keys, groups)
        assert list(result.largest) == largest
        assert result.largest[0].keys == 7 and result.keys == N
        assert pairs >= 21 + 10 + 10 + 3 + 1  # the planted groups, C(7,2) + 2 C(5,2) + C(3,2) + C(2,2)

    @pytest.mark.parametrize("chunk", [1, 2, 50, N, N + 42])
    def test_chunking_does_not_change_the_result(self, chunk):
        acc = self.make()
        for start in range(0, N, chunk):
            acc.update(self.values[start : start + chunk])
        whole = self.whole()
        assert acc == whole
        assert acc.result() == whole.result()

    def test_merge_of_partitions_equals_one_pass(self):
        parts = np.array_split(self.values, 4)
        accs = [self.make().update(p) for p in parts]
        left = accs[0].copy()
        for a in accs[1:]:
            left.merge(a)
        right = accs[-1].copy()
        for a in reversed(accs[:-1]):
            right.merge(a)
        whole = self.whole()
        assert left == right == whole
        assert left.result() == right.result() == whole.result()
        assert accs[0].keys_seen_ == len(parts[0])  # merge leaves its argument unchanged

    def test_merge_with_itself_doubles_every_value(self):
        acc = self.make().update(self.values[:1000])
        acc.merge(acc)
        twice = self.make().update(self.values[:1000]).update(self.values[:1000])
        assert acc == twice
        assert acc.result().colliding_pairs == reference(np.concatenate([self.values[:1000]] * 2))[0]

    def test_equality_sees_one_changed_value(self):
        changed = self.values.copy()
        changed[N // 2] ^= np.uint64(1)
        acc, other = self.whole(), self.make().update(changed)
        assert acc.keys_seen_ == other.keys_seen_ and acc != other
        assert acc == self.make().update(self.values[::-1].copy())  # order does not matter

    def test_merge_refuses_other_settings(self):
        with pytest.raises(MergeError, match="settings differ"):
            self.make().merge(self.make(seed=1))
        with pytest.raises(MergeError, match="settings differ"):
            self.make().merge(self.make(hash_name="g"))
        with pytest.raises(MergeError):
            self.make().merge(object())  # type: ignore[arg-type]

    def test_copy_is_independent_and_pickles(self):
        acc = self.whole()
        twin = acc.copy()
        assert twin == acc
        twin.update(self.values[:5])
        assert twin != acc
        thawed = pickle.loads(pickle.dumps(acc))
        assert thawed == acc
        assert thawed.result() == acc.result()
        assert pickle.loads(pickle.dumps(acc)).result() == acc.result()  # a finished accumulator pickles too

    def test_result_is_final(self):
        acc = self.whole()
        first = acc.result()
        assert acc.result() is first
        assert acc.memory_bytes_used == 0 and not acc.spilled
        with pytest.raises(UsageError, match="already produced its result"):
            acc.update(self.values[:3])
        with pytest.raises(MergeError, match="already produced its result"):
            self.make().merge(acc)
        assert acc.copy().result() == first

    def test_nothing_is_left_on_disk(self):
        acc = self.whole()
        acc.result()
        assert os.listdir(self.spill_dir) == []
        closed = self.whole()
        closed.close()
        assert os.listdir(self.spill_dir) == []
        with pytest.raises(UsageError, match="closed"):
            closed.result()
        dropped = self.whole()
        dropped.copy()  # its own folder, dropped at once
        del dropped
        gc.collect()
        assert os.listdir(self.spill_dir) == []


class TestFullCollisions32(TestFullCollisions):
    width = 32


class TestFullCollisions128(TestFullCollisions):
    width = 128


class TestFullCollisionsSmallSlabs(TestFullCollisions):
    # 8 KiB slabs: several slabs stay in memory, and the result partitions them slab by slab
    @pytest.fixture(autouse=True)
    def _small_slabs(self, monkeypatch):
        monkeypatch.setattr(collisions, "SLAB_BYTES", 8192)
        monkeypatch.setattr(collisions, "MIN_SLAB_BYTES", 8192)
        monkeypatch.setattr(collisions, "SMALL_ROWS", 0)  # equality partition by partition too

    def test_values_fill_several_slabs(self):
        acc = self.whole()
        assert len(acc._slabs) == -(-N * acc._row_bytes // 8192) > 1
        assert acc.memory_bytes_used == N * (4 if self.width == 32 else 8 * acc._words)  # 32-bit values in 4 bytes


class TestFullCollisions128SmallSlabs(TestFullCollisionsSmallSlabs):
    width = 128


class TestFullCollisions32SmallSlabs(TestFullCollisionsSmallSlabs):
    # 32-bit values are kept in 4 bytes and widened to 8 where they are partitioned and counted
    width = 32


class TestFullCollisionsSpilled(TestFullCollisions):
    memory_bytes = 512
    spilled = True


class TestFullCollisions32Spilled(TestFullCollisionsSpilled):
    width = 32


class TestFullCollisions128Spilled(TestFullCollisionsSpilled):
    width = 128


def test_32_bit_values_take_half_the_memory_so_twice_as_many_stay_before_a_spill(tmp_path):
    values = planted_values(32, 10_000, seed=3)
    narrow = FullCollisions("h", 0, 32, memory_bytes=48_000, spill_dir=str(tmp_path)).update(values)
    wide = FullCollisions("h", 0, 64, memory_bytes=48_000, spill_dir=str(tmp_path)).update(values)
    assert not narrow.spilled and narrow.memory_bytes_used == 40_000
    assert wide.spilled  # 80,000 bytes in 8-byte rows
    assert narrow.result() == dataclasses.replace(wide.result(), width=32)


def test_a_32_bit_store_refuses_a_value_of_2_to_the_32():
    with pytest.raises(UsageError, match="declared 32-bit"):
        FullCollisions("h", 0, 32).update(np.array([1, 1 << 32], dtype=np.uint64))


# ------------------------------------------------------------------------------------------------------------
# Spilling versus memory
# ------------------------------------------------------------------------------------------------------------


def test_spilled_and_in_memory_results_are_identical(tmp_path):
    values = planted_values(32, 200_000, seed=5)
    in_memory = FullCollisions("h", 0, 32).update(values)
    spilled = FullCollisions("h", 0, 32, memory_bytes=4096, spill_dir=str(tmp_path))
    for part in np.array_split(values, 9):
        spilled.update(part)
    assert not in_memory.spilled and spilled.spilled
    (folder,) = tmp_path.iterdir()
    assert len(list(folder.iterdir())) == PARTITIONS  # 200 000 random values reach every partition
    assert spilled.spilled_bytes_ >= 8 * 200_000 - 4096
    assert spilled.result() == in_memory.result()
    assert list(tmp_path.iterdir()) == []


def test_merging_spilled_and_in_memory_accumulators(tmp_path):
    values = planted_values(64, 30_000, seed=6)
    parts = np.array_split(values, 4)
    budgets = [1 << 30, 256, 1 << 30, 1024]
    accs = [FullCollisions("h", 3, 64, b, str(tmp_path)).update(p) for b, p in zip(budgets, parts, strict=True)]
    assert [a.spilled for a in accs] == [False, True, False, True]
    into_memory = accs[0].copy()
    for a in accs[1:]:
        into_memory.merge(a)
    into_spilled = accs[1].copy()
    for a in (accs[0], *accs[2:]):
        into_spilled.merge(a)
    assert into_memory.spilled  # merging a spilled partner moves its partitions to this one's disk
    one_pass = FullCollisions("h", 3, 64).update(values)
    assert into_memory == into_spilled == one_pass
    assert into_memory.result() == into_spilled.result() == one_pass.result()


# ------------------------------------------------------------------------------------------------------------
# The birthday test
# ------------------------------------------------------------------------------------------------------------


def test_random_32_bit_values_meet_the_birthday_expectation():
    values = np.random.default_rng(2024).integers(0, 2**32, size=200_000, dtype=np.uint64)
    result = FullCollisions("random32", 0, 32).update(values).result()
    (test,) = collision_tests(result)
    expected = Fraction(math.comb(200_000, 2), 2**32)  # 19 999 900 000 / 4 294 967 296
    assert test.name == "full_collisions"
    assert test.expected == pytest.approx(float(expected), rel=1e-15) and test.expected == pytest.approx(
        4.6566, abs=1e-4
    )
    assert test.observed == test.statistic == reference(values)[0]
    assert test.p_upper > 0.05 and test.p_lower > 0.05  # nothing unusual in either direction
    assert test.effect.name == "collision_excess"
    assert test.effect.value == pytest.approx((test.observed - test.expected) / test.expected)


def test_fifty_keys_on_one_32_bit_value_fail():
    values = np.random.default_rng(7).integers(0, 2**32, size=200_000, dtype=np.uint64)
    assert 0xDEADBEEF not in set(values.tolist())
    values[np.random.default_rng(8).choice(200_000, size=50, replace=False)] = 0xDEADBEEF
    result = FullCollisions("planted", 0, 32).update(values).result()
    assert result.largest[0] == CollisionGroup(0xDEADBEEF, 50)
    (test,) = collision_tests(result)
    assert test.observed >= math.comb(50, 2)  # 1225 planted pairs, plus the chance ones
    assert test.p_upper < 1e-300
    assert test.effect.value > 200  # about 263 times the 4.66 expected pairs
    assert test.details["largest_groups"][0] == {"hash": "0xdeadbeef", "keys": 50}
    assert test.details["groups"] == result.groups and test.details["keys_in_collisions"] >= 50


def test_random_64_bit_values_have_no_collision():
    values = np.random.default_rng(64).integers(0, 2**64, size=1_000_000, dtype=np.uint64)
    (test,) = collision_tests(FullCollisions("random64", 0, 64).update(values).result())
    expected = Fraction(math.comb(1_000_000, 2), 2**64)  # about 2.7e-8
    assert test.expected == pytest.approx(float(expected), rel=1e-15)
    assert test.observed == 0 and test.p_upper == 1.0
    assert test.p_lower == pytest.approx(math.exp(-float(expected)), rel=1e-15)  # P(X <= 0) = e^-λ
    assert test.effect.value == pytest.approx(-float(expected))
    assert test.details["largest_groups"] == []


def test_one_128_bit_collision_is_astronomically_significant():
    values = np.random.default_rng(128).integers(0, 2**64, size=(100_000, 2), dtype=np.uint64)
    clean = collision_tests(FullCollisions("random128", 0, 128).update(values).result())[0]
    assert clean.observed == 0 and clean.p_upper == 1.0
    values[99_999] = values[3]
    (test,) = collision_tests(FullCollisions("random128", 0, 128).update(values).result())
    expected = Fraction(math.comb(100_000, 2), 2**128)  # about 1.5e-29
    assert test.expected == pytest.approx(float(expected), rel=1e-15)
    assert test.observed == 1
    assert test.p_upper == pytest.approx(float(expected), rel=1e-9)  # P(X >= 1) = 1 - e^-λ ≈ λ for tiny λ
    assert test.effect.value == pytest.approx(1.0)  # one pair above (essentially) none expected
    hex_value = test.details["largest_groups"][0]["hash"]
    assert hex_value == f"0x{int(values[3, 1]):016x}{int(values[3, 0]):016x}" and len(hex_value) == 34


@pytest.mark.parametrize(("observed", "mean"), [(0, 4.66), (4, 4.66), (12, 4.66), (60, 4.66), (3, 1e-6), (1, 1e-29)])
def test_poisson_tails_match_mpmath(observed, mean):
    with mpmath.workdps(50):
        lam = mpmath.mpf(mean)
        pmf = [mpmath.exp(-lam) * lam**j / mpmath.factorial(j) for j in range(observed + 1)]
        upper = float(1 - mpmath.fsum(pmf[:observed]))  # P(X >= k), 50 digits
        lower = float(mpmath.fsum(pmf))  # P(X <= k)
    p_upper, p_lower = poisson_tails(observed, mean)
    assert p_upper == pytest.approx(upper, rel=1e-12)
    assert p_lower == pytest.approx(lower, rel=1e-12)


def test_no_pairs_expected_and_none_seen():
    assert poisson_tails(0, 0.0) == (1.0, 1.0)  # one key: no pair can collide
    (test,) = collision_tests(FullCollisions("h", 0, 64).update(np.array([5], dtype=np.uint64)).result())
    assert test.expected == 0.0 and test.p_upper == 1.0 and test.effect.value == 0.0


def test_colliding_pairs_of_random_values_follow_the_poisson_law():
    # 400 samples of 65 536 random 32-bit values: λ = C(65536, 2) / 2^32 = 65535 / 131072 (exact); the mean
    # count and the share of samples without a collision (e^-λ, Poisson) must agree within four standard errors.
    rng = np.random.default_rng(400)
    lam = 65535 / 131072
    counts = []
    for _ in range(400):
        values = rng.integers(0, 2**32, size=65_536, dtype=np.uint64)
        counts.append(FullCollisions("h", 0, 32).update(values).result().colliding_pairs)
    counts = np.array(counts)
    assert abs(counts.mean() - lam) < 4 * math.sqrt(lam / 400)
    p0 = math.exp(-lam)
    assert abs(np.mean(counts == 0) - p0) < 4 * math.sqrt(p0 * (1 - p0) / 400)


def test_no_keys_no_test():
    assert collision_tests(FullCollisions("h", 0, 64).result()) == []


# ------------------------------------------------------------------------------------------------------------
# Kernels against plain numpy / Python
# ------------------------------------------------------------------------------------------------------------


GOLDEN = 0x9E3779B97F4A7C15  # 2^64 / golden ratio (Knuth, TAOCP vol. 3, §6.4)


def partition_of(value: int, width: int) -> int:
    """The documented partition rule, in plain Python integers."""
    mask = (1 << 64) - 1
    if width == 128:
        value = ((value >> 64) * GOLDEN & mask) ^ (value & mask)
    return (value * GOLDEN & mask) >> 56


@pytest.mark.parametrize("width", [32, 64, 128])
def test_partition_kernel_matches_plain_python(width):
    rows = planted_values(width, 20_000, seed=1).reshape(20_000, -1)
    out = np.empty_like(rows)
    bounds = np.empty(PARTITIONS + 1, dtype=np.int64)
    _partition_kernel(rows, out, bounds)
    parts = np.array([partition_of(v, width) for v in as_ints(rows.reshape(20_000) if width < 128 else rows)])
    np.testing.assert_array_equal(out, rows[np.argsort(parts, kind="stable")])
    np.testing.assert_array_equal(np.diff(bounds), np.bincount(parts, minlength=PARTITIONS))


def test_values_with_constant_top_bits_still_spread_over_the_partitions(tmp_path):
    # a "64-bit" function whose values fit in 32 bits, and a 128-bit one whose high word is always 0
    narrow = np.random.default_rng(3).integers(0, 2**32, size=50_000, dtype=np.uint64)
    acc = FullCollisions("narrow", 0, 64, memory_bytes=0, spill_dir=str(tmp_path)).update(narrow)
    (folder,) = tmp_path.iterdir()
    assert len(list(folder.iterdir())) == PARTITIONS
    assert acc.result().colliding_pairs == reference(narrow)[0]
    widened = np.stack([narrow, np.zeros_like(narrow)], axis=1)
    acc = FullCollisions("widened", 0, 128, memory_bytes=0, spill_dir=str(tmp_path)).update(widened)
    (folder,) = tmp_path.iterdir()
    assert len(list(folder.iterdir())) == PARTITIONS
    assert acc.result().colliding_pairs == reference(narrow)[0]


@pytest.mark.parametrize("width", [32, 64, 128])
def test_sorted_rows_match_numpy(width):
    rows = planted_values(width, 20_000, seed=2).reshape(20_000, -1)
    if width == 128:
        rows[:, 1] %= np.uint64(37)  # long runs of equal high words
        expected = np.array(sorted(as_ints(rows)), dtype=object)
        got = np.array(as_ints(_sort_rows(rows.copy())), dtype=object)
        np.testing.assert_array_equal(got, expected)
    else:
        np.testing.assert_array_equal(_sort_rows(rows.copy()), np.sort(rows, axis=0))


def test_128_bit_groups_with_many_shared_high_words():
    rng = np.random.default_rng(9)
    rows = rng.integers(0, 2**64, size=(30_000, 2), dtype=np.uint64)
    rows[:, 1] %= np.uint64(101)  # every high word repeats; only some low words do
    rows[:, 0] %= np.uint64(20_000)
    top_sizes = np.zeros(LARGEST_GROUPS, dtype=np.int64)
    top_rows = np.zeros((LARGEST_GROUPS, 2), dtype=np.uint64)
    pairs, keys, groups = _count_groups(rows.copy(), top_sizes, top_rows)
    expected = reference(rows)
    assert (pairs, keys, groups) == expected[:3] and pairs > 0
    result = FullCollisions("h", 0, 128).update(rows).result()
    assert (result.colliding_pairs, result.keys_in_collisions, result.groups) == expected[:3]
    assert list(result.largest) == expected[3]


def test_count_kernel_ranks_groups_by_size_then_value():
    # sizes 9, 4, 4, 4 and eleven groups of 2: only the ten largest are kept, ties by increasing value
    sizes = {1000: 2, 50: 4, 40: 9, 70: 4, 30: 4} | {v: 2 for v in range(100, 200, 10)}
    values = np.array([v for v, g in sizes.items() for _ in range(g)] + [7, 8, 9], dtype=np.uint64)
    rows = np.sort(values).reshape(-1, 1)
    top_sizes = np.zeros(LARGEST_GROUPS, dtype=np.int64)
    top_rows = np.zeros((LARGEST_GROUPS, 1), dtype=np.uint64)
    pairs, keys, groups = _count_groups_kernel(rows, top_sizes, top_rows)
    assert (pairs, keys, groups) == reference(values)[:3]
    assert (
        [(int(r[0]), int(s)) for r, s in zip(top_rows, top_sizes, strict=True)]
        == [(c.hash_value, c.keys) for c in reference(values)[3]]
        == [(40, 9), (30, 4), (50, 4), (70, 4), (100, 2), (110, 2), (120, 2), (130, 2), (140, 2), (150, 2)]
    )


# ------------------------------------------------------------------------------------------------------------
# Arguments
# ------------------------------------------------------------------------------------------------------------


def test_bad_arguments_are_refused(tmp_path):
    with pytest.raises(UsageError, match="width must be 32, 64 or 128"):
        FullCollisions("h", 0, 48)
    with pytest.raises(UsageError, match="does not exist"):
        FullCollisions("h", 0, 64, spill_dir=str(tmp_path / "missing"))
    with pytest.raises(UsageError, match=r"uint64\[n, 2\]"):
        FullCollisions("h", 0, 128).update(np.zeros(4, dtype=np.uint64))
    with pytest.raises(UsageError, match=r"uint64\[n\]"):
        FullCollisions("h", 0, 64).update(np.zeros((4, 2), dtype=np.uint64))
    with pytest.raises(UsageError, match="unsigned"):
        FullCollisions("h", 0, 64).update(np.zeros(4, dtype=np.int64))
    acc = FullCollisions("h", 0, 32).update(np.arange(10, dtype=np.uint32))  # narrower unsigned types widen
    assert acc.keys_seen_ == 10


# ------------------------------------------------------------------------------------------------------------
# Scale
# ------------------------------------------------------------------------------------------------------------


def _resident_bytes(field: str) -> int | None:
    """``VmRSS`` or ``VmHWM`` (peak) of this process from /proc, or None where there is no such file."""
    try:
        with open("/proc/self/status", encoding="ascii") as f:
            for line in f:
                if line.startswith(field + ":"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return None


def _reset_peak_resident() -> bool:
    """Restart the kernel's ``VmHWM`` count (Linux >= 4.0); False where that is not possible."""
    try:
        with open("/proc/self/clear_refs", "w", encoding="ascii") as f:
            f.write("5")
        return True
    except OSError:
        return False


@pytest.mark.slow
@pytest.mark.parametrize("budget", [1 << 30, 64 << 20])
def test_twenty_million_64_bit_values(budget, tmp_path, capsys):
    n, batch = 20_000_000, 2_000_000
    values = np.random.default_rng(20).integers(0, 2**64, size=n, dtype=np.uint64)
    values[n - 10 :] = values[:10]  # ten planted pairs
    FullCollisions("h", 0, 64).update(values[:100]).result()  # load the compiled kernels outside the timing
    gc.collect()
    measured = _reset_peak_resident()
    baseline = _resident_bytes("VmRSS")
    started = time.perf_counter()
    acc = FullCollisions("h", 0, 64, memory_bytes=budget, spill_dir=str(tmp_path))
    for start in range(0, n, batch):
        acc.update(values[start : start + batch])
    fed = time.perf_counter()
    result = acc.result()
    done = time.perf_counter()
    peak = _resident_bytes("VmHWM")
    assert result.colliding_pairs == 10 and result.groups == 10 and result.keys == n
    assert list(tmp_path.iterdir()) == []
    data = 8 * n
    extra = (peak - baseline) if measured and peak is not None and baseline is not None else None
    with capsys.disabled():
        shown = "not measured" if extra is None else f"{extra / 2**20:.0f} MiB"
        print(
            f"\n20 M 64-bit values, budget {budget >> 20} MiB: update {fed - started:.2f} s, "
            f"result {done - fed:.2f} s, peak resident above the input {shown} (values {data / 2**20:.0f} MiB)"
        )
    if extra is not None:
        if budget > data:
            assert extra < data + 2 * (64 << 20)  # the values, plus a slab or two while they are gathered
        else:
            assert extra < budget + 3 * (64 << 20)  # the budget, plus a slab and its partitioned copy


def test_one_poisson_test_of_colliding_pairs():
    """``full_collisions`` and ``seed_independent_collisions`` share one test: Poisson tails and collision_excess."""
    from hashaudit.stats.tails import colliding_pairs_test, poisson_tails

    test = colliding_pairs_test("some_pairs", 3, 0.25, "pairs counted", "Poisson law", {"k": 1})
    assert (test.p_upper, test.p_lower) == poisson_tails(3, 0.25)
    assert (test.statistic, test.expected, test.observed) == (3.0, 0.25, 3.0)
    assert test.effect.name == "collision_excess" and test.effect.value == 2.75  # (3 - 0.25) / max(0.25, 1)
    assert (test.name, test.method, test.details) == ("some_pairs", "Poisson law", {"k": 1})
    assert colliding_pairs_test("x", 300, 200.0, "", "", {}).effect.value == 0.5  # relative above one pair
