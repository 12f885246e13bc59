"""Automatic table sizes follow the distinct keys the tables hold, not the lines read."""

from __future__ import annotations

import random
from pathlib import Path

import pytest

import hashaudit.engine.sources as sources
from hashaudit.engine.plan import AuditPlan
from hashaudit.keys import SourceOptions


def _keys(count: int, seed: int) -> list[str]:
    rng = random.Random(seed)
    return [f"sku-{rng.getrandbits(40):010x}" for _ in range(count)]


@pytest.fixture
def files(tmp_path: Path) -> tuple[Path, Path]:
    keys = _keys(3000, 3)
    once, repeated = tmp_path / "once.txt", tmp_path / "repeated.txt"
    once.write_text("".join(k + "\n" for k in keys))
    rng = random.Random(4)
    lines = keys * 50
    rng.shuffle(lines)
    repeated.write_text("".join(k + "\n" for k in lines))
    return once, repeated


def _audit(path: Path, **plan: object):  # type: ignore[no-untyped-def]
    return sources.audit([path], AuditPlan(hashes=("xxh3_64",), checks=("buckets",), **plan), SourceOptions())


def test_repeated_keys_get_the_tables_of_their_distinct_keys(files: tuple[Path, Path]) -> None:
    once, repeated = files
    assert (
        _audit(repeated).tables
        == _audit(once).tables
        == (("mask", 2048), ("mask", 4096), ("mask", 8192), ("mod", 4093))
    )


def test_every_occurrence_counted_sizes_for_every_occurrence(files: tuple[Path, Path]) -> None:
    _, repeated = files
    assert max(m for _, m in _audit(repeated, all_keys=True).tables) == 1 << 18  # 150,000 occurrences at load 0.5


def test_a_size_estimate_from_the_file_is_corrected_by_another_read(
    files: tuple[Path, Path], monkeypatch: pytest.MonkeyPatch
) -> None:
    once, repeated = files
    monkeypatch.setattr(sources, "EXACT_COUNT_BYTES", 0)  # every file is "large": sizes from its size at first
    corrected = _audit(repeated)
    assert corrected.tables == _audit(once).tables
    assert corrected.run["passes"] == 2  # the estimate's read, then the read with the right tables
    exact = _audit(once)
    assert exact.run["passes"] == 1  # an estimate that was right costs nothing
    plain = corrected.to_dict()
    again = sources.audit(
        [repeated], AuditPlan(hashes=("xxh3_64",), checks=("buckets",), buckets=(2048, 4096, 8192, 4093))
    )
    assert [c for h in plain["hashes"] for c in h["checks"]] == [
        c for h in again.to_dict()["hashes"] for c in h["checks"]
    ]
