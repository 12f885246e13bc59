"""Benchmark: peak memory of the default audit (the four default hash functions, every default check) under the
shared memory budget, at 10 M and 100 M distinct keys.

Keys are 16 hexadecimal digits of a bijective mix of a counter (so every key is distinct), written once into
``--workdir``. Each audit runs as ``python -m hashaudit audit FILE -q --json R`` in a child process; the table
shows seconds, the report's ``run.peak_memory_bytes`` (the child's largest resident set), the reads of the input
(``run.passes``) and the ``--memory`` given (default: a quarter of the machine's memory, at most 1 GiB).

Usage: ``python bench/bench_memory_budget.py [--workdir DIR] [--sizes 10000000,100000000] [--memory 4g]``.
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HEX = np.frombuffer(b"0123456789abcdef", dtype=np.uint8)
CHUNK = 5_000_000


def _mix(x: np.ndarray) -> np.ndarray:
    """splitmix64's finaliser: a bijection of 64-bit words (Steele, Lea & Flood 2014)."""
    with np.errstate(over="ignore"):
        x = x + np.uint64(0x9E3779B97F4A7C15)
        x = (x ^ (x >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        x = (x ^ (x >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return x ^ (x >> np.uint64(31))


def make_keys(path: Path, n: int) -> None:
    """``n`` distinct 16-digit hexadecimal keys, one per line."""
    if path.exists() and path.stat().st_size == 17 * n:
        return
    partial = path.with_suffix(".partial")
    with open(partial, "wb") as f:
        for start in range(0, n, CHUNK):
            values = _mix(np.arange(start, min(n, start + CHUNK), dtype=np.uint64))
            rows = np.empty((len(values), 17), dtype=np.uint8)
            for digit in range(16):
                rows[:, digit] = HEX[(values >> np.uint64(60 - 4 * digit)) & np.uint64(15)]
            rows[:, 16] = ord("\n")
            rows.tofile(f)
    os.replace(partial, path)


def audit(path: Path, memory: str | None) -> tuple[float, dict]:
    with tempfile.TemporaryDirectory() as folder:
        report = Path(folder) / "r.json"
        cmd = [sys.executable, "-m", "hashaudit", "audit", str(path), "-q", "--json", str(report)]
        if memory:
            cmd += ["--memory", memory]
        t0 = time.perf_counter()
        code = subprocess.run(cmd, check=False).returncode
        seconds = time.perf_counter() - t0
        if code not in (0, 1):
            raise SystemExit(f"audit of {path} exited with {code}")
        return seconds, json.loads(report.read_text())["run"]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--workdir", type=Path, default=Path(tempfile.gettempdir()) / "hashaudit-bench-memory")
    parser.add_argument("--sizes", default="10000000,100000000")
    parser.add_argument("--memory", action="append", default=[], help="also run with this --memory (repeatable)")
    args = parser.parse_args()
    args.workdir.mkdir(parents=True, exist_ok=True)
    print(f"measured {datetime.date.today().isoformat()}, {os.cpu_count()} cores")
    print(f"{'distinct keys':>14}  {'--memory':>9}  {'seconds':>8}  {'peak memory':>12}  passes")
    for n in (int(s) for s in args.sizes.split(",")):
        path = args.workdir / f"distinct_{n}.txt"
        make_keys(path, n)
        for memory in [None, *args.memory]:
            seconds, run = audit(path, memory)
            peak = run.get("peak_memory_bytes") or 0
            print(f"{n:>14,}  {memory or 'default':>9}  {seconds:>8.1f}  {peak / 2**20:>8,.0f} MiB  {run['passes']:>6}")


if __name__ == "__main__":
    main()
