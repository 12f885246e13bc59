"""The same input and options give byte-identical JSON results (everything but the ``run`` block) on repeated
runs, for any number of threads."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

SAMPLE = Path(__file__).resolve().parents[2] / "sample_keys" / "tracking_lookups.csv"


def _result(tmp_path: Path, name: str, *extra: str) -> str:
    out = tmp_path / name
    cmd = [sys.executable, "-m", "hashaudit", "audit", str(SAMPLE), "-c", "parcel", "--weight-column", "bytes",
           "-H", "xxh3_64", "-H", "fnv1a_32", "--shards", "8", "--checks", "buckets,bits,collisions,avalanche,tables,shards",
           "--seed", "7", "-q", "--json", str(out), *extra]  # fmt: skip
    code = subprocess.run(cmd, capture_output=True).returncode
    assert code in (0, 1)
    doc = json.loads(out.read_text())
    doc.pop("run")
    return json.dumps(doc, sort_keys=True)


# about 17 s; the thread counts are also compared in tests/engine/test_local.py and tests/properties/test_batching.py
@pytest.mark.slow
def test_repeated_runs_and_thread_counts_give_identical_results(tmp_path):
    first = _result(tmp_path, "a.json")
    assert _result(tmp_path, "b.json") == first
    assert _result(tmp_path, "c.json", "--threads", "1") == first
    assert _result(tmp_path, "d.json", "--threads", "3") == first
