"""Benchmark: hashing + bucket counting alone (keys already in memory), on one core and on every core.

Reads ``bench/data/keys_10000000.txt`` (``bench/bench_audit.py`` makes it) into batches of 2^20 keys once, then
times MurmurHash3 x86_32 and a 2^20-bucket count (``mask``) over all batches: one thread, and one thread per core over
interleaved batches, each with its own count array, summed at the end (the counts must match). Best of three.

Usage: ``python bench/bench_kernels.py``.
"""

from __future__ import annotations

import os
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np

KEYS = Path(__file__).parent / "data" / "keys_10000000.txt"
BUCKETS = 1 << 20


def main() -> None:
    from hashaudit.hashes.murmur import murmur3_32
    from hashaudit.keys import open_keys
    from hashaudit.tables.schemes import add_counts

    if not KEYS.exists():
        raise SystemExit(f"{KEYS} is missing: python bench/bench_audit.py makes it")
    batches = list(open_keys(KEYS))
    total = sum(len(b) for b in batches)

    def work(part: list) -> np.ndarray:
        counts = np.zeros(BUCKETS, dtype=np.int64)
        for batch in part:
            add_counts(murmur3_32(batch), "mask", BUCKETS, 32, counts)
        return counts

    work(batches[:1])  # load the kernels
    reference = work(batches)
    cores = os.cpu_count() or 1
    for threads in sorted({1, cores}):
        best = float("inf")
        for _ in range(3):
            t0 = time.perf_counter()
            with ThreadPoolExecutor(threads) as pool:
                parts = list(pool.map(work, [batches[i::threads] for i in range(threads)]))
            best = min(best, time.perf_counter() - t0)
            assert np.array_equal(sum(parts), reference)
        print(f"{threads} thread(s): {total:,} keys in {best:.3f} s = {total / best / 1e6:.1f} M keys/s")


if __name__ == "__main__":
    main()
