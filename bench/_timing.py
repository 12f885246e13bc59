"""Timing helpers shared by the benchmark scripts (run as ``python bench/NAME.py``, so this folder is on the path)."""

from __future__ import annotations

import subprocess
import time
from collections.abc import Callable


def median_run(cmd: list[str], ok_codes: tuple[int, ...] = (0, 1)) -> float:
    """Median wall seconds of three runs of ``cmd`` after one warm-up run (numba cache, page cache); a run that
    exits with a code outside ``ok_codes`` stops the benchmark."""
    subprocess.run(cmd, check=False, stdout=subprocess.DEVNULL)
    times = []
    for _ in range(3):
        t0 = time.perf_counter()
        code = subprocess.run(cmd, check=False, stdout=subprocess.DEVNULL).returncode
        times.append(time.perf_counter() - t0)
        if code not in ok_codes:
            raise SystemExit(f"{' '.join(cmd)} exited with {code}")
    return sorted(times)[1]


def best_of(fn: Callable[[], object], runs: int = 3) -> float:
    """Fastest of ``runs`` calls of ``fn`` after one warm-up call."""
    fn()
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)
