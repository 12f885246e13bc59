"""The Dask engine on a 2-worker local cluster: the JSON report is the local engine's, apart from run metadata."""

from __future__ import annotations

import json

import numpy as np
import pytest

pytest.importorskip("distributed")

from hashaudit import AuditPlan, audit  # noqa: E402
from hashaudit.engine.distributed import _range_bytes, audit_dask, plan_partitions  # noqa: E402
from hashaudit.keys.options import SourceOptions  # noqa: E402
from hashaudit.report.json_report import report_dict  # noqa: E402


def _same(local, dist) -> bool:
    """Equal reports apart from run metadata (the heavy-key summary's counts included: a second read settles them)."""
    docs = []
    for result in (local, dist):
        doc = report_dict(result)
        doc.pop("run")
        docs.append(json.dumps(doc, sort_keys=True))
    return docs[0] == docs[1]


def test_byte_ranges_split_on_line_boundaries(tmp_path):
    path = tmp_path / "k.txt"
    lines = [b"k%d" % i for i in range(1000)]
    path.write_bytes(b"\n".join(lines))  # no newline at the end
    parts = plan_partitions([str(path)], [SourceOptions()], 97)
    pieces = b"".join(_range_bytes(str(path), p.start, p.end) for p in parts)
    assert pieces == path.read_bytes() and len(parts) == -(-path.stat().st_size // 97)


def test_the_dask_engine_gives_the_local_engines_report(tmp_path):
    rng = np.random.default_rng(11)
    keys = [b"order-%d" % x for x in rng.integers(0, 40_000, size=60_000)]  # repeats across partitions
    keys[::20] = [b"order-7"] * 3000  # a hot key: the heavy-key summary cuts counts, a second read settles them
    path = tmp_path / "keys.txt"
    path.write_bytes(b"\n".join(keys) + b"\n")
    plan = AuditPlan(
        hashes=("murmur3_32", "crc32"),
        buckets=(4096, 4093),
        checks=("buckets", "bits", "collisions", "avalanche", "tables", "shards"),
        shards=(8,),
        shard_schemes=("jump",),
        seed=3,
    )
    local = audit([path], plan)
    dist = audit_dask([str(path)], plan, workers=2, partition_bytes=100_000, prefix_bits=3)
    assert dist.run["engine"] == "dask" and dist.run["partitions"] > 5
    assert dist.keys == local.keys == len(set(keys)) and dist.keys_read == local.keys_read
    assert _same(local, dist)
    attributions = [c for h in report_dict(dist)["hashes"] for c in h["checks"] if c["name"] == "load_attribution"]
    assert attributions and all(c["details"]["heavy_keys_exact"] for c in attributions)
    assert local.run["passes"] == 2 and dist.run["passes"] == 1  # Dask counts the heavy keys in stage 2: one read


def test_parquet_row_groups_are_partitions():
    from pathlib import Path

    sample = Path(__file__).resolve().parents[2] / "sample_keys" / "tracking_lookups.parquet"
    plan = AuditPlan(hashes=("xxh3_64", "crc32"), buckets=(1024, 1021), checks=("buckets", "bits", "tables"), seed=1)
    options = SourceOptions(columns=("parcel",))
    local = audit([sample], plan, options)
    dist = audit_dask([str(sample)], plan, options, workers=2, prefix_bits=2)
    assert dist.run["partitions"] == 4  # the sample has four row groups of 20,000 rows
    assert _same(local, dist)


def test_weighted_loads_with_automatic_table_sizes_match_the_local_engine(tmp_path):
    """Table sizes follow the key count, known to the Dask engine only after the first stage: the loads per bucket
    (``hottest_by_load``) are then counted in the second, over every occurrence with its weight."""
    from pathlib import Path

    sample = Path(__file__).parents[2] / "sample_keys" / "tracking_lookups.csv"
    plan = AuditPlan(hashes=("murmur3_32",), checks=("buckets", "shards"), shards=(8,), seed=1)
    options = SourceOptions(columns=("parcel",), weight_column="bytes")
    local = audit([sample], plan, options)
    dist = audit_dask([str(sample)], plan, options, workers=2, prefix_bits=2)
    tables = report_dict(dist)["hashes"][0]["tables"]
    assert tables and all(t["hottest_by_load"] for t in tables)
    assert _same(local, dist)


def test_every_check_group_gives_the_local_engines_report(tmp_path):
    """All groups at once (seeds, neighbours, growth and tags included), on keys with repeats and a hot key."""
    from hashaudit.checks import GROUP_BY_NAME

    rng = np.random.default_rng(23)
    keys = [b"crate-%d" % x for x in rng.integers(0, 20_000, size=40_000)]
    keys[::30] = [b"crate-1"] * len(keys[::30])
    path = tmp_path / "keys.txt"
    path.write_bytes(b"\n".join(keys) + b"\n")
    plan = AuditPlan(
        hashes=("murmur3_32", "fnv1a_64"), checks=tuple(GROUP_BY_NAME), shards=(4, 16), tag_bits=(7, None), seed=9
    )
    local = audit([path], plan)
    dist = audit_dask([str(path)], plan, workers=2, partition_bytes=60_000, prefix_bits=2)
    names = {c["name"] for h in report_dict(dist)["hashes"] for c in h["checks"]}
    assert {"growth_cost", "order_hazard", "tag_bits", "seed_spread", "neighbour_counter", "hot_keys"} <= names
    assert dist.run["partitions"] > 5 and _same(local, dist)


@pytest.mark.slow  # 8 s; the Dask engine's other tests stay fast
def test_normalised_row_groups_and_skipped_lines_are_counted_as_the_local_engine_counts_them(tmp_path):
    """Source stats (records, keys, skipped) are part of the report: byte ranges with bad lines skipped, and Parquet
    row groups with a normalisation, must count as the local reader does."""
    from pathlib import Path

    lines = tmp_path / "k.txt"
    lines.write_bytes(b"".join(b"k%d\n" % i if i % 97 else b"\xff%d\n" % i for i in range(20_000)))
    plan = AuditPlan(hashes=("xxh3_64",), buckets=(256,), checks=("buckets",), seed=1)
    skip = SourceOptions(on_bad_record="skip")
    local = audit([lines], plan, skip)
    dist = audit_dask([str(lines)], plan, skip, workers=2, partition_bytes=20_000, prefix_bits=1)
    assert dist.run["partitions"] > 3 and _same(local, dist)
    assert report_dict(dist)["sources"][0]["stats"]["records"] == 20_000
    sample = Path(__file__).resolve().parents[2] / "sample_keys" / "tracking_lookups.parquet"
    lowered = SourceOptions(columns=("parcel",), lowercase=True)
    local = audit([sample], plan, lowered)
    dist = audit_dask([str(sample)], plan, lowered, workers=2, prefix_bits=1)
    assert dist.run["partitions"] == 4 and _same(local, dist)
