"""The distinct-key filter against a Python set."""

from __future__ import annotations

import numpy as np
import pytest

from hashaudit.errors import UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.stats.distinct import DistinctKeys


def test_first_occurrences_match_a_python_set():
    rng = np.random.default_rng(31)
    keys = [b"%d" % x for x in rng.integers(0, 30_000, size=100_000)] + [b""] * 3
    filt = DistinctKeys()
    marks = []
    for start in range(0, len(keys), 7_777):  # several batches and table growths
        marks.extend(filt.update(KeyBatch.from_keys(keys[start : start + 7_777])).tolist())
    seen: set[bytes] = set()
    expected = []
    for k in keys:
        expected.append(k not in seen)
        seen.add(k)
    assert marks == expected
    assert filt.distinct_ == len(seen) and filt.repeats == len(keys) - len(seen)


def test_merge_is_the_union():
    a, b = DistinctKeys(), DistinctKeys()
    a.update(KeyBatch.from_keys([b"x", b"y", b"x"]))
    b.update(KeyBatch.from_keys([b"y", b"z"]))
    a.merge(b)
    assert a.distinct_ == 3 and a.keys_seen_ == 5


def test_budget():
    with pytest.raises(UsageError, match="64 KiB"):
        DistinctKeys(memory_bytes=1000)


def test_reserving_space_changes_nothing_but_growth():
    keys = [b"%d" % (i % 5000) for i in range(20_000)]
    grown, reserved = DistinctKeys(), DistinctKeys()
    reserved.reserve(20_000)
    size_after_reserve = len(reserved.table_)
    a = grown.update(KeyBatch.from_keys(keys))
    b = reserved.update(KeyBatch.from_keys(keys))
    assert a.tolist() == b.tolist() and grown.distinct_ == reserved.distinct_ == 5000
    assert len(reserved.table_) == size_after_reserve >= 20_000 / 0.75  # no growth after the reservation
    small = DistinctKeys(memory_bytes=1 << 16)
    small.reserve(10**9)  # never beyond the budget
    assert len(small.table_) * 8 <= 1 << 16
