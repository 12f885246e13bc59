"""Benchmark: shard schemes, the heavy-key summary, and the shard checks inside an audit.

1. ``ShardLayout.assign`` on 10 M random 64-bit values for each scheme at 16 and 256 shards (rendezvous scores
   every shard for every key, so it costs O(N) per key); best of three.
2. ``HeavyKeys.update`` (Misra-Gries, 1,000 counters) over 10 M keys in batches of 2^20: 10 M distinct keys (the
   worst case: every batch is cut) and a Zipf-like stream; then ``HeavyCounts.update``, the second read that settles
   the kept keys' counts.
3. ``hashaudit audit bench/data/keys_10000000.txt -H xxh3_64 -m 2^20`` with ``--checks buckets`` and with
   ``--checks buckets,shards --shards 16 --shard-scheme jump`` (subprocesses, median of three after a warm-up);
   skipped when the key file is missing (``bench/bench_audit.py`` makes it).

Usage: ``python bench/bench_shards.py``.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
from _timing import best_of, median_run

HERE = Path(__file__).parent
KEYS = HERE / "data" / "keys_10000000.txt"


def main() -> None:
    from hashaudit.keys.batch import KeyBatch
    from hashaudit.stats.heavy import HeavyCounts, HeavyKeys
    from hashaudit.tables.shards import SHARD_SCHEMES, ShardLayout

    rng = np.random.default_rng(20261202)
    values = rng.integers(0, 2**64 - 1, size=10_000_000, dtype=np.uint64, endpoint=True)
    print("1. assign 10 M values            16 shards     256 shards")
    for scheme in SHARD_SCHEMES:
        row = []
        for shards in (16, 256):
            layout = ShardLayout(scheme, shards)
            seconds = best_of(lambda layout=layout: layout.assign(values, 64))
            row.append(f"{seconds:6.2f} s {len(values) / seconds / 1e6:6.1f} M/s")
        print(f"   {scheme:<12}               {row[0]}   {row[1]}")

    print("2. heavy keys over 10 M keys, batches of 2^20")
    streams = {
        "all distinct": values,
        "zipf-like": (rng.zipf(1.2, size=10_000_000) % (1 << 40)).astype(np.uint64),
    }
    for name, stream in streams.items():
        batches = [KeyBatch.from_uint64(stream[i : i + (1 << 20)]) for i in range(0, len(stream), 1 << 20)]

        summary = HeavyKeys()

        def run(batches=batches, summary=summary) -> None:
            summary.__init__()  # type: ignore[misc]
            for batch in batches:
                summary.update(batch)

        seconds = best_of(run, runs=1)

        def settle(batches=batches, summary=summary) -> None:
            counted = HeavyCounts(summary)
            for batch in batches:
                counted.update(batch)

        settling = best_of(settle, runs=1)
        print(
            f"   {name:<14} summary {seconds:6.2f} s ({len(stream) / seconds / 1e6:.1f} M keys/s);"
            f" exact counts of its {len(summary.prints_)} keys {settling:6.2f} s"
        )

    if not KEYS.exists():
        print(f"3. skipped: {KEYS} is missing (python bench/bench_audit.py makes it)")
        return
    exe = [sys.executable, "-m", "hashaudit"]
    base = [*exe, "audit", str(KEYS), "-H", "xxh3_64", "-m", "2^20", "-q"]
    plain = median_run([*base, "--checks", "buckets"])
    sharded = median_run([*base, "--checks", "buckets,shards", "--shards", "16", "--shard-scheme", "jump"])
    print(f"3. audit of 10 M keys: buckets {plain:.2f} s; buckets + shards (jump 16) {sharded:.2f} s")


if __name__ == "__main__":
    main()
