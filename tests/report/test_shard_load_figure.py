"""Shard balance carries the load per shard beside the distinct keys, and the page draws both."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import xxhash
from cli_runner import run

LOOKUPS = Path(__file__).parents[2] / "sample_keys" / "tracking_lookups.csv"
ARGS = ["audit", str(LOOKUPS), "-c", "parcel", "--weight-column", "bytes", "--shards", "8", "-H", "xxh3_64", "-q"]


def _by_shard() -> tuple[list[int], list[float]]:
    """Distinct parcels and summed bytes per shard, with the csv module and the xxhash package (seed 0, mod 8)."""
    keys: list[set] = [set() for _ in range(8)]
    load = [0.0] * 8
    with LOOKUPS.open(newline="") as f:
        for row in csv.DictReader(f):
            shard = xxhash.xxh3_64_intdigest(row["parcel"].encode()) % 8
            keys[shard].add(row["parcel"])
            load[shard] += float(row["bytes"])
    return [len(k) for k in keys], load


def test_load_per_shard_is_the_summed_weight_of_each_shard(tmp_path: Path) -> None:
    report, page = tmp_path / "r.json", tmp_path / "r.html"
    code, _, err = run([*ARGS, "--json", str(report), "--html", str(page)])
    assert code in (0, 1), err
    (finding,) = [c for c in json.loads(report.read_text())["hashes"][0]["checks"] if c["name"] == "shard_balance"]
    keys, load = _by_shard()
    assert finding["details"]["keys_per_shard"] == keys
    assert finding["details"]["load_per_shard"] == load
    html = page.read_text()
    assert "distinct keys and load per shard against an even share" in html
    assert "the load each shard carries" in html
