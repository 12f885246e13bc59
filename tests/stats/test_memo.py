"""Null results kept on disk (hashaudit.stats._memo): a kept value is exactly the computed one, a damaged or foreign
file is computed again, the disk can be turned off, and an audit reads the same with a cold or a warm cache."""

from __future__ import annotations

import json
import math
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from hashaudit.engine.plan import AuditPlan
from hashaudit.engine.runner import audit_batches
from hashaudit.keys.batch import KeyBatch
from hashaudit.report.json_report import report_dict
from hashaudit.stats import _memo
from hashaudit.stats.maxload import expected_max_load
from hashaudit.stats.probes import _ideal, _ideal_replay, ideal_cells, ideal_replay
from hashaudit.tables.growth import GrowthPolicy


@pytest.fixture(autouse=True)
def private_cache(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    """A cache folder of the test's own, and nothing kept in memory from earlier tests."""
    monkeypatch.setenv("HASHAUDIT_CACHE_DIR", str(tmp_path / "cache"))
    monkeypatch.delenv("HASHAUDIT_NULL_CACHE", raising=False)
    _memo.forget()
    yield tmp_path / "cache"
    _memo.forget()


def _files(cache: Path) -> list[Path]:
    return sorted((cache / "nulls").glob("*/*.json"))


def _counting(value):
    calls = []

    def compute():
        calls.append(1)
        return value

    return compute, calls


def test_values_of_every_kind_come_back_from_disk_exactly(private_cache: Path):
    value = (
        1.0 / 3.0,
        float("nan"),
        -math.inf,
        7,
        "linear",
        [np.array([0.1, np.nan, 2.5e-300]), np.arange(6, dtype=np.int64).reshape(2, 3)],
    )
    compute, calls = _counting(value)
    _memo.remembered("kinds", (1, "a", (0.5, 0.75)), compute)
    _memo.forget()
    again = _memo.remembered("kinds", (1, "a", (0.5, 0.75)), compute)
    assert calls == [1]  # the second time from the file
    assert again[0] == value[0] and math.isnan(again[1]) and again[2] == -math.inf and again[3:5] == (7, "linear")
    np.testing.assert_array_equal(again[5][0], value[5][0])
    assert again[5][1].dtype == np.int64 and again[5][1].shape == (2, 3)
    assert len(_files(private_cache)) == 1


def test_ideal_tables_from_disk_equal_a_fresh_simulation(private_cache: Path):
    key = (32, "linear", 4096, "mask", (0.25, 0.5, 0.9), 7)
    first = ideal_cells(*key)
    _memo.forget()
    kept = ideal_cells(*key)
    fresh = list(_ideal(*key))
    assert kept == fresh == first  # the scalar fields
    for a, b in zip(kept, fresh, strict=True):
        np.testing.assert_array_equal(a.hit_regions, b.hit_regions)
        np.testing.assert_array_equal(a.miss_regions, b.miss_regions)
        assert a.hit_regions.dtype == b.hit_regions.dtype
    policy = GrowthPolicy()
    replay_key = (64, "double", policy, "mask", 3000, 7)
    ideal_replay(*replay_key)
    _memo.forget()
    assert ideal_replay(*replay_key) == _ideal_replay(*replay_key)


def test_expected_max_load_is_kept_per_table_and_keys(private_cache: Path):
    value = expected_max_load(1024, 50_000)
    _memo.forget()
    assert expected_max_load(1024, 50_000) == value
    assert [p.name.split("-")[0] for p in _files(private_cache)] == ["expected_max_load"]


def test_a_damaged_or_foreign_file_is_computed_again(private_cache: Path):
    compute, calls = _counting(2.5)
    _memo.remembered("k", (1,), compute)
    (path,) = _files(private_cache)
    path.write_text("{not json")
    _memo.forget()
    assert _memo.remembered("k", (1,), compute) == 2.5 and len(calls) == 2
    assert json.loads(path.read_text())["value"] == 2.5  # written again
    path.write_text(json.dumps({"key": repr((2,)), "value": 99.0}))  # another key's value under this name
    _memo.forget()
    assert _memo.remembered("k", (1,), compute) == 2.5 and len(calls) == 3


def test_a_changed_statistic_starts_a_new_folder(private_cache: Path, monkeypatch: pytest.MonkeyPatch):
    compute, calls = _counting(1.5)
    _memo.remembered("k", (1,), compute)
    monkeypatch.setattr(_memo, "_STAMP", ["another-version"])
    _memo.forget()
    _memo.remembered("k", (1,), compute)
    assert len(calls) == 2
    folders = {p.parent.name for p in _files(private_cache)}
    assert len(folders) == 2 and "another-version" in folders


def test_the_disk_can_be_turned_off(private_cache: Path, monkeypatch: pytest.MonkeyPatch):
    monkeypatch.setenv("HASHAUDIT_NULL_CACHE", "0")
    compute, calls = _counting(3.0)
    assert _memo.remembered("k", (1,), compute) == 3.0
    assert _memo.remembered("k", (1,), compute) == 3.0  # kept in memory
    assert calls == [1] and _files(private_cache) == []


def test_an_unwritable_folder_only_means_computing(private_cache: Path, monkeypatch: pytest.MonkeyPatch):
    blocker = private_cache.parent / "a-file"
    blocker.write_text("")
    monkeypatch.setenv("HASHAUDIT_CACHE_DIR", str(blocker / "below"))  # cannot be made: a file is in the way
    monkeypatch.setattr(tempfile, "tempdir", str(blocker / "below"))  # nor the temporary folder's
    compute, calls = _counting(4.0)
    assert _memo.remembered("k", (1,), compute) == 4.0
    assert calls == [1]


def test_threads_asking_at_once_wait_for_one_computation():
    calls = []

    def slow():
        calls.append(1)
        time.sleep(0.05)
        return 8.0

    got: list[float] = []
    threads = [threading.Thread(target=lambda: got.append(_memo.remembered("k", (1,), slow))) for _ in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert calls == [1] and got == [8.0] * 8


def test_an_audit_reads_the_same_with_a_cold_a_warm_and_no_cache(private_cache: Path, monkeypatch: pytest.MonkeyPatch):
    rng = np.random.default_rng(20261203)
    keys = [b"crate-%d-%d" % (i, v) for i, v in enumerate(rng.integers(0, 10**9, size=20_000))]
    plan = AuditPlan(hashes=("murmur3_32", "xxh3_64"), checks=("buckets", "tables"), buckets=(1024,))

    def report() -> str:
        _memo.forget()
        doc = report_dict(audit_batches([KeyBatch.from_keys(keys)], plan, threads=2))
        doc.pop("run")
        return json.dumps(doc)

    cold = report()
    kinds = {p.name.split("-")[0] for p in _files(private_cache)}
    assert {"ideal_cells", "expected_max_load"} <= kinds
    warm = report()
    monkeypatch.setenv("HASHAUDIT_NULL_CACHE", "0")
    assert cold == warm == report()
