"""Key formats and normalisations: round trips against the standard library, errors, order of the steps."""

from __future__ import annotations

import base64
import re
import struct

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hashaudit.errors import InputError, UsageError
from hashaudit.keys import KeyBatch, SourceOptions, open_keys
from hashaudit.keys.encode import (
    KeyValueError,
    apply_key_format,
    compile_pattern,
    decode_base64,
    decode_hex,
    drop_empty,
    extract_pattern,
    lowercase_keys,
    parse_int,
    strip_keys,
)

key_lists = st.lists(st.binary(max_size=24), max_size=30)


def sliced(keys: list[bytes]) -> KeyBatch:
    """A batch whose offsets do not start at 0 (a slice of a bigger one), as sources hand them on."""
    return KeyBatch.from_keys([b"pre", *keys, b"post"]).slice(1, len(keys) + 1)


@settings(max_examples=150, deadline=None)
@given(keys=key_lists, upper=st.booleans())
def test_hex_round_trip(keys, upper):
    text = [(k.hex().upper() if upper else k.hex()).encode() for k in keys]
    assert decode_hex(sliced(text)).to_list() == keys


@settings(max_examples=150, deadline=None)
@given(keys=key_lists, padded=st.booleans(), urlsafe=st.booleans())
def test_base64_round_trip(keys, padded, urlsafe):
    encode = base64.urlsafe_b64encode if urlsafe else base64.b64encode  # RFC 4648 sections 5 and 4
    text = [encode(k) if padded else encode(k).rstrip(b"=") for k in keys]
    assert decode_base64(sliced(text)).to_list() == keys


@settings(max_examples=300, deadline=None)
@given(values=st.lists(st.integers(-(2**63), 2**64 - 1), max_size=30), spaces=st.sampled_from(["", " ", "\t "]))
def test_int_round_trip(values, spaces):
    text = [f"{spaces}{v:+d}{spaces}".encode() if v % 3 == 0 else str(v).encode() for v in values]
    decoded = parse_int(sliced(text))
    # Reference: Python's own two's complement of the value, packed little-endian.
    assert decoded.to_list() == [struct.pack("<Q", v % 2**64) for v in values]
    assert np.array_equal(decoded.offsets, np.arange(0, 8 * len(values) + 1, 8))


@pytest.mark.parametrize(
    ("text", "value"),
    [
        (b"0", 0),
        (b"-0", 0),
        (b"+5", 5),
        (b"007", 7),
        (b"-1", 2**64 - 1),
        (b"-9223372036854775808", 2**63),
        (b"18446744073709551615", 2**64 - 1),
        (b" 12 ", 12),
    ],
)
def test_int_edges(text, value):
    assert parse_int(KeyBatch.from_keys([text])).to_list() == [struct.pack("<Q", value)]


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (b"18446744073709551616", "integer out of range"),
        (b"-9223372036854775809", "integer out of range"),
        (b"99999999999999999999999", "integer out of range"),
        (b"", "not a decimal integer"),
        (b"-", "not a decimal integer"),
        (b"1 2", "not a decimal integer"),
        (b"0x10", "not a decimal integer"),
        (b"1e3", "not a decimal integer"),
        (b"1_000", "not a decimal integer"),
        (b"99999999999999999999999z", "not a decimal integer"),
        ("٣".encode(), "not a decimal integer"),  # a digit to Unicode, not to us
    ],
)
def test_int_errors(text, message):
    with pytest.raises(KeyValueError, match=re.escape(message)) as info:
        parse_int(KeyBatch.from_keys([b"1", text]))
    assert info.value.index == 1


def test_int_error_gives_the_length_not_the_key():
    text = b"1" * 30 + b"x" + b"2" * 30
    with pytest.raises(KeyValueError) as info:
        parse_int(KeyBatch.from_keys([text]))
    assert info.value.reason == "not a decimal integer (61 bytes)"
    with pytest.raises(KeyValueError) as info:
        parse_int(KeyBatch.from_keys([b"7", b""]))
    assert info.value.reason == "not a decimal integer (empty key)"


def test_hex_errors():
    with pytest.raises(KeyValueError, match=r"not hexadecimal: an odd number of digits \(3 bytes\)$") as info:
        decode_hex(KeyBatch.from_keys([b"00", b"abc"]))
    assert info.value.index == 1
    with pytest.raises(KeyValueError, match=r"not hexadecimal: byte 3 is not a hex digit \(4 bytes\)$") as info:
        decode_hex(sliced([b"ff", b"00", b"00gg"]))
    assert info.value.index == 2


def test_base64_errors():
    for bad in (b"A", b"AB*D", b"QQ==QQ==", b"Q==="):
        with pytest.raises(KeyValueError, match="not base64") as info:
            decode_base64(KeyBatch.from_keys([bad]))
        assert info.value.reason.endswith(f"({len(bad)} bytes)") or info.value.reason.endswith("(1 byte)")
        assert bad.decode() not in info.value.reason


def test_strip_and_lowercase():
    batch = sliced([b"  Ab C\t", b"\r\n", b"", b"X\xc3\x89Y ", b"\x0b\x0cz\x0c"])
    assert strip_keys(batch).to_list() == [b"Ab C", b"", b"", b"X\xc3\x89Y", b"z"]
    assert lowercase_keys(batch).to_list() == [b"  ab c\t", b"\r\n", b"", b"x\xc3\x89y ", b"\x0b\x0cz\x0c"]


@settings(max_examples=100, deadline=None)
@given(keys=key_lists)
def test_strip_and_lowercase_match_python(keys):
    batch = sliced(keys)
    assert strip_keys(batch).to_list() == [k.strip(b" \t\n\r\x0b\x0c") for k in keys]
    assert lowercase_keys(batch).to_list() == [k.lower() for k in keys]  # bytes.lower is ASCII-only
    kept_batch, kept = drop_empty(batch)
    assert kept_batch.to_list() == [k for k in keys if k]
    if kept is not None:
        assert [keys[i] for i in kept] == [k for k in keys if k]


def test_pattern_takes_first_group_and_skips_non_matches():
    regex = compile_pattern(r"user=(\w+)")
    batch, kept = extract_pattern(KeyBatch.from_keys([b"GET user=ab1 x", b"nothing", b"user=\xc3\xa9t\xc3\xa9"]), regex)
    assert batch.to_list() == [b"ab1", "été".encode()]
    assert kept.tolist() == [0, 2]
    optional = compile_pattern(r"(a)|b")
    assert extract_pattern(KeyBatch.from_keys([b"b"]), optional)[0].to_list() == []


def test_pattern_usage_errors():
    with pytest.raises(UsageError, match="not a valid regular expression"):
        compile_pattern("(unclosed")
    with pytest.raises(UsageError, match="has no group"):
        compile_pattern(r"\d+")


def test_key_format_usage_error():
    with pytest.raises(UsageError, match=r"unknown key format 'decimal'; choose one of bytes, hex, base64, int"):
        apply_key_format(KeyBatch.from_keys([b"1"]), "decimal")


def test_steps_in_order_through_open_keys(tmp_path):
    path = tmp_path / "log.txt"
    path.write_bytes(b"id= 0A \nno id here\nid=\nid=Ff\nid=  \n")
    stream = open_keys(
        path, SourceOptions(pattern=r"id=(.*)", strip=True, lowercase=True, key_format="hex", skip_empty=True)
    )
    assert [k for b in stream for k in b.to_list()] == [b"\x0a", b"\xff"]
    assert stream.stats.skipped == {"pattern_no_match": 1, "empty": 2}
    assert stream.stats.records == 5
    assert stream.stats.keys == 2
    assert stream.description["pattern"] == r"id=(.*)"
    assert stream.description["strip"] is True


def test_error_line_numbers_survive_skips(tmp_path):
    path = tmp_path / "ids.txt"
    path.write_bytes(b"# header\n1\n\n2\n# note\nnope\n")
    options = SourceOptions(pattern=r"^([^#].*)", key_format="int", skip_empty=True, batch_keys=2)
    with pytest.raises(InputError, match=r"ids\.txt line 6: not a decimal integer \(4 bytes\)$"):
        list(open_keys(path, options))


def test_int_without_skip_empty_refuses_blank_lines(tmp_path):
    path = tmp_path / "ids.txt"
    path.write_bytes(b"1\n\n2\n")
    with pytest.raises(InputError, match=r"ids\.txt line 2: not a decimal integer \(empty key\)$"):
        list(open_keys(path, SourceOptions(key_format="int")))
    keys = [k for b in open_keys(path, SourceOptions(key_format="int", skip_empty=True)) for k in b.to_list()]
    assert keys == [struct.pack("<Q", 1), struct.pack("<Q", 2)]


def test_pattern_matching_nothing_is_no_keys(tmp_path):
    path = tmp_path / "k.txt"
    path.write_bytes(b"a\nb\n")
    with pytest.raises(InputError, match=r"k\.txt: no keys \(2 records read; skipped: pattern_no_match 2\)"):
        list(open_keys(path, SourceOptions(pattern="(z)")))
