"""Benchmark: the cost of each check group, and of the default audit with three hashes and three table sizes.

Uses ``bench/data/keys_10000000.txt`` (made by ``bench/bench_audit.py`` when missing). Each row is the median of
three runs of ``hashaudit audit`` as a subprocess (numba cache warm), with ``-H murmur3_32 -H xxh3_64 -H crc32
-m 2^20 -m 2^22 -m 1000003``. Usage: ``python bench/bench_checks.py [--keys N]``.
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
from pathlib import Path

from _timing import median_run

HERE = Path(__file__).parent
HASHES = ["-H", "murmur3_32", "-H", "xxh3_64", "-H", "crc32"]
TABLES = ["-m", "2^20", "-m", "2^22", "-m", "1000003"]
RUNS = {
    "bucket checks only": ["--checks", "buckets"],
    "bit checks only": ["--checks", "bits"],
    "full-width collisions only": ["--checks", "collisions"],
    "avalanche only": ["--checks", "avalanche"],
    "neighbour families only": ["--checks", "neighbours"],
    "seed sensitivity only": ["--checks", "seeds"],
    "simulated tables only": ["--checks", "tables"],
    "default (all but seeds, growth, tags, shards)": [],
}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--keys", type=int, default=10_000_000)
    args = parser.parse_args()
    path = HERE / "data" / f"keys_{args.keys}.txt"
    if not path.exists():
        subprocess.run(
            [sys.executable, str(HERE / "bench_audit.py"), "--keys", str(args.keys), "--skip-baseline"], check=True
        )
    base = [sys.executable, "-m", "hashaudit", "audit", str(path), *HASHES, *TABLES, "-q"]
    for label, extra in RUNS.items():
        seconds = median_run(base + extra)
        print(f"{label:<30} {seconds:6.2f} s")
    peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    print(f"{'peak RSS of any run':<30} {peak:6.0f} MiB")


if __name__ == "__main__":
    main()
