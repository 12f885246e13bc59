"""Parquet and Arrow IPC sources: zero-copy strings, integers as 8-byte words, composite keys, nulls, weights."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from hashaudit.errors import InputError, UsageError
from hashaudit.keys import open_keys
from hashaudit.keys.options import SourceOptions


@pytest.fixture()
def table() -> pa.Table:
    return pa.table(
        {
            "parcel": pa.array(["P1", "P2", None, "P4"], pa.large_string()),
            "berth": pa.array([64, -1, 128, 2**40], pa.int64()),
            "bytes": pa.array([10.0, 2.0, 3.0, 0.5]),
        }
    )


def _keys(path, **options):
    stream = open_keys(path, SourceOptions(**options))
    batches = list(stream)
    return [k for b in batches for k in b.to_list()], batches, stream


@pytest.mark.parametrize("suffix", [".parquet", ".arrow"])
def test_strings_integers_composites_and_nulls(tmp_path, table, suffix):
    path = tmp_path / f"keys{suffix}"
    if suffix == ".parquet":
        pq.write_table(table, path, row_group_size=2)
    else:
        with pa.OSFile(str(path), "wb") as sink, pa.ipc.new_file(sink, table.schema) as writer:
            writer.write_table(table, max_chunksize=3)
    keys, batches, stream = _keys(path, columns=("parcel",), weight_column="bytes")
    assert keys == [b"P1", b"P2", b"P4"] and stream.stats.skipped == {"null": 1}
    assert np.concatenate([b.weights for b in batches]).tolist() == [10.0, 2.0, 0.5]
    keys, _, _ = _keys(path, columns=("berth",))
    assert keys == [int(v).to_bytes(8, "little", signed=True) for v in (64, -1, 128, 2**40)]
    keys, _, _ = _keys(path, columns=("berth",), integers="decimal")
    assert keys == [b"64", b"-1", b"128", b"1099511627776"]
    keys, _, _ = _keys(path, columns=("1", "parcel"), integers="decimal", join="/")
    assert keys == [b"64/P1", b"-1/P2", b"1099511627776/P4"]  # the null parcel drops its row


def test_arrow_stream_format_and_errors(tmp_path, table):
    path = tmp_path / "keys.arrow"
    with pa.OSFile(str(path), "wb") as sink, pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)
    keys, _, _ = _keys(path, columns=("parcel",))
    assert keys == [b"P1", b"P2", b"P4"]
    with pytest.raises(UsageError, match="no column 'nope'"):
        _keys(path, columns=("nope",))
    broken = tmp_path / "broken.parquet"
    broken.write_bytes(b"PAR1 not really")
    with pytest.raises(InputError, match="broken.parquet"):
        _keys(broken)


def test_zero_copy_for_large_string_columns(tmp_path):
    path = tmp_path / "big.parquet"
    pq.write_table(pa.table({"k": pa.array([f"key-{i}" for i in range(100_000)], pa.large_string())}), path)
    keys, batches, stream = _keys(path, batch_keys=30_000)
    assert len(keys) == 100_000 and keys[99_999] == b"key-99999" and stream.stats.records == 100_000
    assert [len(b) for b in batches] == [30_000, 30_000, 30_000, 10_000]
