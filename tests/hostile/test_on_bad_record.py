"""``on_bad_record`` (``--on-bad-record fail|skip``): a record that cannot become a key stops the audit (the default)
or is skipped and counted by reason in the source's stats.

Expected keys are written out by hand or computed by decoding the good records one at a time with the library's
own strict decoders, so "skip" is checked against "what fail would have accepted".
"""

from __future__ import annotations

import base64
import io
import sqlite3
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hostile_cli import QUICK, expect_clean, read_report, run
from hypothesis import given, settings
from hypothesis import strategies as st

import hashaudit.keys.lines as lines_module
from hashaudit import SourceOptions, open_keys
from hashaudit.errors import InputError, UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.encode import KeyValueError, Normaliser, apply_key_format, apply_key_format_skipping
from hashaudit.keys.jsonl import read_jsonl
from hashaudit.keys.records import SourceStats

SKIP = "skip"


def read(path: Path, **options) -> tuple[list[bytes], SourceStats]:
    """Every key of a source, and its stats."""
    stream = open_keys(path, SourceOptions(**options))
    keys = [key for batch in stream for key in batch.to_list()]
    return keys, stream.stats


def numbered(path: Path, **options) -> list[tuple[int, bytes]]:
    """(record number, key) of a key file or (with ``field``) a JSON Lines file, through the reader and the
    normalisation steps that ``open_keys`` chains (a KeyBatch does not keep record numbers)."""
    settings_ = SourceOptions(on_bad_record=SKIP, **options)
    stats = SourceStats()
    normaliser = Normaliser(settings_)
    with open(path, "rb") as stream:
        if settings_.field:
            batches = read_jsonl(  # the lines mix strings and objects on purpose: their text is the key
                stream,
                path.name,
                settings_.field,
                stats,
                weight=settings_.weight_column,
                skip_bad=True,
                json_values="text",
            )
        else:
            batches = lines_module.read_lines(stream, path.name, skip_bad=True, stats=stats)
        pairs = []
        for records in batches:
            if not normaliser.is_identity:
                records = normaliser.apply(records, stats, str)
            pairs.extend((records.record_of(i), key) for i, key in enumerate(records.keys.to_list()))
    return pairs


# --- the option itself ---------------------------------------------------------------------------------------


def test_default_is_fail():
    assert SourceOptions().on_bad_record == "fail"


def test_unknown_value_is_a_usage_error(tmp_path):
    path = tmp_path / "k.txt"
    path.write_bytes(b"a\n")
    with pytest.raises(UsageError, match=r"^on_bad_record takes fail or skip, not 'maybe'$"):
        open_keys(path, SourceOptions(on_bad_record="maybe"))


def test_unknown_value_on_the_command_line(tmp_path):
    path = tmp_path / "k.txt"
    path.write_bytes(b"a\n")
    code, line = expect_clean(run(["audit", str(path), *QUICK, "--on-bad-record", "maybe"]), usage_ok=True)
    assert code == 2
    assert "--on-bad-record" in line


def test_description_records_the_choice(tmp_path):
    path = tmp_path / "k.txt"
    path.write_bytes(b"a\n")
    assert open_keys(path, SourceOptions()).description["on_bad_record"] == "fail"
    assert open_keys(path, SourceOptions(on_bad_record=SKIP)).description["on_bad_record"] == "skip"


# --- text lines ----------------------------------------------------------------------------------------------

MIXED = b"a\nb\xff\nc\x00d\ne\r\n\xc3\n\xe2\x82\xac\nf"  # line 2 not UTF-8, 3 has a NUL, 5 a cut sequence


def test_fail_stops_at_the_first_bad_line(tmp_path):
    path = tmp_path / "k.txt"
    path.write_bytes(MIXED)
    with pytest.raises(InputError, match=r"looks like a binary file \(NUL byte at offset 6\)"):
        read(path)
    path.write_bytes(MIXED.replace(b"c\x00d", b"cd"))
    with pytest.raises(InputError, match=r"k\.txt line 2: not valid UTF-8 \(at byte 2 of the line\)"):
        read(path)


def test_skip_drops_exactly_the_lines_that_are_not_text(tmp_path):
    path = tmp_path / "k.txt"
    path.write_bytes(MIXED)
    pairs = numbered(path)
    assert pairs == [(1, b"a"), (4, b"e"), (6, "€".encode()), (7, b"f")]
    keys, stats = read(path, on_bad_record=SKIP)
    assert keys == [b"a", b"e", "€".encode(), b"f"]
    assert stats.records == 7
    assert stats.keys == 4
    assert stats.skipped == {"bad_utf8": 2, "nul_byte": 1}


def test_skip_with_every_line_bad_says_why_there_are_no_keys(tmp_path):
    path = tmp_path / "k.txt"
    path.write_bytes(b"\xff\n\xfe\n")
    with pytest.raises(InputError, match=r"k\.txt: no keys \(2 records read; skipped: bad_utf8 2\)$"):
        read(path, on_bad_record=SKIP)


def test_skip_still_refuses_a_compressed_file_without_its_suffix(tmp_path):
    import gzip

    path = tmp_path / "k.txt"
    path.write_bytes(gzip.compress(b"a\nb\n" * 100))
    with pytest.raises(InputError, match=r"k\.txt: starts like gzip data: give the file its compression suffix"):
        read(path, on_bad_record=SKIP)


def test_raw_bytes_has_nothing_to_skip(tmp_path):
    path = tmp_path / "k.txt"
    path.write_bytes(MIXED)
    keys, stats = read(path, on_bad_record=SKIP, raw_bytes=True)
    assert len(keys) == 7
    assert stats.skipped == {}


def test_clean_blocks_keep_the_fast_path(tmp_path):
    # A block without a bad line is handed on as the splitter made it (consecutive line numbers, no per-line
    # record array); only the block holding the bad line carries explicit record numbers.
    blob = b"".join(b"key-%04d\n" % i for i in range(400)) + b"bad\xff\n" + b"".join(b"k%d\n" % i for i in range(50))
    batches = list(lines_module.read_lines(io.BytesIO(blob), "t", skip_bad=True, stats=SourceStats(), block_bytes=1024))
    explicit = [b for b in batches if b.records is not None]
    assert len(explicit) == 1
    assert 401 not in explicit[0].records.tolist()
    assert all(b.records is None for b in batches if b is not explicit[0])


def _text_lines(blob: bytes) -> list[tuple[int, bytes]]:
    """The oracle: lines split at LF (a CR just before an LF dropped) that are UTF-8 without NUL, numbered."""
    if not blob:
        return []
    lines = blob.split(b"\n")
    if blob.endswith(b"\n"):
        lines.pop()
    out = []
    for number, line in enumerate(lines, 1):
        terminated = number < len(lines) or blob.endswith(b"\n")  # a CR at the very end has no LF after it
        line = line[:-1] if terminated and line.endswith(b"\r") else line
        try:
            line.decode("utf-8")
        except UnicodeDecodeError:
            continue
        if b"\x00" not in line:
            out.append((number, line))
    return out


@settings(derandomize=True, max_examples=150, deadline=None, database=None)
@given(
    pieces=st.lists(
        st.sampled_from([b"a", b"bc", b"\n", b"\r\n", b"\r", b"\xff", b"\x00", b"\xc3\xa9", b"\xc3", b"\xf0\x9f\x98"]),
        max_size=80,
    ),
    block=st.sampled_from([8, 13, 64, 4096]),
    batch_keys=st.sampled_from([1, 3, 1 << 20]),
)
def test_skipped_lines_at_any_block_and_batch_size(pieces, block, batch_keys):
    blob = b"".join(pieces)
    stats = SourceStats()
    got = []
    for records in lines_module.read_lines(
        io.BytesIO(blob), "t", batch_keys=batch_keys, block_bytes=block, skip_bad=True, stats=stats
    ):
        assert len(records.keys) <= batch_keys
        got.extend((records.record_of(i), key) for i, key in enumerate(records.keys.to_list()))
    expected = _text_lines(blob)
    assert got == expected
    total = blob.count(b"\n") + (0 if not blob or blob.endswith(b"\n") else 1)
    assert sum(stats.skipped.values()) == total - len(expected)


# --- JSON Lines ----------------------------------------------------------------------------------------------

EVENTS = (
    b'{"k":"a","w":1}\n'  # 1 good
    b"not json\n"  # 2 bad_json
    b'{"x":1}\n'  # 3 missing_field
    b'{"k":"b","w":null}\n'  # 4 bad_weight (null)
    b'{"k":"c","w":-1}\n'  # 5 bad_weight (negative)
    b'{"k":"d","w":2.5}\n'  # 6 good
    b'{"k":"\xff"}\n'  # 7 bad_utf8
    b'{"k":null,"w":1}\n'  # 8 null key: skipped as before, whatever the mode
    b"\n"  # 9 blank
    b'{"k":"e","w":' + b"9" * 400 + b"}\n"  # 10 bad_weight (beyond the float range)
    b'{"k":"f"}\n'  # 11 bad_weight (missing)
    b'{"k":"g","w":"3"}\n'  # 12 bad_weight (a string)
    b'{"k":{"a":1},"w":3}\n'  # 13 good: an object key is its compact JSON
    b"[1,2]\n"  # 14 missing_field: the record is not an object
    b'{"k":"h","w":1} trailing\n'  # 15 bad_json (extra data)
)


def test_json_lines_skip(tmp_path):
    path = tmp_path / "events.jsonl"
    path.write_bytes(EVENTS)
    pairs = numbered(path, field="k", weight_column="w")
    assert pairs == [(1, b"a"), (6, b"d"), (13, b'{"a":1}')]
    stream = open_keys(path, SourceOptions(field="k", weight_column="w", on_bad_record=SKIP, json_values="text"))
    weights = np.concatenate([b.weights for b in stream])
    assert weights.tolist() == [1.0, 2.5, 3.0]
    assert stream.stats.skipped == {
        "bad_json": 2,
        "missing_field": 2,
        "bad_weight": 5,
        "bad_utf8": 1,
        "null": 1,
        "blank_line": 1,
    }
    assert stream.stats.records == 14  # every non-blank line
    assert stream.stats.keys == 3


@pytest.mark.parametrize(
    ("line", "message"),
    [
        (b"not json", r"line 2: not valid JSON: Expecting value \(column 1\)$"),
        (b'{"x":1}', r"line 2: no field 'k' \(missing 'k'\)$"),
        (b'{"k":"b","w":null}', r"line 2: weight 'w' is null$"),
        (b'{"k":"b","w":-1}', r"line 2: weight 'w' is negative$"),
        (b'{"k":"b","w":' + b"9" * 400 + b"}", r"line 2: weight 'w' is too large$"),
        (b'{"k":"b","w":NaN}', r"line 2: weight 'w' is not a number$"),
        (b'{"k":"b","w":Infinity}', r"line 2: weight 'w' is not finite$"),
        (b'{"k":"b","w":"3"}', r"line 2: weight 'w' is a string, not a number$"),
        (b'{"k":"b"}', r"line 2: no weight 'w'$"),
        (b'{"k":"\xff"}', r"line 2: not valid UTF-8"),
    ],
)
def test_json_lines_fail_names_the_line(tmp_path, line, message):
    path = tmp_path / "events.jsonl"
    path.write_bytes(b'{"k":"a","w":1}\n' + line + b'\n{"k":"z","w":1}\n')
    with pytest.raises(InputError, match=message):
        read(path, field="k", weight_column="w")


def test_json_lines_skip_counts_lines_after_skipped_utf8(tmp_path):
    # Line numbers of later records stay right after a line is dropped for bad UTF-8 (the block is renumbered).
    path = tmp_path / "events.jsonl"
    path.write_bytes(b'{"k":"a"}\n{"k":"\xff"}\n{"k":"c"}\n{"k":5}\n')
    assert numbered(path, field="k") == [(1, b"a"), (3, b"c"), (4, b"5")]


# --- key formats ---------------------------------------------------------------------------------------------


def _decodable(key: bytes, key_format: str) -> bytes | None:
    try:
        return apply_key_format(KeyBatch.from_keys([key]), key_format).key(0)
    except KeyValueError:
        return None


key_texts = st.lists(
    st.one_of(
        st.binary(max_size=6),
        st.integers(-(2**65), 2**65).map(lambda n: str(n).encode()),
        st.binary(max_size=5).map(lambda b: b.hex().encode()),
        st.binary(max_size=5).map(base64.b64encode),
        st.sampled_from([b"", b" 7 ", b"+0", b"-", b"0x1", b"AB", b"a=", b"====", b"1" * 25]),
    ),
    max_size=30,
)


@settings(derandomize=True, max_examples=200, deadline=None, database=None)
@given(keys=key_texts, key_format=st.sampled_from(["hex", "base64", "int"]))
def test_skipping_decodes_exactly_the_keys_a_strict_decode_accepts(keys, key_format):
    decoded, kept = apply_key_format_skipping(KeyBatch.from_keys(keys), key_format)
    expected = [(i, d) for i, d in enumerate(_decodable(k, key_format) for k in keys) if d is not None]
    assert decoded.to_list() == [d for _, d in expected]
    positions = list(range(len(keys))) if kept is None else kept.tolist()
    assert positions == [i for i, _ in expected]


def test_key_format_skip_through_a_source(tmp_path):
    path = tmp_path / "ints.txt"
    path.write_bytes(b"1\nx\n3\n\n18446744073709551616\n-1\n")
    pairs = numbered(path, key_format="int")
    assert pairs == [
        (1, (1).to_bytes(8, "little")),
        (3, (3).to_bytes(8, "little")),
        (6, (2**64 - 1).to_bytes(8, "little")),  # -1 as its 64-bit two's complement
    ]
    _, stats = read(path, key_format="int", on_bad_record=SKIP)
    assert stats.skipped == {"bad_key_format": 3}
    with pytest.raises(InputError, match=r"ints\.txt line 2: not a decimal integer \(1 byte\)$"):
        read(path, key_format="int")


def test_key_format_skip_keeps_weights_with_their_keys(tmp_path):
    path = tmp_path / "w.csv"
    path.write_bytes(b"k,w\n0a,1\nzz,2\n0b,3\n0,4\n0c,5\n")
    stream = open_keys(path, SourceOptions(columns=("k",), weight_column="w", key_format="hex", on_bad_record=SKIP))
    batches = list(stream)
    assert [k for b in batches for k in b.to_list()] == [b"\x0a", b"\x0b", b"\x0c"]
    assert np.concatenate([b.weights for b in batches]).tolist() == [1.0, 3.0, 5.0]
    assert stream.stats.skipped == {"bad_key_format": 2}


def test_many_bad_integers_are_skipped_in_one_pass():
    # Every other key is bad: the kernel resumes after each one instead of starting over (which would be
    # quadratic); 200,000 keys finish at once either way here, so this checks the result, not the time.
    keys = [b"%d" % i if i % 2 else b"x" for i in range(200_000)]
    decoded, kept = apply_key_format_skipping(KeyBatch.from_keys(keys), "int")
    assert len(decoded) == 100_000
    assert kept is not None and kept[:3].tolist() == [1, 3, 5]
    assert np.frombuffer(decoded.data, dtype="<u8")[-1] == 199_999


# --- delimited files -----------------------------------------------------------------------------------------


def test_csv_bad_weights_skipped(tmp_path):
    path = tmp_path / "w.csv"
    path.write_bytes(b"k,w\na,1\nb,heavy\nc,-1\nd, 2 \ne,\nf,inf\ng,NaN\nh,3e0\ni,1_0\n")
    stream = open_keys(path, SourceOptions(columns=("k",), weight_column="w", on_bad_record=SKIP))
    batches = list(stream)
    assert [k for b in batches for k in b.to_list()] == [b"a", b"d", b"h"]
    assert np.concatenate([b.weights for b in batches]).tolist() == [1.0, 2.0, 3.0]
    assert stream.stats.skipped == {"bad_weight": 6}
    assert stream.stats.records == 9


def test_csv_good_weights_read_alike_in_both_modes(tmp_path):
    path = tmp_path / "w.csv"
    path.write_bytes(b"k,w\na,1\nb,2.5\nc,+3\nd,.5\ne,1e3\nf, 7\n")
    weights = {}
    for mode in ("fail", "skip"):
        stream = open_keys(path, SourceOptions(columns=("k",), weight_column="w", on_bad_record=mode))
        weights[mode] = np.concatenate([b.weights for b in stream]).tolist()
    assert weights["fail"] == weights["skip"] == [1.0, 2.5, 3.0, 0.5, 1000.0, 7.0]


def test_csv_bad_weight_fails_by_default(tmp_path):
    path = tmp_path / "w.csv"
    path.write_bytes(b"k,w\na,1\nb,heavy\n")
    with pytest.raises(InputError, match=r"w\.csv row 2: weight 'w' is not a number$"):
        read(path, columns=("k",), weight_column="w")


def test_csv_ragged_rows_fail_or_are_skipped(tmp_path):
    path = tmp_path / "r.csv"
    path.write_bytes(b"k,v\n1,2\n3\n")
    with pytest.raises(InputError, match=r"r\.csv row 2 has 1 field, the header 2$"):
        read(path, on_bad_record="fail")
    stream = open_keys(path, SourceOptions(on_bad_record="skip"))
    assert [k for batch in stream for k in batch.to_list()] == [b"1"] and stream.stats.skipped == {"ragged_row": 1}


def test_csv_unterminated_quote_fails_in_both_modes(tmp_path):
    path = tmp_path / "q.csv"
    path.write_bytes(b'k,v\n1,2\n3,"4\n5,6\n')
    for mode in ("fail", "skip"):
        with pytest.raises(InputError, match="never closes"):
            read(path, on_bad_record=mode)


# --- columnar files and databases ----------------------------------------------------------------------------


def test_parquet_bad_weights_skipped_and_null_keys_counted_apart(tmp_path):
    path = tmp_path / "w.parquet"
    table = pa.table(
        {
            "k": ["a", "b", None, "d", "e", None],
            "w": pa.array([1.0, None, 5.0, -2.0, float("inf"), None], pa.float64()),
        }
    )
    pq.write_table(table, path)
    stream = open_keys(path, SourceOptions(columns=("k",), weight_column="w", on_bad_record=SKIP))
    batches = list(stream)
    assert [k for b in batches for k in b.to_list()] == [b"a"]
    assert stream.stats.skipped == {"null": 2, "bad_weight": 3}
    with pytest.raises(InputError, match=r"w\.parquet row 2: weight 'w' is null$"):
        read(path, columns=("k",), weight_column="w")


def test_parquet_clean_weights_alike_in_both_modes(tmp_path):
    path = tmp_path / "w.parquet"
    pq.write_table(pa.table({"k": ["a", None, "c"], "w": [1, 2, 3]}), path)
    for mode in ("fail", "skip"):
        stream = open_keys(path, SourceOptions(columns=("k",), weight_column="w", on_bad_record=mode))
        batches = list(stream)
        assert np.concatenate([b.weights for b in batches]).tolist() == [1.0, 3.0]
        assert stream.stats.skipped == {"null": 1}


def test_sqlite_bad_weights_skipped(tmp_path):
    path = tmp_path / "w.sqlite"
    with sqlite3.connect(path) as connection:
        connection.execute("CREATE TABLE t (k TEXT, w)")
        connection.executemany(
            "INSERT INTO t VALUES (?, ?)",
            [("a", 1), ("b", "x"), ("c", -1), (None, 1), ("e", None), ("f", 2.5)],
        )
    connection.close()
    stream = open_keys(path, SourceOptions(db_table="t", columns=("k",), weight_column="w", on_bad_record=SKIP))
    batches = list(stream)
    assert [k for b in batches for k in b.to_list()] == [b"a", b"f"]
    assert np.concatenate([b.weights for b in batches]).tolist() == [1.0, 2.5]
    assert stream.stats.skipped == {"bad_weight": 3, "null": 1}
    with pytest.raises(InputError, match=r"row 2: weight 'w' is 'x', not a number"):
        read(path, db_table="t", columns=("k",), weight_column="w")


# --- the command line and the gate file ----------------------------------------------------------------------


def test_command_line_report_counts_the_skipped_records(tmp_path):
    path = tmp_path / "events.jsonl"
    path.write_bytes(EVENTS + b"".join(b'{"k":"key-%d","w":1}\n' % i for i in range(500)))
    report = tmp_path / "r.json"
    args = ["audit", str(path), *QUICK, "-f", "k", "--weight-column", "w", "--shards", "4", "--json", str(report)]
    args += ["--json-values", "text"]  # the lines mix strings and objects on purpose
    code, line = expect_clean(run(args), names=str(path))
    assert code == 2
    assert line.endswith("line 7: not valid UTF-8 (at byte 7 of the line)")  # a block is checked first
    code, _ = expect_clean(run([*args, "--on-bad-record", "skip"]), report=report)
    assert code in (0, 1)
    source = read_report(report)["sources"][0]
    assert source["on_bad_record"] == "skip"
    assert source["stats"]["keys"] == 503
    assert source["stats"]["skipped"]["bad_weight"] == 5


def test_gate_file_takes_on_bad_record(tmp_path):
    (tmp_path / "keys.txt").write_bytes(b"".join(b"key-%d\n" % i for i in range(2000)) + b"\xff\n")
    body = 'hashes = ["xxh3_64"]\nbuckets = ["2^10"]\nchecks = ["buckets"]\n[[sources]]\npath = "keys.txt"\n'
    config = tmp_path / "hashaudit.toml"
    config.write_text(body, encoding="utf-8")
    code, line = expect_clean(run(["gate", "--config", str(config)]))
    assert code == 2
    assert "line 2001: not valid UTF-8" in line
    config.write_text(body + 'on_bad_record = "skip"\n', encoding="utf-8")
    report = tmp_path / "r.json"
    code, _ = expect_clean(run(["gate", "--config", str(config), "--json", str(report)]), report=report)
    assert code in (0, 1)
    assert read_report(report)["sources"][0]["stats"]["skipped"] == {"bad_utf8": 1}
    config.write_text(body + "on_bad_record = true\n", encoding="utf-8")
    code, line = expect_clean(run(["gate", "--config", str(config)]))
    assert code == 2
    assert "line 6: on_bad_record takes one of fail, skip, not a boolean" in line


def test_dask_partitions_skip_bad_lines_too(tmp_path):
    pytest.importorskip("dask")
    from hashaudit.engine.distributed import _partition_batches, plan_partitions

    path = tmp_path / "k.txt"
    path.write_bytes(b"a\nb\xff\nc\n")
    (part,) = plan_partitions([str(path)], [SourceOptions(on_bad_record=SKIP)], 1 << 20)
    stats = SourceStats()
    keys = [key for batch in _partition_batches(part, stats) for key in batch.to_list()]
    assert keys == [b"a", b"c"]
    assert stats.skipped == {"bad_utf8": 1}
    local = open_keys(path, SourceOptions(on_bad_record=SKIP))
    assert [key for batch in local for key in batch.to_list()] == keys
    assert stats == local.stats and stats.records == 3  # every record counted, kept or skipped
