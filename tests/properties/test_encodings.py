"""Key encodings round-trip through real files: what Python's standard library writes, ``open_keys`` reads back.

Every test writes a temporary file with the standard library (``bytes.hex``, :mod:`base64`, ``str`` of an int,
:mod:`csv`, :mod:`json`), opens it with ``open_keys`` and compares the keys with the originals. The reader's block
size is shrunk (the module constant the line reader documents for tests) so that lines, CRLF pairs and UTF-8
sequences straddle block boundaries, and the batch size varies.
"""

from __future__ import annotations

import base64
import csv
import io
import json
import os
from unittest import mock

import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from hashaudit.errors import HashAuditError, InputError
from hashaudit.keys import SourceOptions, open_keys
from hashaudit.keys import delimited as csv_reader
from hashaudit.keys import lines as line_reader

PROPERTY = settings(max_examples=60, deadline=None, derandomize=True, database=None)

KEY_LISTS = st.lists(st.binary(max_size=20), min_size=1, max_size=30)
BLOCK_BYTES = st.sampled_from([1, 2, 3, 7, 16, 64, 1 << 16])
BATCH_KEYS = st.integers(1, 8)
# text a UTF-8 file can hold: every code point but the surrogates
TEXT = st.text(st.characters(blacklist_categories=("Cs",)), max_size=12)


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> str:
    return str(tmp_path_factory.mktemp("keys"))


def read_keys(
    path: str, options: SourceOptions, block_bytes: int = 1 << 16, csv_block_bytes: int = 1 << 16
) -> list[bytes]:
    """Every key of the file, in order, read with the given block sizes."""
    with (
        mock.patch.object(line_reader, "BLOCK_BYTES", block_bytes),
        mock.patch.object(csv_reader, "CSV_BLOCK_BYTES", csv_block_bytes),
    ):
        return [key for batch in open_keys(path, options) for key in batch.to_list()]


def write(folder: str, name: str, content: bytes) -> str:
    path = os.path.join(folder, name)
    with open(path, "wb") as f:
        f.write(content)
    return path


def lines_of(texts: list[bytes], ending: bytes) -> bytes:
    return b"".join(t + ending for t in texts)


# ---------------------------------------------------------------------------------------------------------
# hex, base64, int
# ---------------------------------------------------------------------------------------------------------


@PROPERTY
@given(keys=KEY_LISTS, upper=st.booleans(), crlf=st.booleans(), block=BLOCK_BYTES, batch_keys=BATCH_KEYS)
def test_hex_keys_decode_what_bytes_hex_wrote(folder, keys, upper, crlf, block, batch_keys):
    texts = [(k.hex().upper() if upper else k.hex()).encode("ascii") for k in keys]
    path = write(folder, "keys.hex.txt", lines_of(texts, b"\r\n" if crlf else b"\n"))
    options = SourceOptions(format="lines", key_format="hex", batch_keys=batch_keys)
    assert read_keys(path, options, block) == keys


@PROPERTY
@given(keys=KEY_LISTS, urlsafe=st.booleans(), padded=st.booleans(), block=BLOCK_BYTES, batch_keys=BATCH_KEYS)
def test_base64_keys_decode_what_base64_wrote(folder, keys, urlsafe, padded, block, batch_keys):
    encode = base64.urlsafe_b64encode if urlsafe else base64.b64encode
    texts = [encode(k) if padded else encode(k).rstrip(b"=") for k in keys]
    path = write(folder, "keys.b64.txt", lines_of(texts, b"\n"))
    options = SourceOptions(format="lines", key_format="base64", batch_keys=batch_keys)
    assert read_keys(path, options, block) == keys


INT64_RANGE = st.integers(-(2**63), 2**64 - 1)
PADDING = st.sampled_from(["", " ", "\t", "  \t "])


def decimal_text(value: int, plus: bool, before: str, after: str) -> bytes:
    sign = "+" if plus and value >= 0 else ""
    return f"{before}{sign}{value}{after}".encode("ascii")


@PROPERTY
@given(
    values=st.lists(st.one_of(INT64_RANGE, st.sampled_from([0, -1, 2**63 - 1, -(2**63), 2**64 - 1])), min_size=1),
    plus=st.booleans(),
    before=PADDING,
    after=PADDING,
    crlf=st.booleans(),
    block=BLOCK_BYTES,
)
def test_decimal_integers_become_little_endian_words(folder, values, plus, before, after, crlf, block):
    """-2^63 .. 2^64 - 1 are accepted; a negative value is its 64-bit two's complement, i.e. the bytes of
    ``int.to_bytes(8, "little", signed=True)``."""
    texts = [decimal_text(v, plus, before, after) for v in values]
    path = write(folder, "keys.int.txt", lines_of(texts, b"\r\n" if crlf else b"\n"))
    expected = [v.to_bytes(8, "little", signed=v < 0) for v in values]
    assert read_keys(path, SourceOptions(format="lines", key_format="int"), block) == expected


OUT_OF_RANGE = st.one_of(st.integers(2**64, 10**40), st.integers(-(10**40), -(2**63) - 1))
NOT_A_NUMBER = st.sampled_from(["", "-", "+", "1.5", "1e3", "0x10", "12a", "--1", "+-1", "1 2", "١٢"])


@PROPERTY
@given(
    values=st.lists(INT64_RANGE, max_size=10),
    bad=st.one_of(OUT_OF_RANGE.map(str), NOT_A_NUMBER),
    where=st.integers(0, 10),
    block=BLOCK_BYTES,
)
def test_a_bad_decimal_integer_is_one_input_error_naming_its_line(folder, values, bad, where, block):
    where = min(where, len(values))
    texts = [str(v).encode() for v in values]
    texts.insert(where, bad.encode("utf-8"))
    path = write(folder, "keys.bad.txt", lines_of(texts, b"\n"))
    with pytest.raises(HashAuditError) as caught:
        read_keys(path, SourceOptions(format="lines", key_format="int"), block)
    assert isinstance(caught.value, InputError)
    message = str(caught.value)
    assert f"line {where + 1}:" in message
    is_number = bad.lstrip("+-").isdigit() and bad.isascii() and bad.count("-") + bad.count("+") <= 1
    assert ("out of range" in message) if is_number else ("not a decimal integer" in message)


# ---------------------------------------------------------------------------------------------------------
# Plain key files: raw bytes, CRs and text
# ---------------------------------------------------------------------------------------------------------

RAW_KEYS = st.lists(
    st.binary(max_size=16).map(lambda k: k.replace(b"\n", b"")) | st.sampled_from([b"", b"\r", b"a\r", b"\r\r"]),
    min_size=1,
    max_size=30,
)


@PROPERTY
@given(keys=RAW_KEYS, terminated=st.booleans(), block=BLOCK_BYTES, batch_keys=BATCH_KEYS)
def test_raw_keys_survive_byte_for_byte_when_crs_are_kept(folder, keys, terminated, block, batch_keys):
    assume(terminated or keys[-1])  # an unterminated empty last line is no line at all
    content = b"\n".join(keys) + (b"\n" if terminated else b"")
    path = write(folder, "keys.raw", content)
    options = SourceOptions(format="lines", raw_bytes=True, keep_cr=True, batch_keys=batch_keys)
    assert read_keys(path, options, block) == keys


@PROPERTY
@given(keys=RAW_KEYS, terminated=st.booleans(), block=BLOCK_BYTES, batch_keys=BATCH_KEYS)
def test_one_cr_before_each_lf_is_dropped_unless_kept(folder, keys, terminated, block, batch_keys):
    """Without ``keep_cr`` exactly one CR is taken off a line that ends in CR LF; other CRs stay, and so does
    the CR that ends an unterminated last line (no LF follows it)."""
    assume(terminated or keys[-1])
    content = b"\n".join(keys) + (b"\n" if terminated else b"")
    path = write(folder, "keys.raw", content)
    expected = [k[:-1] if k.endswith(b"\r") else k for k in keys]
    if not terminated:
        expected[-1] = keys[-1]
    options = SourceOptions(format="lines", raw_bytes=True, batch_keys=batch_keys)
    assert read_keys(path, options, block) == expected


@PROPERTY
@given(
    keys=st.lists(TEXT.map(lambda t: t.replace("\n", "").replace("\r", "").replace("\x00", "")), min_size=1),
    block=BLOCK_BYTES,
)
def test_utf8_text_keys_come_back_as_their_bytes(folder, keys, block):
    """The text check (no ``raw_bytes``) accepts any UTF-8, even when a block ends inside a character."""
    path = write(folder, "keys.txt", "".join(k + "\n" for k in keys).encode("utf-8"))
    assert read_keys(path, SourceOptions(format="lines"), block) == [k.encode("utf-8") for k in keys]


# ---------------------------------------------------------------------------------------------------------
# CSV and JSON Lines
# ---------------------------------------------------------------------------------------------------------

CSV_TEXT = st.text(
    st.one_of(st.sampled_from(list("\",\r\n ;\t'")), st.characters(blacklist_categories=("Cs",))), max_size=10
)


@PROPERTY
@given(
    rows=st.lists(st.tuples(CSV_TEXT, CSV_TEXT), min_size=1, max_size=20),
    dialect=st.sampled_from([(csv.QUOTE_MINIMAL, "\r\n"), (csv.QUOTE_ALL, "\r\n"), (csv.QUOTE_ALL, "\n")]),
    block=st.sampled_from([512, 1 << 16]),  # a row is at most about 200 bytes: it fits in one parse block
)
def test_csv_keys_written_by_the_csv_module_come_back_exactly(folder, rows, dialect, block):
    """Fields with quotes, delimiters, CRs and LFs. With an LF line terminator the writer only quotes fields that
    hold an LF, so a bare CR would be left unquoted (not RFC 4180): that terminator is paired with quoting all."""
    quoting, terminator = dialect
    buffer = io.StringIO(newline="")
    writer = csv.writer(buffer, quoting=quoting, lineterminator=terminator)
    writer.writerow(["id", "name"])
    writer.writerows(rows)
    path = write(folder, "keys.csv", buffer.getvalue().encode("utf-8"))
    one = read_keys(path, SourceOptions(format="csv", columns=("name",)), csv_block_bytes=block)
    assert one == [name.encode("utf-8") for _, name in rows]
    both = read_keys(path, SourceOptions(format="csv", columns=("id", "1"), join="|"), csv_block_bytes=block)
    assert both == [f"{key}|{name}".encode() for key, name in rows]


@PROPERTY
@given(
    values=st.lists(st.text(max_size=12), min_size=1, max_size=20),
    ascii_only=st.booleans(),
    block=BLOCK_BYTES,
)
def test_jsonl_string_values_come_back_as_utf8(folder, values, ascii_only, block):
    """Any string, lone surrogates included when the writer escapes them (``\\ud800``): a surrogate has no UTF-8
    form, so it is kept as its three-byte encoding (``surrogatepass``)."""
    if not ascii_only:  # written as UTF-8 text, which has no form for a lone surrogate
        values = ["".join("?" if 0xD800 <= ord(c) < 0xE000 else c for c in v) for v in values]
    text = "".join(
        json.dumps({"user": {"id": v}, "n": i}, ensure_ascii=ascii_only) + "\n" for i, v in enumerate(values)
    )
    path = write(folder, "keys.jsonl", text.encode("utf-8"))
    keys = read_keys(path, SourceOptions(format="jsonl", field="user.id"), block)
    assert keys == [v.encode("utf-8", "surrogatepass") for v in values]


@PROPERTY
@given(values=st.lists(st.integers(-(10**30), 10**30), min_size=1, max_size=20), block=BLOCK_BYTES)
def test_jsonl_integer_values_come_back_as_decimal_text(folder, values, block):
    text = "".join(json.dumps({"id": v}) + "\n" for v in values)
    path = write(folder, "ints.jsonl", text.encode("ascii"))
    keys = read_keys(path, SourceOptions(format="jsonl", field="id"), block)
    assert keys == [str(v).encode("ascii") for v in values]
