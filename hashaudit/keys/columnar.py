"""Keys from columnar files: Parquet and Arrow IPC (file or stream format), batch by batch with pyarrow.

A key column of strings or binary goes to the hash as its bytes without a copy (Arrow's binary layout is
``KeyBatch``'s). An integer column is hashed as 8-byte little-endian words by default — what an integer-keyed table
hashes — or as decimal text with ``integers="decimal"``. Other types (dates, floats, decimals…) are hashed as the
text pyarrow casts them to. Several columns make a composite key, joined with ``join``. A record with a null in any
key column is counted (``null``) and skipped. A null, negative or infinite weight is an error naming its row (not
its value), or with ``on_bad_record="skip"`` makes its row skipped and counted as ``bad_weight``.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from hashaudit.errors import InputError, UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.options import SourceOptions
from hashaudit.keys.records import RecordBatch, SourceStats, arrow_reason, weight_problem
from hashaudit.settings import SettingError

COLUMNAR_SUFFIXES = {".parquet": "parquet", ".pq": "parquet", ".arrow": "arrow", ".feather": "arrow", ".ipc": "arrow"}


def _open_batches(
    path: str, fmt: str, columns: list[str], batch_keys: int, row_group: int | None = None
) -> tuple[pa.Schema, Iterator, int]:
    """The file's schema, an iterator of its record batches (only ``columns`` for Parquet; only those of
    ``row_group`` when given) and the number of rows before the first of them."""
    try:
        if fmt == "parquet":
            import pyarrow.parquet as pq

            parquet = pq.ParquetFile(path)
            schema = parquet.schema_arrow
            wanted = _resolve(columns, schema, path)  # name the missing column before reading
            if row_group is None:
                return schema, parquet.iter_batches(batch_size=batch_keys, columns=wanted), 0
            before = sum(parquet.metadata.row_group(g).num_rows for g in range(row_group))
            groups = [row_group] if row_group < parquet.num_row_groups else []
            return schema, parquet.iter_batches(batch_size=batch_keys, columns=wanted, row_groups=groups), before
        if row_group is not None:
            raise UsageError(f"{path}: row groups are Parquet's, not {fmt}'s")
        source = pa.memory_map(path)
        try:
            reader = pa.ipc.open_file(source)
            return reader.schema, (reader.get_batch(i) for i in range(reader.num_record_batches)), 0
        except pa.ArrowInvalid:
            source = pa.memory_map(path)
            stream = pa.ipc.open_stream(source)
            return stream.schema, iter(stream), 0
    except (pa.ArrowException, OSError) as exc:
        raise InputError(f"{path}: cannot read as {fmt}: {arrow_reason(exc)}") from None


def _resolve(columns: list[str], schema: pa.Schema, path: str) -> list[str]:
    """Column names from names or 0-based indices; a one-line error lists the columns the file has."""
    names = schema.names
    out = []
    for column in columns:
        if column in names:
            out.append(column)
        elif column.isdigit() and int(column) < len(names):
            out.append(names[int(column)])
        else:
            listed = ", ".join(names[:20]) + (" …" if len(names) > 20 else "")
            raise UsageError(f"{path}: no column {column!r} (it has: {listed})")
    return out


def _as_binary(array: pa.Array, integers: str) -> pa.Array:
    """One key column as ``large_binary``: bytes as they are, integers as 8-byte little-endian or decimal text."""
    kind = array.type
    if pa.types.is_large_binary(kind):
        return array
    if pa.types.is_binary(kind) or pa.types.is_string(kind) or pa.types.is_fixed_size_binary(kind):
        return array.cast(pa.large_binary())
    if pa.types.is_large_string(kind):
        return array.view(pa.large_binary())
    if pa.types.is_dictionary(kind):
        return _as_binary(array.cast(kind.value_type), integers)
    if pa.types.is_integer(kind) and integers == "le64":
        values = array.fill_null(0).to_numpy(zero_copy_only=False).astype("<i8", copy=False)
        words = np.ascontiguousarray(values).view(np.uint8)
        offsets = np.arange(0, 8 * len(values) + 1, 8, dtype=np.int64)
        return pa.LargeBinaryArray.from_buffers(
            pa.large_binary(), len(values), [None, pa.py_buffer(offsets), pa.py_buffer(words)]
        )
    return array.cast(pa.large_string()).view(pa.large_binary())


def arrow_records(
    batch: pa.RecordBatch,
    key_positions: list[int],
    weight_position: int | None,
    options: SourceOptions,
    first_row: int,
    stats: SourceStats,
    name: str,
) -> RecordBatch | None:
    """One Arrow record batch as keys (composite keys joined with ``options.join``), with rows that have a null
    key counted and skipped, and the weights; None when no key is left. Shared by Parquet, Arrow IPC and ADBC."""
    separator = pa.scalar(options.join.encode("utf-8"), pa.large_binary())
    parts = [_as_binary(batch.column(k), options.integers) for k in key_positions]
    valid = None
    for part in parts:
        if part.null_count:
            mask = part.is_valid()
            valid = mask if valid is None else pc.and_(valid, mask)
    joined = parts[0] if len(parts) == 1 else pc.binary_join_element_wise(*parts, separator)
    weights = None
    bad = None
    if weight_position is not None:
        column = batch.column(weight_position)
        label = batch.schema.names[weight_position]
        numeric = pa.types.is_integer(column.type) or pa.types.is_floating(column.type)
        skip_bad = options.on_bad_record == "skip"
        if not numeric:
            raise InputError(f"{name}: weight column {label!r} holds {column.type}, not numbers")
        weights = column.to_numpy(zero_copy_only=False).astype(np.float64)  # a null becomes NaN
        with np.errstate(invalid="ignore"):
            bad = ~np.isfinite(weights) | (weights < 0)
        if not bad.any():
            bad = None
        elif not skip_bad:
            # the row and what is wrong, never the value (a weight is a field of the record)
            i = int(np.flatnonzero(bad)[0])
            why = "is null" if not column[i].is_valid else weight_problem(float(weights[i]))
            raise InputError(f"{name} row {first_row + i}: weight {label!r} {why}")
    numbers = None
    if valid is not None or bad is not None:
        has_key = np.ones(batch.num_rows, dtype=bool) if valid is None else valid.to_numpy(zero_copy_only=False)
        keep = np.asarray(has_key, dtype=bool)
        stats.skip("null", int((~keep).sum()))
        if bad is not None:
            # A row with a bad weight is dropped like a row with a null key, but counted apart.
            stats.skip("bad_weight", int(np.count_nonzero(bad & keep)))
            keep = keep & ~bad
        joined = joined.filter(pa.array(keep))
        numbers = first_row + np.flatnonzero(keep).astype(np.int64)
        weights = None if weights is None else weights[keep]
    stats.records += batch.num_rows
    if not len(joined):
        return None
    return RecordBatch(KeyBatch.from_arrow(joined), int(numbers[0]) if numbers is not None else first_row, numbers,
                       weights)  # fmt: skip


def read_columnar(
    path: str, fmt: str, options: SourceOptions, stats: SourceStats, row_group: int | None = None
) -> Iterator[RecordBatch]:
    """Yield the key column(s) of a Parquet or Arrow IPC file (of one Parquet row group when ``row_group`` is given,
    numbered by the file's rows).

    Parameters
    ----------
    path : str
        A file (memory-mapped for Arrow IPC; Parquet reads row groups as it goes).
    fmt : {"parquet", "arrow"}
    options : SourceOptions
        Uses ``columns`` (default: the first column), ``join``, ``integers``, ``weight`` and ``batch_keys``.
    stats : SourceStats
        ``records`` counts rows; rows with a null key are skipped as ``null``.
    """
    wanted = list(options.columns or ("0",))
    schema, batches, rows = _open_batches(
        path, fmt, wanted + ([options.weight_column] if options.weight_column else []), options.batch_keys, row_group
    )
    columns = _resolve(wanted, schema, path)
    weight = _resolve([options.weight_column], schema, path)[0] if options.weight_column else None
    if weight is not None and weight in columns:
        raise SettingError("weight_column", f"{options.weight_column!r} is also a key column")
    try:
        for batch in batches:
            key_positions = [batch.schema.get_field_index(c) for c in columns]
            weight_position = batch.schema.get_field_index(weight) if weight is not None else None
            records = arrow_records(batch, key_positions, weight_position, options, rows + 1, stats, path)
            if records is not None:
                yield records
            rows += batch.num_rows
    except (pa.ArrowException, OSError) as exc:
        raise InputError(f"{path}: {arrow_reason(exc)} (after row {rows})") from None
