"""Benchmark: the fixed cost every ``hashaudit`` process pays before its first key, step by step.

Each step is a fresh interpreter (``python -c``) doing a little more than the step before, timed from the outside
(fork to exit); the figures are medians of ``--runs`` runs. The steps, in the order an audit pays them:

1. the interpreter alone;
2. importing click and numpy (the command line and the arrays);
3. and numba;
4. and ``scipy.special`` (the p-values);
5. and hashaudit's hash modules, with one cached kernel loaded and called (numba's typing and lowering registries
   and its runtime start then);
6. the whole command: a 3-key file, ``--checks buckets``, one hash (row 3 of ``bench/speed_table.py``).

The command can take less than step 5: it imports ``scipy.special`` on a second thread while the keys are read and
hashed. Step 4 alone is the floor of any audit that uses numba's JIT kernels and scipy's p-values. Usage: ``python bench/bench_floor.py [--runs N] [--json FILE]``.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

from _timing import median_run, write_bytecode

FIRST_KERNEL = (
    "import numpy as np, hashaudit.hashes.fnv as f; from hashaudit.keys.batch import KeyBatch; "
    "f.fnv1a_32(KeyBatch(np.frombuffer(b'abc', np.uint8), np.array([0, 3], np.int64)))"
)
STEPS = [
    ("interpreter", ["-c", "pass"]),
    ("+ click, numpy", ["-c", "import click, numpy"]),
    ("+ numba", ["-c", "import click, numpy, numba"]),
    ("+ scipy.special", ["-c", "import click, numpy, numba, scipy.special"]),
    ("+ hash modules, one cached kernel", ["-c", "import click, numpy, numba, scipy.special; " + FIRST_KERNEL]),
]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=7)
    parser.add_argument("--json", help="write the figures to this file")
    args = parser.parse_args()
    write_bytecode()
    with tempfile.TemporaryDirectory(prefix="hashaudit-floor-") as folder:
        keys = Path(folder) / "keys_3.txt"
        keys.write_bytes(b"order-1\norder-2\norder-3\n")
        audit = ["-m", "hashaudit", "audit", str(keys), "--checks", "buckets", "-H", "murmur3_32", "-q"]
        steps = [*STEPS, ("the 3-key audit (row 3)", audit)]
        # each step after a warm-up run (page cache, kernel cache); a step that fails stops the benchmark
        figures = {name: round(median_run([sys.executable, *argv], runs=args.runs), 3) for name, argv in steps}
    load = " ".join(f"{x:.2f}" for x in os.getloadavg())
    print(f"{time.strftime('%Y-%m-%d %H:%M')}, {os.cpu_count()} cores, load average {load}, medians of {args.runs}:")
    before = 0.0
    for name, seconds in figures.items():
        print(f"  {name:34} {seconds:6.3f} s  (+{seconds - before:.3f})")
        before = seconds
    if args.json:
        Path(args.json).write_text(json.dumps({"load_average": load, "seconds": figures}, indent=1) + "\n")


if __name__ == "__main__":
    main()
