"""Benchmark: peak memory of an audit of 100 M keys with the default bucket checks.

Runs ``hashaudit audit bench/data/keys_100000000.txt -H murmur3_32 -m 2^20 --checks buckets`` (made by
``python bench/bench_audit.py --keys 100000000`` when missing) as a child process three ways — the defaults (distinct
keys told apart within ``--distinct-memory 640m``, reading the file in parts when it holds more), with
``--distinct-memory 4g`` (one read), and with ``--all-keys`` (every occurrence counted, no distinct-key table) —
and prints seconds, peak RSS (``ru_maxrss`` of the child) and the number of reads of the input.

Usage: ``python bench/bench_memory.py [--keys-file PATH]``.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).parent
DEFAULT_FILE = HERE / "data" / "keys_100000000.txt"
# in order of growing peak: a child's peak shows only when it beats the earlier ones (ru_maxrss of all children)
RUNS = {"--all-keys": ["--all-keys"], "defaults": [], "--distinct-memory 4g": ["--distinct-memory", "4g"]}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--keys-file", type=Path, default=DEFAULT_FILE)
    args = parser.parse_args()
    if not args.keys_file.exists():
        raise SystemExit(f"{args.keys_file} is missing: python bench/bench_audit.py --keys 100000000 makes it")
    base = [sys.executable, "-m", "hashaudit", "audit", str(args.keys_file), "-H", "murmur3_32", "-m", "2^20"]
    for label, extra in RUNS.items():
        with tempfile.TemporaryDirectory() as folder:
            report = Path(folder) / "r.json"
            before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
            t0 = time.perf_counter()
            code = subprocess.run([*base, "--checks", "buckets", *extra, "-q", "--json", str(report)]).returncode
            seconds = time.perf_counter() - t0
            peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
            if code not in (0, 1):
                raise SystemExit(f"{label}: exit code {code}")
            passes = json.loads(report.read_text())["run"].get("passes", 1)
        shown = f"{peak / 1024:,.0f} MiB" if peak > before else "(below an earlier run's peak)"
        print(f"{label:<24} {seconds:6.1f} s   peak RSS {shown}   reads of the input: {passes}")


if __name__ == "__main__":
    main()
