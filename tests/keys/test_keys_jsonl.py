"""JSON Lines: a field by dotted path, values turned into key bytes, errors that name the line."""

from __future__ import annotations

import struct

import pytest

from hashaudit.errors import InputError
from hashaudit.keys import SourceOptions, open_keys
from hashaudit.keys import lines as lines_module

RECORDS = (
    b'{"user": {"id": "u-1", "n": 1}}\n'
    b'{"user": {"id": 42}, "other": true}\n'
    b"\n"
    b'{"user": {"id": null}}\n'
    b'{"user": {"id": "\\u00e9\\t\\"q\\""}}\r\n'
    b'{"user": {"id": {"b": [1, 2.5, false]}}}\n'
    b'{"user": {"id": -7}}\n'
    b'{"user": {"id": 1.10}}'
)


def write(tmp_path, data: bytes, name: str = "events.jsonl"):
    path = tmp_path / name
    path.write_bytes(data)
    return path


def read_all(path, **options) -> list[bytes]:
    return [k for batch in open_keys(path, SourceOptions(**options)) for k in batch.to_list()]


def test_dotted_path_and_value_bytes(tmp_path):
    # the records mix strings, numbers and objects: text says each value's text is its key
    stream = open_keys(write(tmp_path, RECORDS), SourceOptions(field="user.id", json_values="text"))
    keys = [k for b in stream for k in b.to_list()]
    assert keys == [
        b"u-1",
        b"42",  # integers as decimal text
        'é\t"q"'.encode(),  # strings as UTF-8
        b'{"b":[1,2.5,false]}',  # anything else as compact JSON
        b"-7",
        b"1.1",
    ]
    assert stream.stats.records == 7
    assert stream.stats.keys == 6
    assert stream.stats.skipped == {"blank_line": 1, "null": 1}
    assert stream.description["format"] == "jsonl"
    assert stream.description["field"] == "user.id"


def test_top_level_field_and_small_blocks(tmp_path, monkeypatch):
    data = b"".join(b'{"k": "key-%d"}\n' % i for i in range(500))
    expected = [b"key-%d" % i for i in range(500)]
    assert read_all(write(tmp_path, data), field="k") == expected
    monkeypatch.setattr(lines_module, "BLOCK_BYTES", 11)
    assert read_all(write(tmp_path, data), field="k", batch_keys=7) == expected


def test_integer_values_with_int_key_format(tmp_path):
    path = write(tmp_path, b'{"id": 1}\n{"id": -1}\n{"id": "18446744073709551615"}\n')
    keys = read_all(path, field="id", key_format="int")
    assert keys == [struct.pack("<Q", 1), struct.pack("<Q", 2**64 - 1), struct.pack("<Q", 2**64 - 1)]


def test_bad_json_names_the_line(tmp_path):
    path = write(tmp_path, b'{"id": 1}\n\n{"id": 2,}\n')
    with pytest.raises(InputError, match=r"events\.jsonl line 3: not valid JSON: .*\(column \d+\)$"):
        read_all(path, field="id")


def test_missing_field_names_path_and_line(tmp_path):
    path = write(tmp_path, b'{"a": {"b": 1}}\n{"a": {"c": 1}}\n')
    with pytest.raises(InputError, match=r"events\.jsonl line 2: no field 'a\.b' \(missing 'b'\)"):
        read_all(path, field="a.b")


def test_path_through_a_non_object(tmp_path):
    path = write(tmp_path, b'{"a": [1]}\n')
    with pytest.raises(InputError, match=r"line 1: no field 'a\.b': 'a' is an array, not an object"):
        read_all(path, field="a.b")
    path = write(tmp_path, b"[1, 2]\n")
    with pytest.raises(InputError, match=r"line 1: no field 'a': the record is an array, not an object"):
        read_all(path, field="a")


def test_error_after_skipped_records_names_the_right_line(tmp_path):
    path = write(tmp_path, b'{"id": null}\n\n{"id": "12"}\n{"id": "x"}\n')
    with pytest.raises(InputError, match=r"events\.jsonl line 4: not a decimal integer \(1 byte\)$"):
        read_all(path, field="id", key_format="int")


def test_field_is_required(tmp_path):
    path = write(tmp_path, b'{"id": 1}\n')
    with pytest.raises(InputError, match="--field is required for JSON Lines"):
        open_keys(path)
    with pytest.raises(InputError, match="empty part"):
        open_keys(path, SourceOptions(field="a..b"))


def test_only_nulls_is_no_keys(tmp_path):
    path = write(tmp_path, b'{"id": null}\n{"id": null}\n')
    with pytest.raises(InputError, match=r"events\.jsonl: no keys \(2 records read; skipped: null 2\)"):
        read_all(path, field="id")


def test_invalid_utf8_is_refused(tmp_path):
    path = write(tmp_path, b'{"id": "ok"}\n{"id": "\xff"}\n')
    with pytest.raises(InputError, match=r"events\.jsonl line 2: not valid UTF-8"):
        read_all(path, field="id")


def test_ndjson_suffix_and_compression(tmp_path):
    import gzip

    path = write(tmp_path, gzip.compress(b'{"id": "a"}\n{"id": "b"}\n', mtime=0), name="e.ndjson.gz")
    assert read_all(path, field="id") == [b"a", b"b"]


def test_surrounding_whitespace_and_trailing_garbage(tmp_path):
    assert read_all(write(tmp_path, b' \t{"id": "a"} \r\n'), field="id") == [b"a"]
    path = write(tmp_path, b'{"id": "a"}\n  {"id": 1} x\n')
    with pytest.raises(InputError, match=r"line 2: not valid JSON: Extra data \(column 12\)$"):
        read_all(path, field="id")
    path = write(tmp_path, b'{"id": "a"}\n\x0c{"id": 1}\n')  # form feed is not JSON whitespace (RFC 8259)
    with pytest.raises(InputError, match=r"line 2: not valid JSON: Expecting value \(column 1\)$"):
        read_all(path, field="id")
