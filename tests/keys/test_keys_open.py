"""Opening sources: compression by suffix or magic bytes, truncated files, missing files, standard input."""

from __future__ import annotations

import bz2
import gzip
import io
import lzma
import sys

import pytest
import zstandard

from hashaudit.errors import InputError
from hashaudit.keys import SourceOptions, open_keys
from hashaudit.keys import lines as lines_module
from hashaudit.keys.open import format_for, sniff_compression

KEYS = [b"alpha", b"beta,with comma", b'"gamma"', b"", b"\xc3\xa9psilon", b"last"]
TEXT = b"\n".join(KEYS) + b"\n"

# Each compressor comes from the standard library, or the zstandard package for .zst.
COMPRESSORS = {
    ".gz": ("gzip", lambda data: gzip.compress(data, mtime=0)),
    ".bz2": ("bz2", bz2.compress),
    ".xz": ("xz", lambda data: lzma.compress(data, format=lzma.FORMAT_XZ)),
    ".zst": ("zstd", lambda data: zstandard.ZstdCompressor().compress(data)),
}


def read_all(path, options: SourceOptions | None = None) -> list[bytes]:
    return [k for batch in open_keys(path, options or SourceOptions()) for k in batch.to_list()]


def fake_stdin(monkeypatch, data: bytes) -> None:
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(data)))


@pytest.mark.parametrize("suffix", sorted(COMPRESSORS))
def test_compressed_round_trip(tmp_path, suffix):
    name, compress = COMPRESSORS[suffix]
    blob = compress(TEXT)
    path = tmp_path / f"keys.txt{suffix}"
    path.write_bytes(blob)
    stream = open_keys(path)
    assert stream.description["compression"] == name
    assert stream.description["format"] == "lines"
    assert stream.size_bytes == len(blob)
    assert [k for b in stream for k in b.to_list()] == KEYS
    assert stream.stats.bytes_read == len(blob)


@pytest.mark.parametrize("suffix", sorted(COMPRESSORS))
def test_compressed_across_small_blocks(tmp_path, monkeypatch, suffix):
    _, compress = COMPRESSORS[suffix]
    text = b"".join(b"key-%05d\r\n" % i for i in range(3000))
    path = tmp_path / f"many{suffix.upper()}"  # suffixes match in any case
    path.write_bytes(compress(text))
    monkeypatch.setattr(lines_module, "BLOCK_BYTES", 777)
    assert read_all(path) == [b"key-%05d" % i for i in range(3000)]


def test_concatenated_members_and_frames(tmp_path):
    gz = tmp_path / "two.gz"
    gz.write_bytes(gzip.compress(b"a\nb\n", mtime=0) + gzip.compress(b"c\n", mtime=0))
    assert read_all(gz) == [b"a", b"b", b"c"]
    zst = tmp_path / "two.zst"
    compressor = zstandard.ZstdCompressor()
    zst.write_bytes(compressor.compress(b"a\nb\n") + compressor.compress(b"c\n"))
    assert read_all(zst) == [b"a", b"b", b"c"]


@pytest.mark.parametrize("suffix", sorted(COMPRESSORS))
def test_truncated_file_is_an_input_error(tmp_path, suffix):
    name, compress = COMPRESSORS[suffix]
    blob = compress(b"".join(b"some key %d\n" % i for i in range(5000)))
    path = tmp_path / f"cut.txt{suffix}"
    path.write_bytes(blob[: len(blob) // 2])
    with pytest.raises(InputError, match=rf"cut\.txt{suffix}: cannot read {name} data: "):
        read_all(path)


@pytest.mark.parametrize("suffix", sorted(COMPRESSORS))
def test_not_compressed_despite_suffix(tmp_path, suffix):
    path = tmp_path / f"plain.txt{suffix}"
    path.write_bytes(b"these are just words\n" * 10)
    with pytest.raises(InputError, match=r"plain\.txt.*: cannot read .* data: "):
        read_all(path)


def test_truncated_gzip_csv_is_an_input_error(tmp_path):
    blob = gzip.compress(b"id\n" + b"".join(b"%d\n" % i for i in range(20000)), mtime=0)
    path = tmp_path / "cut.csv.gz"
    path.write_bytes(blob[:-30])
    with pytest.raises(InputError, match=r"cut\.csv\.gz: cannot read gzip data"):
        read_all(path)


@pytest.mark.parametrize("suffix", sorted(COMPRESSORS))
def test_stdin_compression_is_sniffed(monkeypatch, suffix):
    name, compress = COMPRESSORS[suffix]
    fake_stdin(monkeypatch, compress(TEXT))
    stream = open_keys("-")
    assert [k for b in stream for k in b.to_list()] == KEYS
    assert stream.description["compression"] == name


def test_stdin_short_plain_input(monkeypatch):
    fake_stdin(monkeypatch, b"ab")  # shorter than the bytes sniffed
    assert read_all("-") == [b"ab"]


def test_sniff_compression():
    assert sniff_compression(gzip.compress(b"x")) == "gzip"
    assert sniff_compression(bz2.compress(b"x")) == "bz2"
    assert sniff_compression(bz2.compress(b"")) == "bz2"
    assert sniff_compression(lzma.compress(b"x")) == "xz"
    assert sniff_compression(zstandard.ZstdCompressor().compress(b"x")) == "zstd"
    assert sniff_compression(b"BZh9 is a fine key\n") is None
    assert sniff_compression(b"") is None


@pytest.mark.parametrize(
    ("name", "fmt"),
    [
        ("k.csv", "csv"),
        ("k.CSV.gz", "csv"),
        ("k.tsv.zst", "tsv"),
        ("k.tab", "tsv"),
        ("k.jsonl.xz", "jsonl"),
        ("k.ndjson", "jsonl"),
        ("k.txt", "lines"),
        ("k.gz", "lines"),
        ("k", "lines"),
        ("k.csv.txt", "lines"),
        ("-", "lines"),
    ],
)
def test_format_by_suffix(name, fmt):
    assert format_for(name) == fmt


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match=r"nothing\.txt: cannot open: No such file or directory"):
        open_keys(tmp_path / "nothing.txt")


def test_directory(tmp_path):
    with pytest.raises(InputError, match="is a directory"):
        open_keys(tmp_path)


def test_source_is_never_written(tmp_path):
    path = tmp_path / "keys.txt.gz"
    blob = gzip.compress(TEXT, mtime=0)
    path.write_bytes(blob)
    path.chmod(0o444)
    before = path.stat().st_mtime_ns
    assert read_all(path) == KEYS
    assert path.read_bytes() == blob
    assert path.stat().st_mtime_ns == before
