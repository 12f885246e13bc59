"""Keys from one field of a JSON Lines file (one JSON value per line).

Lines come from the same block splitter as plain key files (so line numbers and memory behave the same);
each line is parsed with :func:`json.loads`, one Python call per record. Correct messages matter more here
than speed: a key dump this large belongs in a plain key file or a delimited column.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from typing import Any

import numpy as np

from hashaudit.errors import InputError
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.lines import read_lines
from hashaudit.keys.open import Readable
from hashaudit.keys.records import RecordBatch, SourceStats

_JSON_SPACE = " \t\r\n"  # whitespace as RFC 8259 section 2 defines it
_JSON_KINDS = {dict: "an object", list: "an array", str: "a string", bool: "a boolean", float: "a number"}


def split_field_path(field: str) -> list[str]:
    """``"user.id"`` -> ``["user", "id"]``; empty parts are refused."""
    parts = field.split(".")
    if not all(parts):
        raise InputError(f"field path {field!r} has an empty part; write it as names joined by dots (user.id)")
    return parts


def value_bytes(value: Any) -> bytes:
    """The key bytes of a JSON value.

    A string gives its UTF-8 bytes (lone surrogates from ``\\ud800`` escapes are kept as their 3-byte
    forms), an integer its decimal text, anything else (object, array, boolean, float) its compact JSON text
    as Python's :mod:`json` writes it (``{"a":1}``, ``[1,2]``, ``true``, ``1.5``).
    """
    if isinstance(value, str):
        return value.encode("utf-8", "surrogatepass")
    if isinstance(value, int) and not isinstance(value, bool):
        return str(value).encode("ascii")
    return json.dumps(value, separators=(",", ":"), ensure_ascii=False).encode("utf-8", "surrogatepass")


def _kind(value: Any) -> str:
    if value is None:
        return "null"
    return _JSON_KINDS.get(type(value), "a number")


def _weight(record: Any, path: list[str], name: str, line_no: int) -> float:
    """The number at ``path`` of a record, at least 0; a one-line error naming the line otherwise."""
    value = record
    for part in path:
        if not isinstance(value, dict) or part not in value:
            raise InputError(f"{name} line {line_no}: no weight {'.'.join(path)!r}")
        value = value[part]
    if isinstance(value, bool) or not isinstance(value, int | float) or not (0 <= value < float("inf")):
        raise InputError(
            f"{name} line {line_no}: weight {'.'.join(path)!r} is {_kind(value)}, not a number of at least 0"
        )
    return float(value)


def read_jsonl(
    stream: Readable, name: str, field: str, stats: SourceStats, batch_keys: int = 1 << 20, weight: str | None = None
) -> Iterator[RecordBatch]:
    """Yield the value at ``field`` (a dotted path) of every record of a JSON Lines stream.

    Parameters
    ----------
    stream : binary file-like
        The decompressed source.
    name : str
        How messages name the source.
    field : str
        Dotted path into each record (``user.id``).
    stats : SourceStats
        ``records`` counts JSON values read; blank lines are skipped as ``blank_line``, null values as
        ``null``.
    batch_keys : int
        Most lines per batch.
    weight : str, optional
        Dotted path of each record's weight (a number of at least 0).

    Yields
    ------
    RecordBatch
        Keys numbered by line.

    Raises
    ------
    InputError
        A line that is not JSON, or a record without the field (both naming the line).
    """
    path = split_field_path(field)
    weight_path = split_field_path(weight) if weight is not None else None
    decode = json.JSONDecoder().raw_decode
    for block in read_lines(stream, name, check_text=True, batch_keys=batch_keys, hint=None):
        # The block is valid UTF-8 (read_lines checked it) and split at LFs: decode it once, not line by line.
        texts = b"\n".join(block.keys.to_list()).decode("utf-8").split("\n")
        keys = []
        records = []
        weights: list[float] = []
        blank = 0
        for offset, text in enumerate(texts):
            body = text.strip(_JSON_SPACE)
            if not body:
                blank += 1
                continue
            line_no = block.first_record + offset
            try:
                start = len(text) - len(text.lstrip(_JSON_SPACE))
                value, end = decode(text, start)
                if end != start + len(body):
                    raise json.JSONDecodeError("Extra data", text, end)
            except json.JSONDecodeError as exc:
                raise InputError(f"{name} line {line_no}: not valid JSON: {exc.msg} (column {exc.colno})") from None
            except (ValueError, RecursionError) as exc:
                raise InputError(f"{name} line {line_no}: not valid JSON: {exc}") from None
            record = value
            for depth, part in enumerate(path):
                if not isinstance(value, dict):
                    where = "the record" if depth == 0 else repr(".".join(path[:depth]))
                    raise InputError(
                        f"{name} line {line_no}: no field {field!r}: {where} is {_kind(value)}, not an object"
                    )
                if part not in value:
                    raise InputError(f"{name} line {line_no}: no field {field!r} (missing {part!r})")
                value = value[part]
            if value is None:
                stats.skip("null")
                continue
            keys.append(value_bytes(value))
            records.append(line_no)
            if weight_path is not None:
                weights.append(_weight(record, weight_path, name, line_no))
        stats.records += len(texts) - blank
        stats.skip("blank_line", blank)
        if keys:
            yield RecordBatch(
                KeyBatch.from_keys(keys),
                records[0],
                np.asarray(records, dtype=np.int64),
                np.asarray(weights, dtype=np.float64) if weight_path is not None else None,
            )
