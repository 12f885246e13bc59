"""Benchmark: the audit of one hash at one table size against a hand-written per-key Python baseline.

Generates ``bench/data/keys_10m.txt`` (10 M invented keys of ~17 bytes, fixed seed) when missing, then times

(a) ``hashaudit audit FILE -H murmur3_32 -m 2^20 --all-keys --checks buckets`` end to end (a subprocess, as a user
    runs it; every occurrence counted, bucket checks only: the same work as the baseline), and the default audit
    (repeated keys dropped, bucket and output-bit checks),
(b) the library's hashing + bucket counting alone on batches already in memory (one core),
(c) the baseline a user would write (``bench/baseline_python.py``, run as its own process): read lines,
    ``mmh3.hash`` per key, ``collections.Counter`` of buckets, ``scipy.stats.chisquare`` — in text mode, as such
    scripts are usually written, and in bytes mode, the fastest plain-Python variant.

Usage: ``python bench/bench_audit.py [--keys N] [--skip-baseline]``. Prints a table and writes
``bench/data/results.json``.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).parent
DATA = HERE / "data"
BUCKETS = 1 << 20


def make_keys(path: Path, n: int, seed: int = 7) -> None:
    """n keys like ``user:0012345678:ab12`` (17-20 bytes), written in chunks."""
    rng = np.random.default_rng(seed)
    with open(path, "wb") as f:
        for start in range(0, n, 1_000_000):
            count = min(1_000_000, n - start)
            ids = rng.integers(0, 10**10, size=count)
            tags = rng.integers(0, 1 << 16, size=count)
            f.write("".join(f"u:{i:010d}:{t:04x}\n" for i, t in zip(ids.tolist(), tags.tolist(), strict=True)).encode())


def time_cli(path: Path, *extra: str) -> tuple[float, float]:
    """Median seconds of three runs and peak RSS (MiB) of the audit command (warm numba cache: one run first)."""
    cmd = [sys.executable, "-m", "hashaudit", "audit", str(path), "-H", "murmur3_32", "-m", "2^20", "-q", *extra]
    subprocess.run(cmd, check=False)
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        proc = subprocess.run(cmd, check=False)
        times.append(time.perf_counter() - t0)
        if proc.returncode not in (0, 1):
            raise SystemExit(f"audit failed with exit code {proc.returncode}")
    peak_mib = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    return sorted(times)[1], peak_mib


def time_kernels(path: Path) -> tuple[float, float, int]:
    """Seconds to read the batches, and seconds for hashing + bucket counting over them (one core)."""
    from hashaudit.hashes.registry import get_hash
    from hashaudit.keys import open_keys
    from hashaudit.stats.buckets import BucketCounts

    t0 = time.perf_counter()
    batches = list(open_keys(path))
    read_seconds = time.perf_counter() - t0
    spec = get_hash("murmur3_32")
    counts = BucketCounts("murmur3_32", 0, "mask", BUCKETS, 32)
    counts.update(spec.hash_batch(batches[0].slice(0, 10), 0))  # compile / load kernels before timing
    counts = BucketCounts("murmur3_32", 0, "mask", BUCKETS, 32)
    t0 = time.perf_counter()
    for batch in batches:
        counts.update(spec.hash_batch(batch, 0))
    return read_seconds, time.perf_counter() - t0, sum(len(b) for b in batches)


def time_baseline(path: Path, *extra: str) -> float:
    """The throw-away script (``bench/baseline_python.py``) as a user runs it: a process of its own."""
    t0 = time.perf_counter()
    subprocess.run(
        [sys.executable, str(HERE / "baseline_python.py"), str(path), *extra], check=True, stdout=subprocess.DEVNULL
    )
    return time.perf_counter() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--keys", type=int, default=10_000_000)
    parser.add_argument("--skip-baseline", action="store_true")
    args = parser.parse_args()
    DATA.mkdir(exist_ok=True)
    path = DATA / f"keys_{args.keys}.txt"
    if not path.exists():
        print(f"generating {path} ...", flush=True)
        make_keys(path, args.keys)
    size_mb = os.path.getsize(path) / 1e6
    # the same work as the baseline: every occurrence, bucket checks only
    cli_seconds, cli_peak = time_cli(path, "--all-keys", "--checks", "buckets")
    distinct_seconds, distinct_peak = time_cli(path)  # the default: repeats dropped, bucket and bit checks
    read_seconds, kernel_seconds, n = time_kernels(path)
    results = {
        "keys": n,
        "file_mb": round(size_mb, 1),
        "audit_cli_seconds": round(cli_seconds, 2),
        "audit_cli_keys_per_second": round(n / cli_seconds),
        "audit_cli_peak_rss_mib": round(cli_peak),
        "audit_distinct_seconds": round(distinct_seconds, 2),
        "audit_distinct_peak_rss_mib": round(distinct_peak),
        "read_keys_per_second": round(n / read_seconds),
        "hash_and_count_keys_per_second": round(n / kernel_seconds),
    }
    if not args.skip_baseline:
        text_mode = time_baseline(path)
        bytes_mode = time_baseline(path, "--bytes")
        results["baseline_text_seconds"] = round(text_mode, 2)
        results["baseline_bytes_seconds"] = round(bytes_mode, 2)
        results["speedup_vs_text_baseline"] = round(text_mode / cli_seconds, 1)
        results["speedup_vs_bytes_baseline"] = round(bytes_mode / cli_seconds, 1)
    for key, value in results.items():
        print(f"{key:<34} {value:>14,}" if isinstance(value, int) else f"{key:<34} {value:>14}")
    (DATA / "results.json").write_text(json.dumps(results, indent=2) + "\n")


if __name__ == "__main__":
    main()
