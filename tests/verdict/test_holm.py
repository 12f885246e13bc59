"""Holm's step-down adjustment."""

from __future__ import annotations

import numpy as np
from hypothesis import given
from hypothesis import strategies as st

from hashaudit.verdict.holm import holm_adjust


def test_worked_example():
    # Worked by hand from the definition in Holm (1979): sorted p = .01, .02, .03, .04 with k = 4 gives
    # 4*.01 = .04, max(.04, 3*.02) = .06, max(.06, 2*.03) = .06, max(.06, .04) = .06
    assert np.allclose(holm_adjust([0.03, 0.01, 0.04, 0.02]), [0.06, 0.04, 0.06, 0.06])


def test_caps_at_one_and_handles_empty():
    assert holm_adjust([0.5, 0.9]).tolist() == [1.0, 1.0]
    assert holm_adjust([]).size == 0


@given(st.lists(st.floats(min_value=0, max_value=1), min_size=1, max_size=40))
def test_holm_rejects_exactly_like_the_sequential_procedure(p):
    alpha = 0.05
    adjusted = holm_adjust(p)
    # the step-down procedure itself: walk the sorted p-values, stop at the first one above alpha/(k - j)
    order = np.argsort(p, kind="stable")
    rejected = set()
    for j, i in enumerate(order):
        if p[i] <= alpha / (len(p) - j):
            rejected.add(int(i))
        else:
            break
    assert {i for i, a in enumerate(adjusted) if a <= alpha} == rejected
    assert all(a >= q for a, q in zip(adjusted, p, strict=True))
