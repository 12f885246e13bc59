"""Benchmark: the avalanche check's accumulation of flips, against the bit-at-a-time version it replaced.

For each output width (32, 64, 128 bits) it builds one chunk of 65,536 flips (``FLIP_CHUNK_FLIPS``) of 2,000 keys
with random hash values (seeded), about 3 % of them dropped like flips that land on another sample key, and times
``hashaudit.stats.avalanche._accumulate_kernel`` (differences of 64 flips transposed as a bit matrix, one column word
written per output bit) against ``bit_at_a_time`` below (each flipped output bit set in its column word on its
own, 64 words apart in memory: the kernel as it was until 2026-12-03). Both must give the same counts, columns and
number of kept flips; each is timed as the best of ``--repeat`` runs after a warm-up.

Usage: ``python bench/bench_avalanche_kernel.py [--repeat R]``.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from numba import njit, uint64

from hashaudit.stats.avalanche import FLIP_CHUNK_FLIPS, _accumulate_kernel

KEYS = 2000
INPUT_BITS = 128


@njit(nogil=True)
def bit_at_a_time(original, flipped, parent, input_bit, keep, width, counts, columns):  # pragma: no cover
    words = original.shape[1]
    kept = 0
    for f in range(flipped.shape[0]):
        if not keep[f]:
            continue
        row = input_bit[f]
        slot = kept >> 6
        shift = uint64(kept & 63)
        for w in range(words):
            d = original[parent[f], w] ^ flipped[f, w]
            top = min(64, width - 64 * w)
            for j in range(top):
                bit = (d >> uint64(j)) & uint64(1)
                counts[row, 64 * w + j] += np.int64(bit)
                columns[64 * w + j, slot] |= bit << shift
        kept += 1
    return kept


def inputs(width: int, seed: int) -> tuple:
    rng = np.random.default_rng(seed)
    words = 2 if width == 128 else 1
    top = np.uint64((1 << width) - 1) if width < 64 else np.uint64(2**64 - 1)
    original = rng.integers(0, 2**64, size=(KEYS, words), dtype=np.uint64, endpoint=False) & top
    flipped = rng.integers(0, 2**64, size=(FLIP_CHUNK_FLIPS, words), dtype=np.uint64, endpoint=False) & top
    parent = rng.integers(0, KEYS, size=FLIP_CHUNK_FLIPS)
    input_bit = rng.integers(0, INPUT_BITS, size=FLIP_CHUNK_FLIPS)
    keep = rng.random(FLIP_CHUNK_FLIPS) >= 0.03
    return original, flipped, parent, input_bit, keep


def timed(kernel, args: tuple, width: int, repeat: int) -> tuple[float, int, np.ndarray, np.ndarray]:
    best = float("inf")
    for attempt in range(repeat + 1):  # the first run compiles (or loads) the kernel
        counts = np.zeros((INPUT_BITS, width), dtype=np.int64)
        columns = np.zeros((width, (FLIP_CHUNK_FLIPS + 63) // 64), dtype=np.uint64)
        t0 = time.perf_counter()
        kept = kernel(*args, width, counts, columns)
        if attempt:
            best = min(best, time.perf_counter() - t0)
    return best, kept, counts, columns


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--repeat", type=int, default=5)
    repeat = parser.parse_args().repeat
    print(f"| output bits | bit at a time, ms | transposed blocks, ms | speed-up |  ({FLIP_CHUNK_FLIPS:,} flips)")
    print("|---:|---:|---:|---:|")
    for width in (32, 64, 128):
        args = inputs(width, seed=width)
        old = timed(bit_at_a_time, args, width, repeat)
        new = timed(_accumulate_kernel, args, width, repeat)
        assert old[1] == new[1], "kept flips differ"
        assert np.array_equal(old[2], new[2]) and np.array_equal(old[3], new[3]), "counts or columns differ"
        print(f"| {width} | {old[0] * 1e3:.2f} | {new[0] * 1e3:.2f} | {old[0] / new[0]:.1f}× |")


if __name__ == "__main__":
    main()
