"""Reproducers of the crashes, hangs and wrong messages the hostile inputs found, one test each — all fixed now:
a corrupt Parquet page or Arrow batch, a weight column with an empty header, weights all zero, --distinct-memory 0,
a subnormal shard weight, the largest shard count, --format sql, and the birthday bound of very wide hashes or tiny
load factors (which looped forever)."""

from __future__ import annotations

import signal

import pyarrow as pa
import pyarrow.feather as feather
import pyarrow.parquet as pq
import pytest
from hostile_cli import QUICK, expect_clean, run


def test_corrupt_parquet_page_names_the_file(tmp_path):
    whole = tmp_path / "whole.parquet"
    pq.write_table(pa.table({"k": [f"key-{i}" for i in range(5000)]}), whole, compression="snappy")
    data = whole.read_bytes()
    broken = tmp_path / "broken.parquet"
    broken.write_bytes(data[:100] + b"\xff" * 200 + data[300:])  # the footer is intact, a data page is not
    code, line = expect_clean(run(["audit", str(broken), *QUICK]))
    assert code == 2
    assert str(broken) in line


def test_corrupt_arrow_batch_names_the_file(tmp_path):
    whole = tmp_path / "whole.arrow"
    feather.write_feather(pa.table({"k": [f"key-{i}" for i in range(5000)]}), whole)
    data = whole.read_bytes()
    broken = tmp_path / "broken.arrow"
    broken.write_bytes(data[:200] + b"\xff" * 300 + data[500:])
    code, line = expect_clean(run(["audit", str(broken), *QUICK]))
    assert code == 2
    assert str(broken) in line


def test_csv_weight_column_with_an_empty_header_name(tmp_path):
    source = tmp_path / "w.csv"
    source.write_bytes(b"k,\na,1\nb,2\n")
    result = run(["audit", str(source), *QUICK, "-c", "k", "--weight-column", "1", "--shards", "2"])
    code, _ = expect_clean(result, names=str(source))
    assert code in (0, 1)


def test_all_weights_zero(tmp_path):
    source = tmp_path / "w.csv"
    source.write_bytes(b"k,w\na,0\nb,0\n")
    result = run(["audit", str(source), *QUICK, "-c", "k", "--weight-column", "w", "--shards", "2"])
    code, line = expect_clean(result, names=str(source))
    assert code in (0, 1) or "weight" in line


def test_distinct_memory_zero(tmp_path):
    source = tmp_path / "keys.txt"
    source.write_bytes(b"a\nb\n")
    code, line = expect_clean(run(["audit", str(source), *QUICK, "--distinct-memory", "0"]))
    assert code == 2
    assert "--distinct-memory" in line or "memory budget" in line


def test_subnormal_shard_weight(tmp_path):
    source = tmp_path / "keys.txt"
    source.write_bytes(b"".join(b"k%d\n" % i for i in range(500)))
    args = ["audit", str(source), *QUICK, "--shards", "2", "--shard-scheme", "rendezvous", "--shard-weights"]
    code, line = expect_clean(run([*args, "1e-320,1"]))
    assert code in (0, 1) or "--shard-weights" in line


def test_largest_documented_shard_count(tmp_path):
    source = tmp_path / "keys.txt"
    source.write_bytes(b"".join(b"k%d\n" % i for i in range(500)))
    code, line = expect_clean(run(["audit", str(source), *QUICK, "--shards", "65536", "--checks", "shards"]))
    assert code in (0, 1) or line.replace(",", "").endswith("not 65536")


def test_format_sql_as_documented(tmp_path):
    import sqlite3

    database = tmp_path / "keys.data"  # a suffix that does not say "database"
    with sqlite3.connect(database) as connection:
        connection.execute("CREATE TABLE t (k TEXT)")
        connection.executemany("INSERT INTO t VALUES (?)", [(f"k{i}",) for i in range(100)])
    connection.close()
    code, _ = expect_clean(run(["audit", str(database), "--format", "sql", "--db-table", "t", "-c", "k", *QUICK]))
    assert code in (0, 1)


class _TookTooLong(Exception):
    pass


def _plan_within(args: list[str], seconds: float = 5.0) -> tuple[int, str, str]:
    """Run ``hashaudit plan`` in-process, interrupted by SIGALRM after ``seconds`` (a plan takes well under one)."""

    def expire(signum, frame):  # type: ignore[no-untyped-def]
        raise _TookTooLong(f"plan {' '.join(args)} still running after {seconds} s")

    previous = signal.signal(signal.SIGALRM, expire)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        return run(["plan", *args])
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


needs_alarm = pytest.mark.skipif(not hasattr(signal, "setitimer"), reason="needs SIGALRM")


@needs_alarm
def test_plan_with_a_wide_hash_finishes():
    code, _ = expect_clean(_plan_within(["-n", "1000", "-m", "1000", "--hash-width", "160"]), usage_ok=True)
    assert code == 0


@needs_alarm
def test_plan_with_a_tiny_load_factor_finishes():
    code, _ = expect_clean(_plan_within(["-n", "1000", "--load", "1e-40"]), usage_ok=True)
    assert code in (0, 2)


@needs_alarm
def test_plan_with_a_128_bit_hash_finishes():
    # The widest hash the registry has: the birthday bound of 2^128 values is still computed exactly.
    code, _ = expect_clean(_plan_within(["-n", "1000", "-m", "1000", "--hash-width", "128"]))
    assert code == 0
