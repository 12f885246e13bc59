"""Plain key files: one key per line, byte for byte, whatever the block boundaries."""

from __future__ import annotations

import io
import sys

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hashaudit.errors import InputError
from hashaudit.keys import KeyBatch, SourceOptions, open_keys
from hashaudit.keys import lines as lines_module


def expected_lines(data: bytes, keep_cr: bool = False) -> list[bytes]:
    """Independent reference: split on LF, no key after a final LF, drop a CR right before an LF."""
    if not data:
        return []
    parts = data.split(b"\n")
    terminated = [p for p in parts[:-1]]
    if not keep_cr:
        terminated = [p[:-1] if p.endswith(b"\r") else p for p in terminated]
    return terminated + ([parts[-1]] if parts[-1] else [])


def read_all(path, **options) -> list[bytes]:
    keys: list[bytes] = []
    for batch in open_keys(path, SourceOptions(**options)):
        assert isinstance(batch, KeyBatch)
        keys.extend(batch.to_list())
    return keys


def write(tmp_path, data: bytes, name: str = "keys.txt"):
    path = tmp_path / name
    path.write_bytes(data)
    return path


BYTE_EXACT = (
    b'plain\nwith,comma\n"quoted"\nhalf"quote\ttab\n  spaces  \nlone\rcr\ncrlf\r\n\n\nafter empty\n'
    b"\xc3\xa9t\xc3\xa9 \xe2\x82\xac\n\r\n\r\r\nno newline at end"
)


def test_byte_exact_keys(tmp_path):
    keys = read_all(write(tmp_path, BYTE_EXACT))
    assert keys == [
        b"plain",
        b"with,comma",
        b'"quoted"',
        b'half"quote\ttab',
        b"  spaces  ",
        b"lone\rcr",
        b"crlf",
        b"",
        b"",
        b"after empty",
        "été €".encode(),
        b"",
        b"\r",  # only the CR right before the LF goes
        b"no newline at end",
    ]
    assert keys == expected_lines(BYTE_EXACT)


def test_keep_cr(tmp_path):
    assert read_all(write(tmp_path, b"a\r\nb\r\r\nc\r"), keep_cr=True) == [b"a\r", b"b\r\r", b"c\r"]
    # A CR at the very end of the file has no LF after it, so it stays even without keep_cr.
    assert read_all(write(tmp_path, b"a\r\nc\r")) == [b"a", b"c\r"]


@pytest.mark.parametrize(
    ("data", "keys"),
    [
        (b"a\nb\n", [b"a", b"b"]),
        (b"a\nb", [b"a", b"b"]),
        (b"\n", [b""]),
        (b"\n\n", [b"", b""]),
        (b"a\n\n", [b"a", b""]),
        (b"x", [b"x"]),
    ],
)
def test_trailing_newline(tmp_path, data, keys):
    assert read_all(write(tmp_path, data)) == keys


def test_skip_empty_counts(tmp_path):
    path = write(tmp_path, b"a\n\nb\n\r\n\nc")
    stream = open_keys(path, SourceOptions(skip_empty=True))
    keys = [k for batch in stream for k in batch.to_list()]
    assert keys == [b"a", b"b", b"c"]
    assert stream.stats.records == 6
    assert stream.stats.keys == 3
    assert stream.stats.skipped == {"empty": 3}
    assert stream.stats.empty_keys == 0


def test_empty_keys_counted(tmp_path):
    stream = open_keys(write(tmp_path, b"a\n\n\nb\n"))
    assert sum(len(b) for b in stream) == 4
    assert stream.stats.empty_keys == 2


@pytest.mark.parametrize("block", [1, 2, 3, 5, 7, 64])
@pytest.mark.parametrize("keep_cr", [False, True])
def test_block_boundaries_do_not_matter(tmp_path, monkeypatch, block, keep_cr):
    path = write(tmp_path, BYTE_EXACT)
    whole = read_all(path, keep_cr=keep_cr)
    monkeypatch.setattr(lines_module, "BLOCK_BYTES", block)
    assert read_all(path, keep_cr=keep_cr) == whole == expected_lines(BYTE_EXACT, keep_cr)


@settings(max_examples=200, deadline=None)
@given(
    data=st.lists(st.sampled_from([b"a", b"b", b"\n", b"\r", b",", b'"', b"\t", "é".encode(), b"key"]), max_size=60),
    block=st.integers(1, 40),
    keep_cr=st.booleans(),
    batch_keys=st.integers(1, 5),
)
def test_any_text_any_block_size(data, block, keep_cr, batch_keys):
    blob = b"".join(data)
    batches = list(
        lines_module.read_lines(io.BytesIO(blob), "t", keep_cr=keep_cr, batch_keys=batch_keys, block_bytes=block)
    )
    keys = [k for b in batches for k in b.keys.to_list()]
    assert keys == expected_lines(blob, keep_cr)
    assert all(len(b.keys) <= batch_keys for b in batches)
    # Line numbers run on across batches.
    numbers = [b.first_record + i for b in batches for i in range(len(b.keys))]
    assert numbers == list(range(1, len(keys) + 1))


@pytest.mark.parametrize("width", [0, 1, 16])
@pytest.mark.parametrize("crlf", [False, True])
def test_fixed_width_shortcut_matches_general_split(tmp_path, monkeypatch, width, crlf):
    rng = np.random.default_rng(5)
    rows = [bytes(rng.integers(97, 123, size=width, dtype=np.uint8)) for _ in range(1000)]
    end = b"\r\n" if crlf else b"\n"
    data = end.join(rows) + end
    expected = expected_lines(data)
    assert read_all(write(tmp_path, data)) == expected
    assert read_all(write(tmp_path, data), keep_cr=True) == expected_lines(data, keep_cr=True)
    # Mixed endings and an extra LF inside must leave the shortcut.
    mixed = data + b"x\r\n" + b"y" * width + b"\n"
    assert read_all(write(tmp_path, mixed)) == expected_lines(mixed)
    monkeypatch.setattr(lines_module, "BLOCK_BYTES", 7 * (width + len(end)))
    assert read_all(write(tmp_path, data)) == expected


def test_line_longer_than_block(tmp_path, monkeypatch):
    monkeypatch.setattr(lines_module, "BLOCK_BYTES", 16)
    long_key = bytes(range(97, 123)) * 40
    data = b"short\n" + long_key + b"\n" + long_key + b"\nend"
    assert read_all(write(tmp_path, data)) == [b"short", long_key, long_key, b"end"]


def test_batches_respect_batch_keys(tmp_path):
    data = b"".join(b"k%d\n" % i for i in range(2500))
    stream = open_keys(write(tmp_path, data), SourceOptions(batch_keys=1000))
    sizes = [len(b) for b in stream]
    assert sizes == [1000, 1000, 500]
    assert stream.stats.records == 2500


def test_memory_does_not_grow_with_file(tmp_path, monkeypatch):
    monkeypatch.setattr(lines_module, "BLOCK_BYTES", 4096)
    data = b"".join(b"key-%06d\n" % i for i in range(20000))
    biggest = 0
    for batch in open_keys(write(tmp_path, data)):
        biggest = max(biggest, batch.data.nbytes)
    assert biggest <= 4096


def test_binary_file_is_refused(tmp_path):
    path = write(tmp_path, b"good\nkey\x00with nul\n")
    with pytest.raises(
        InputError, match=r"keys.txt: looks like a binary file \(NUL byte at offset 8\); use --raw-bytes"
    ):
        read_all(path)


def test_binary_file_with_invalid_utf8_too_is_called_binary(tmp_path):
    path = write(tmp_path, b"\xff\xfe\x00\x01\x02")
    with pytest.raises(InputError, match="looks like a binary file"):
        read_all(path)


def test_gzip_data_without_suffix_gets_a_hint(tmp_path):
    import gzip

    path = write(tmp_path, gzip.compress(b"a\nb\n" * 100, mtime=0))
    with pytest.raises(InputError, match="it starts like gzip data"):
        read_all(path)


def test_invalid_utf8_names_the_line(tmp_path, monkeypatch):
    data = b"one\ntwo\nthr\xe9e\nfour\n"
    with pytest.raises(InputError, match=r"keys.txt line 3: not valid UTF-8 \(at byte 4 of the line\)"):
        read_all(write(tmp_path, data))
    monkeypatch.setattr(lines_module, "BLOCK_BYTES", 3)  # the error line now sits in a later block
    with pytest.raises(InputError, match=r"line 3: not valid UTF-8"):
        read_all(write(tmp_path, data))


def test_multibyte_character_across_block_boundary_is_fine(tmp_path, monkeypatch):
    data = "aé\n€x\n".encode()
    for block in range(1, len(data) + 1):
        monkeypatch.setattr(lines_module, "BLOCK_BYTES", block)
        assert read_all(write(tmp_path, data)) == ["aé".encode(), "€x".encode()]


def test_raw_bytes_accepts_anything(tmp_path):
    data = b"\x00\xff\n\xe9\r\n\x80"
    assert read_all(write(tmp_path, data), raw_bytes=True) == [b"\x00\xff", b"\xe9", b"\x80"]


@pytest.mark.parametrize("data", [b"", b"\n\n"])
def test_no_keys_is_an_error(tmp_path, data):
    options = {"skip_empty": True} if data else {}
    with pytest.raises(InputError, match=r"keys.txt: no keys"):
        read_all(write(tmp_path, data), **options)


def test_stdin(monkeypatch):
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(b"x\r\ny,z\n\n")))
    stream = open_keys("-")
    assert [k for b in stream for k in b.to_list()] == [b"x", b"y,z", b""]
    assert stream.description["source"] == "-"
    assert stream.size_bytes is None
    assert stream.stats.bytes_read == 8


def test_stdin_empty_is_an_error(monkeypatch):
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(b"")))
    with pytest.raises(InputError, match=r"^<stdin>: no keys$"):
        list(open_keys("-"))


@pytest.mark.parametrize(
    "size", [0, 1, lines_module._COUNT_CHUNK - 1, lines_module._COUNT_CHUNK, 3 * lines_module._COUNT_CHUNK + 7]
)
def test_lf_count_in_chunks_matches_whole_region_compare(size):
    # the chunked count (one small reused mask) against numpy's whole-region comparison, across chunk ends
    rng = np.random.default_rng(size)
    region = rng.choice(np.array([10, 13, 65, 0], dtype=np.uint8), size=size, p=[0.2, 0.1, 0.6, 0.1])
    assert lines_module._count_lf(region) == int(np.count_nonzero(region == 10))


@pytest.mark.parametrize("width", [0, 1, 5])
def test_fixed_width_offsets(width):
    # equal-length lines take the strided path: offsets step by the width, empty lines included
    region = np.frombuffer((b"x" * width + b"\n") * 9, dtype=np.uint8)
    data, offsets = lines_module._fixed_width(region, 9, drop_cr=False)
    assert offsets.dtype == np.int64
    assert offsets.tolist() == [i * width for i in range(10)]
    assert data.tobytes() == b"x" * (9 * width)
