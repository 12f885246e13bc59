"""Timing helpers shared by the benchmark scripts (run as ``python bench/NAME.py``, so this folder is on the path)."""

from __future__ import annotations

import compileall
import importlib.util
import subprocess
import time
from collections.abc import Callable
from pathlib import Path


def median_run(cmd: list[str], ok_codes: tuple[int, ...] = (0, 1), runs: int = 3) -> float:
    """Median wall seconds of ``runs`` runs of ``cmd`` after one warm-up run (numba cache, page cache); a run that
    exits with a code outside ``ok_codes`` stops the benchmark."""
    subprocess.run(cmd, check=False, stdout=subprocess.DEVNULL)
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        code = subprocess.run(cmd, check=False, stdout=subprocess.DEVNULL).returncode
        times.append(time.perf_counter() - t0)
        if code not in ok_codes:
            raise SystemExit(f"{' '.join(cmd)} exited with {code}")
    return sorted(times)[len(times) // 2]


def write_bytecode() -> None:
    """Write the bytecode of the hashaudit package the commands run, as ``pip install`` does: an editable install
    under ``PYTHONDONTWRITEBYTECODE=1`` (this machine's shell sets it) would otherwise compile its ~80 imported
    modules from source in every measured run."""
    spec = importlib.util.find_spec("hashaudit")
    if spec is not None and spec.origin is not None:
        compileall.compile_dir(str(Path(spec.origin).parent), quiet=1)


def best_of(fn: Callable[[], object], runs: int = 3) -> float:
    """Fastest of ``runs`` calls of ``fn`` after one warm-up call."""
    fn()
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)
