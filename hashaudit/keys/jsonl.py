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
from hashaudit.keys.options import JSON_VALUES
from hashaudit.keys.records import RecordBatch, SourceStats, weight_problem
from hashaudit.settings import SettingError

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


class _BadRecord(Exception):
    """A line that cannot become a key: ``reason`` is its skip count's name, ``message`` the error to raise."""

    def __init__(self, reason: str, message: str) -> None:
        super().__init__(message)
        self.reason = reason
        self.message = message


def _weight(record: Any, path: list[str], name: str, line_no: int) -> float:
    """The number at ``path`` of a record, at least 0 and finite as a float; a one-line error naming the line."""
    label = ".".join(path)
    value = record
    for part in path:
        if not isinstance(value, dict) or part not in value:
            raise _BadRecord("bad_weight", f"{name} line {line_no}: no weight {label!r}")
        value = value[part]
    if isinstance(value, bool) or not isinstance(value, int | float):
        what = "is null" if value is None else f"is {_kind(value)}, not a number"
        raise _BadRecord("bad_weight", f"{name} line {line_no}: weight {label!r} {what}")
    try:
        number = float(value)
    except OverflowError:  # an integer beyond the float range
        raise _BadRecord("bad_weight", f"{name} line {line_no}: weight {label!r} is too large") from None
    problem = weight_problem(number)
    if problem is not None:
        raise _BadRecord("bad_weight", f"{name} line {line_no}: weight {label!r} {problem}")
    return number


def _key_value(
    text: str, start: int, body: str, decode: Any, path: list[str], field: str, name: str, line_no: int
) -> tuple[Any, Any]:
    """The record of one line and the value at ``path`` in it."""
    try:
        value, end = decode(text, start)
        if end != start + len(body):
            raise json.JSONDecodeError("Extra data", text, end)
    except json.JSONDecodeError as exc:
        raise _BadRecord("bad_json", f"{name} line {line_no}: not valid JSON: {exc.msg} (column {exc.colno})") from None
    except (ValueError, RecursionError) as exc:
        raise _BadRecord("bad_json", f"{name} line {line_no}: not valid JSON: {exc}") from None
    record = value
    for depth, part in enumerate(path):
        if not isinstance(value, dict):
            where = "the record" if depth == 0 else repr(".".join(path[:depth]))
            raise _BadRecord(
                "missing_field", f"{name} line {line_no}: no field {field!r}: {where} is {_kind(value)}, not an object"
            )
        if part not in value:
            raise _BadRecord("missing_field", f"{name} line {line_no}: no field {field!r} (missing {part!r})")
        value = value[part]
    return record, value


def _key_bytes(value: Any, field: str, name: str, line_no: int, as_json: bool = False) -> bytes:
    """:func:`value_bytes` (``as_json``: every value's compact JSON text, a string's quotes included), with a
    value nested too deeply to write back as JSON made a bad record."""
    try:
        if as_json:
            return json.dumps(value, separators=(",", ":"), ensure_ascii=False).encode("utf-8", "surrogatepass")
        return value_bytes(value)
    except RecursionError:  # json.loads stopped just short of the limit that json.dumps then reached
        raise _BadRecord("bad_json", f"{name} line {line_no}: the value of {field!r} is nested too deeply") from None


def _mixed_message(name: str, field: str, line_no: int, seen: dict[bool, int]) -> str:
    here, before = (
        ("a string", "other values") if seen[True] == line_no else ("a value that is not a string", "strings")
    )
    return (
        f"{name} line {line_no}: the field {field!r} holds {here} here and {before} before (first at line "
        f'{seen[not (seen[True] == line_no)]}): say whether 1 and "1" are one key with --json-values text, or two with '
        "--json-values json"
    )


def read_jsonl(
    stream: Readable,
    name: str,
    field: str,
    stats: SourceStats,
    batch_keys: int = 1 << 20,
    weight: str | None = None,
    skip_bad: bool = False,
    max_key_bytes: int | None = None,
    json_values: str = "auto",
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
    skip_bad : bool
        Drop a line that is not UTF-8 JSON, lacks the field or has no valid weight, counting it in ``stats`` as
        ``bad_utf8``, ``bad_json``, ``missing_field``, ``bad_weight`` or ``too_long``, instead of raising.
    max_key_bytes : int, optional
        Longest line accepted (see :func:`hashaudit.keys.lines.read_lines`).
    json_values : {"auto", "text", "json"}
        How a value becomes key bytes. ``text``: a string's UTF-8 content, any other value its JSON text, so ``1``
        and ``"1"`` are the same key. ``json``: every value's compact JSON text, so they differ (``"1"`` keeps its
        quotes). ``auto`` (the default): as ``text`` while the field holds only strings or only other values, and
        an error at the first line that mixes the two, since the two readings then give different keys.

    Yields
    ------
    RecordBatch
        Keys numbered by line.

    Raises
    ------
    InputError
        Unless ``skip_bad``: a line that is not JSON, a record without the field or with an invalid weight (naming
        the line).
    """
    if json_values not in JSON_VALUES:
        raise SettingError("json_values", f"takes {' or '.join(JSON_VALUES)}, not {json_values!r}")
    as_json = json_values == "json"
    seen = {True: 0, False: 0}  # the first line holding a string value, and a value of another kind (0: none yet)
    path = split_field_path(field)
    weight_path = split_field_path(weight) if weight is not None else None
    decode = json.JSONDecoder().raw_decode
    lines = read_lines(
        stream,
        name,
        check_text=True,
        batch_keys=batch_keys,
        hint=None,
        skip_bad=skip_bad,
        stats=stats,
        max_key_bytes=max_key_bytes,
    )
    for block in lines:
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
            line_no = block.record_of(offset)
            try:
                start = len(text) - len(text.lstrip(_JSON_SPACE))
                record, value = _key_value(text, start, body, decode, path, field, name, line_no)
                if value is None:
                    stats.skip("null")
                    continue
                key = _key_bytes(value, field, name, line_no, as_json)
                if json_values == "auto":
                    kind = isinstance(value, str)
                    if not seen[kind]:
                        seen[kind] = line_no
                        if seen[not kind]:
                            raise InputError(_mixed_message(name, field, line_no, seen))
                if weight_path is not None:
                    weights.append(_weight(record, weight_path, name, line_no))
            except _BadRecord as bad:
                if not skip_bad:
                    raise InputError(bad.message) from None
                stats.skip(bad.reason)
                continue
            keys.append(key)
            records.append(line_no)
        stats.records += len(texts) - blank
        stats.skip("blank_line", blank)
        if keys:
            yield RecordBatch(
                KeyBatch.from_keys(keys),
                records[0],
                np.asarray(records, dtype=np.int64),
                np.asarray(weights, dtype=np.float64) if weight_path is not None else None,
            )
