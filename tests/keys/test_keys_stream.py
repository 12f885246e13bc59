"""The KeyStream contract: lazy, iterate once, a JSON-able description, counts, and refusals of bad options."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import hashaudit.keys as keys_package
from hashaudit.errors import InputError, UsageError
from hashaudit.keys import SourceOptions, SourceStats, open_keys


def test_exported_names():
    assert keys_package.__all__ == sorted(keys_package.__all__)
    assert set(keys_package.__all__) == {
        "KEY_FORMATS",
        "SOURCE_FORMATS",
        "KeyBatch",
        "KeyStream",
        "SourceOptions",
        "SourceStats",
        "open_keys",
    }
    for name in keys_package.__all__:
        assert getattr(keys_package, name) is not None
    with pytest.raises(AttributeError):
        keys_package.no_such_name  # noqa: B018


def test_key_batch_import_stays_light():
    # The hash registry imports KeyBatch; that must not pull in numba or pyarrow.
    code = "import sys, hashaudit.keys.batch; print(sorted(m for m in ('numba', 'pyarrow') if m in sys.modules))"
    repo = str(Path(__file__).resolve().parents[2])
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [repo, os.environ.get("PYTHONPATH")])))
    out = subprocess.run([sys.executable, "-c", code], check=True, capture_output=True, text=True, env=env).stdout
    assert out.strip() == "[]"


def test_reading_is_lazy_and_happens_once(tmp_path):
    path = tmp_path / "keys.txt"
    path.write_bytes(b"a\nb\n")
    stream = open_keys(path)
    assert stream.stats == SourceStats()
    path.write_bytes(b"c\n")  # not read yet: the stream sees the file as it is when iterated
    assert [k for b in stream for k in b.to_list()] == [b"c"]
    with pytest.raises(RuntimeError, match="already iterated"):
        iter(stream)


def test_description_is_json_and_complete(tmp_path):
    path = tmp_path / "k.csv"
    path.write_bytes(b"a,b\n1,2\n")
    stream = open_keys(path, SourceOptions(columns=("b", "a"), key_format="int", strip=True))
    description = json.loads(json.dumps(stream.description))
    assert description == {
        "source": str(path),
        "format": "csv",
        "compression": None,
        "key_format": "int",
        "columns": ["b", "a"],
        "join": "|",
        "field": None,
        "weight_column": None,
        "integers": None,
        "delimiter": ",",
        "header": True,
        "pattern": None,
        "strip": True,
        "lowercase": False,
        "skip_empty": False,
        "keep_cr": False,
        "raw_bytes": False,
        "on_bad_record": "fail",
        "max_key_bytes": 16 << 20,
        "json_values": None,
    }
    assert stream.size_bytes == 8


def test_stats_and_progress(tmp_path):
    path = tmp_path / "keys.txt"
    path.write_bytes(b"".join(b"%d\n" % i for i in range(1000)))
    stream = open_keys(path, SourceOptions(batch_keys=100))
    seen = []
    for _batch in stream:
        seen.append(stream.stats.bytes_read)
        assert stream.stats.keys == 100 * len(seen)
    assert seen[-1] == stream.size_bytes == path.stat().st_size
    assert stream.stats == SourceStats(
        records=1000, keys=1000, empty_keys=0, skipped={}, bytes_read=path.stat().st_size
    )


@pytest.mark.parametrize(
    ("options", "message"),
    [
        (SourceOptions(format="xml"), "unknown source format 'xml'; choose one of auto, lines, csv, tsv, jsonl"),
        (SourceOptions(key_format="b64"), "unknown key format 'b64'"),
        (SourceOptions(pattern="("), "not a valid regular expression"),
        (SourceOptions(pattern="x"), "has no group"),
        (SourceOptions(batch_keys=0), "batch_keys must be a positive integer"),
        (SourceOptions(field="id"), "field applies to JSON Lines sources"),
        (SourceOptions(delimiter=";"), "delimiter applies to csv and tsv sources"),
        (SourceOptions(format="tsv", delimiter=""), "must be one ASCII character"),
    ],
)
def test_bad_options_are_usage_errors(tmp_path, options, message):
    path = tmp_path / "keys.txt"
    path.write_bytes(b"a\n")
    with pytest.raises(UsageError, match=message):
        open_keys(path, options)


def test_forced_format_overrides_suffix(tmp_path):
    path = tmp_path / "looks.csv"
    path.write_bytes(b"a,b\n")
    assert [k for b in open_keys(path, SourceOptions(format="lines")) for k in b.to_list()] == [b"a,b"]


def test_errors_are_one_line(tmp_path):
    path = tmp_path / "bad.jsonl"
    path.write_bytes(b'{"id": [1,\n')
    with pytest.raises(InputError) as info:
        list(open_keys(path, SourceOptions(field="id")))
    assert "\n" not in str(info.value)
