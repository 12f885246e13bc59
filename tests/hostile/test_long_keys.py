"""Memory that followed key length: a key is held to --max-key-bytes as it is read, devices that never end are
refused, and the deep checks see a long sampled key cut to its two ends."""

from __future__ import annotations

import io
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from hostile_cli import QUICK, expect_clean, read_report, run

from hashaudit.errors import InputError
from hashaudit.keys import SourceOptions, open_keys
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.lines import read_lines
from hashaudit.keys.records import SourceStats
from hashaudit.stats.sample import LONG_KEY_END_BYTES, KeySample

SECRET = b"s3cret-"  # a key's content must never reach a message


def _lines(data: bytes, block: int, limit: int, skip: bool) -> tuple[list[tuple[int, bytes]], SourceStats]:
    stats = SourceStats()
    out = []
    for records in read_lines(
        io.BytesIO(data), "k.txt", block_bytes=block, max_key_bytes=limit, skip_bad=skip, stats=stats
    ):
        out += [(records.record_of(i), key) for i, key in enumerate(records.keys.to_list())]
        stats.records += len(records.keys)
    return out, stats


@pytest.mark.parametrize("block", [7, 16, 64, 1 << 16])
def test_long_lines_are_skipped_at_any_block_size_and_the_rest_keep_their_numbers(block: int) -> None:
    data = b"a\nbb\n" + SECRET * 20 + b"\nccc\n" + b"y" * 30 + b"\n" + b"d" * 20 + b"\n" + b"e" * 25
    keys, stats = _lines(data, block, 20, skip=True)
    assert keys == [(1, b"a"), (2, b"bb"), (4, b"ccc"), (6, b"d" * 20)]
    assert stats.skipped == {"too_long": 3}
    assert stats.records == 7


@pytest.mark.parametrize("block", [7, 64, 1 << 16])
def test_the_first_long_line_is_an_error_naming_its_line_not_its_content(block: int) -> None:
    data = b"a\nbb\n" + SECRET * 20 + b"\nccc\n"
    with pytest.raises(InputError) as caught:
        _lines(data, block, 20, skip=False)
    message = str(caught.value)
    assert message.startswith("k.txt line 3: a key of more than 20 bytes")
    assert "--max-key-bytes" in message and "s3cret" not in message


def test_a_key_at_the_limit_is_kept() -> None:
    keys, stats = _lines(b"x" * 20 + b"\n" + b"y" * 20, 8, 20, skip=False)
    assert keys == [(1, b"x" * 20), (2, b"y" * 20)] and stats.skipped == {}


def test_a_long_binary_line_is_called_binary_not_long() -> None:
    with pytest.raises(InputError, match="looks like a binary file"):
        _lines(b"\x00" * 200, 16, 20, skip=False)


def test_csv_and_jsonl_keys_are_held_to_the_limit(tmp_path: Path) -> None:
    csv = tmp_path / "k.csv"
    csv.write_bytes(b"id,other\nshort,1\n" + SECRET * 10 + b",2\nfine,3\n")
    with pytest.raises(InputError, match=r"k\.csv row 2: a key of more than 40 bytes") as caught:
        list(open_keys(csv, SourceOptions(columns=("id",), max_key_bytes=40)))
    assert "s3cret" not in str(caught.value)
    stream = open_keys(csv, SourceOptions(columns=("id",), max_key_bytes=40, on_bad_record="skip"))
    assert [k for b in stream for k in b.to_list()] == [b"short", b"fine"]
    assert stream.stats.skipped == {"too_long": 1} and stream.stats.keys == 2

    jsonl = tmp_path / "k.jsonl"
    jsonl.write_bytes(b'{"id": "a"}\n{"id": "' + SECRET * 10 + b'"}\n{"id": "b"}\n')
    stream = open_keys(jsonl, SourceOptions(field="id", max_key_bytes=40, on_bad_record="skip"))
    assert [k for b in stream for k in b.to_list()] == [b"a", b"b"]
    assert stream.stats.skipped == {"too_long": 1}


def test_the_command_line_says_which_line_and_exits_2(tmp_path: Path) -> None:
    keys = tmp_path / "k.txt"
    keys.write_bytes(b"one\n" + SECRET * 200 + b"\nthree\n")
    code, line = expect_clean(run(["audit", str(keys), *QUICK, "--max-key-bytes", "1k"]), names="k.txt line 2")
    assert code == 2 and "s3cret" not in line
    report = tmp_path / "r.json"
    code, _ = expect_clean(
        run(["audit", str(keys), *QUICK, "--max-key-bytes", "1k", "--on-bad-record", "skip", "--json", str(report)]),
        report=report,
    )
    source = read_report(report)["sources"][0]
    assert source["stats"]["skipped"] == {"too_long": 1} and source["max_key_bytes"] == 1024


def test_devices_that_never_end_are_refused_at_once() -> None:
    started = time.monotonic()
    code, line = expect_clean(run(["audit", "/dev/zero", *QUICK]), names="/dev/zero")
    assert code == 2 and "is a device" in line
    assert time.monotonic() - started < 30


def test_an_endless_line_on_standard_input_stops_at_the_limit() -> None:
    """A pipe that never ends and never breaks a line: refused once the limit is read, not when memory runs out
    (run as a subprocess: the writer must see the reader go away)."""
    child = subprocess.Popen(
        [sys.executable, "-m", "hashaudit", "audit", "-", *QUICK, "--max-key-bytes", "4m"],
        stdin=subprocess.PIPE,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )
    chunk = b"x" * (1 << 20)
    written = [0]

    def feed() -> None:
        try:
            while written[0] < 4 << 30:  # 4 GiB at most: far beyond the limit, a bound on a broken reader
                child.stdin.write(chunk)  # type: ignore[union-attr]
                written[0] += len(chunk)
        except (BrokenPipeError, OSError):
            pass

    writer = threading.Thread(target=feed, daemon=True)
    writer.start()
    with child.stdin, child.stderr:  # type: ignore[union-attr]
        err = child.stderr.read()  # type: ignore[union-attr]  # until the child exits
        code = child.wait(timeout=300)
        writer.join(timeout=30)
    text = err.decode()
    assert code == 2, text
    assert "<stdin> line 1: a key of more than 4,194,304 bytes" in text and "Traceback" not in text
    assert written[0] < 1 << 30  # the reader stopped long before the writer's bound


def test_sampled_keys_longer_than_twice_the_ends_are_cut_to_their_ends() -> None:
    end = LONG_KEY_END_BYTES
    long_key = bytes(range(256)) * 40  # 10,240 bytes
    keys = [b"short", long_key, b"x" * (2 * end)]
    sample = KeySample(16, seed=3).update(KeyBatch.from_keys(keys))
    cut, count = sample.cut_long_keys()
    assert count == 1
    by_length = sorted(cut.keys().to_list(), key=len)
    assert by_length[0] == b"short" and by_length[1] == b"x" * (2 * end)
    assert by_length[2] == long_key[:end] + long_key[-end:]
    np.testing.assert_array_equal(cut.priorities_, sample.priorities_)  # same sample, same order
    assert long_key in sample.keys().to_list()  # the sample itself keeps the whole key
    short = KeySample(4).update(KeyBatch.from_keys([b"a", b"b"]))
    unchanged, none = short.cut_long_keys()
    assert none == 0 and unchanged is short


def test_the_report_says_how_many_sampled_keys_were_cut(tmp_path: Path) -> None:
    keys = tmp_path / "k.txt"
    keys.write_bytes(b"".join(b"k%d\n" % i for i in range(500)) + b"z" * 50_000 + b"\n")
    report = tmp_path / "r.json"
    code, out, err = run(["audit", str(keys), "-H", "xxh3_64", "-m", "2^10", "--json", str(report)])
    assert code in (0, 1), err
    assert read_report(report)["summary"]["sampled_keys_cut"] == {"keys": 1, "end_bytes_kept": LONG_KEY_END_BYTES}
    assert "1 sampled key longer than 2,048 bytes was cut" in out
