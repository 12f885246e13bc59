"""Holm's step-down adjustment of p-values.

References
----------
S. Holm, "A simple sequentially rejective multiple test procedure", Scand. J. Statist. 6 (1979) 65-70.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np


def holm_adjust(p_values: Sequence[float]) -> np.ndarray:
    """Holm-adjusted p-values: reject hypothesis i at family-wise level alpha when ``adjusted[i] <= alpha``.

    The family-wise error is controlled under any dependence between the tests, which matters here: the
    tables of one hash function share their keys.

    Parameters
    ----------
    p_values : sequence of float
        Raw p-values, in any order.

    Returns
    -------
    numpy.ndarray
        Adjusted p-values in the input order: ``max_{j <= rank(i)} min(1, (k - j + 1) p_(j))``.
    """
    p = np.asarray(p_values, dtype=np.float64)
    k = len(p)
    if k == 0:
        return p.copy()
    order = np.argsort(p, kind="stable")
    scaled = (k - np.arange(k)) * p[order]
    adjusted_sorted = np.minimum(np.maximum.accumulate(scaled), 1.0)
    adjusted = np.empty(k)
    adjusted[order] = adjusted_sorted
    return adjusted
