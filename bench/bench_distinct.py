"""Benchmark: telling repeated keys from distinct ones (``DistinctKeys``, 128-bit fingerprints).

Feeds N random 8-byte keys (all distinct, the worst case for memory) in batches of 2^20 to a fresh store, once
sized up front (``reserve``, as the engine does when the key count is known) and once growing from empty (stdin,
compressed input), each in its own child process so peak RSS belongs to that run alone. Reports seconds spent in
``update`` (fingerprinting included), bytes of table per distinct key, and peak RSS.

Usage: ``python bench/bench_distinct.py [--keys N]`` (default 10^8; needs about 2.5 GiB).
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time


def run_once(keys: int, reserve: bool) -> dict[str, float]:
    import numpy as np

    from hashaudit.keys.batch import KeyBatch
    from hashaudit.stats.distinct import DistinctKeys

    rng = np.random.default_rng(20261202)
    store = DistinctKeys(memory_bytes=8 << 30)
    if reserve:
        store.reserve(keys)
    DistinctKeys(memory_bytes=4 << 20).update(KeyBatch.from_uint64(np.arange(4, dtype=np.uint64)))  # compile first
    spent = 0.0
    for start in range(0, keys, 1 << 20):
        values = rng.integers(0, 2**64 - 1, size=min(1 << 20, keys - start), dtype=np.uint64, endpoint=True)
        batch = KeyBatch.from_uint64(values)
        t0 = time.perf_counter()
        store.update(batch)
        spent += time.perf_counter() - t0
    return {
        "seconds": round(spent, 2),
        "distinct": store.distinct_,
        "table_bytes_per_key": round(store.memory_in_use / max(store.distinct_, 1), 1),
        "peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss >> 10,
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--keys", type=int, default=100_000_000)
    parser.add_argument("--child", choices=("reserved", "growing"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        print(json.dumps(run_once(args.keys, args.child == "reserved")))
        return
    for mode in ("reserved", "growing"):
        out = subprocess.run(
            [sys.executable, __file__, "--keys", str(args.keys), "--child", mode],
            check=True,
            capture_output=True,
            text=True,
        ).stdout
        row = json.loads(out)
        print(
            f"{mode:>9}: {row['distinct']:,} distinct keys in {row['seconds']} s "
            f"({row['distinct'] / row['seconds'] / 1e6:.1f} M keys/s), table {row['table_bytes_per_key']} B/key, "
            f"peak RSS {row['peak_rss_mib']} MiB"
        )


if __name__ == "__main__":
    main()
