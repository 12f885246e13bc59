"""A hot shard's heavy keys come with handles a user can act on: the key's 64-bit fingerprint and its hash value
always, the key itself only with --show-keys."""

from __future__ import annotations

import csv
import json
from collections import Counter
from pathlib import Path

import xxhash
from cli_runner import run

from hashaudit.hashes.fingerprint import heavy_fingerprints
from hashaudit.keys.batch import KeyBatch

LOOKUPS = Path(__file__).parents[2] / "sample_keys" / "tracking_lookups.csv"
ARGS = ["audit", str(LOOKUPS), "-c", "parcel", "--weight-column", "bytes", "--shards", "8", "-H", "xxh3_64", "-q"]


def _heaviest() -> tuple[str, float]:
    """The heaviest parcel by summed bytes, counted with the standard library's csv module."""
    load: Counter = Counter()
    with LOOKUPS.open(newline="") as f:
        for row in csv.DictReader(f):
            load[row["parcel"]] += float(row["bytes"])
    return load.most_common(1)[0]


def _hot_keys(report: dict) -> list[dict]:
    (finding,) = [c for c in report["hashes"][0]["checks"] if c["name"] == "hot_keys"]
    assert finding["verdict"] == "info"
    return finding["details"]["heavy_keys"]


def test_the_heavy_key_is_named_by_fingerprint_and_hash_value_but_not_shown(tmp_path: Path) -> None:
    report = tmp_path / "r.json"
    code, _, err = run([*ARGS, "--json", str(report)])
    assert code in (0, 1), err
    key, load = _heaviest()
    (entry,) = _hot_keys(json.loads(report.read_text()))
    assert entry["fingerprint"] == f"{int(heavy_fingerprints(KeyBatch.from_keys([key.encode()]))[0]):016x}"
    value = xxhash.xxh3_64_intdigest(key.encode())  # the xxhash package, seed 0
    assert entry["hash"] == f"{value:016x}"
    assert entry["shard"] == value % 8  # the default shard scheme: the hash modulo the shard count
    assert entry["load"] == load
    assert "key" not in entry and key not in report.read_text()


def test_show_keys_adds_the_key(tmp_path: Path) -> None:
    report = tmp_path / "r.json"
    code, _, err = run([*ARGS, "--show-keys", "--json", str(report)])
    assert code in (0, 1), err
    (entry,) = _hot_keys(json.loads(report.read_text()))
    assert entry["key"] == _heaviest()[0]
