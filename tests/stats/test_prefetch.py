"""``prefetch_row`` compiles into kernels of one- and two-dimensional arrays and changes nothing they compute."""

from __future__ import annotations

import numpy as np
from numba import njit

from hashaudit._prefetch import prefetch_row


@njit(cache=False)
def _sum_with_prefetch(table, rows):  # pragma: no cover - compiled
    total = 0
    for i in range(len(rows)):
        prefetch_row(table, rows[(i + 4) % len(rows)])
        total += np.sum(table[rows[i] : rows[i] + 1])
    return total


def test_prefetch_leaves_results_alone() -> None:
    rng = np.random.default_rng(3)
    table = rng.integers(0, 1 << 40, size=(4096, 2), dtype=np.uint64)
    rows = rng.integers(0, 4096, size=10_000)
    assert _sum_with_prefetch(table, rows) == int(table[rows].sum())
    flat = table[:, 0].copy()
    assert _sum_with_prefetch(flat, rows) == int(flat[rows].sum())


def test_prefetch_past_the_end_is_harmless() -> None:
    # a prefetch never faults: rows far outside the array are asked for and nothing happens
    table = np.arange(8, dtype=np.int64).reshape(4, 2)

    @njit(cache=False)
    def far(table):  # pragma: no cover - compiled
        prefetch_row(table, 1 << 40)
        prefetch_row(table, -(1 << 40))
        return table.sum()

    assert far(table) == 28
