"""The throw-away script hashaudit replaces: read lines, MurmurHash3 each key, count buckets, chi-square.

Usage: ``python bench/baseline_python.py FILE [--bytes]`` (default: text mode, the way such scripts are usually
written; ``--bytes`` is the fastest plain-Python variant). Table size 2^20, mask of the low bits.
"""

from __future__ import annotations

import collections
import sys

import mmh3
import numpy as np
from scipy import stats

BUCKETS = 1 << 20


def main() -> None:
    path = sys.argv[1]
    counter: collections.Counter[int] = collections.Counter()
    mask = BUCKETS - 1
    if "--bytes" in sys.argv:
        with open(path, "rb") as f:
            for line in f:
                counter[mmh3.hash(line.rstrip(b"\n"), 0, signed=False) & mask] += 1
    else:
        with open(path, encoding="utf-8") as f:
            for line in f:
                counter[mmh3.hash(line.rstrip("\n"), signed=False) & mask] += 1
    observed = np.zeros(BUCKETS)
    for bucket, count in counter.items():
        observed[bucket] = count
    result = stats.chisquare(observed)
    print(f"keys {int(observed.sum())} chi-square {result.statistic:.1f} p {result.pvalue:.4g}")


if __name__ == "__main__":
    main()
