"""Open a key source (a file or standard input) as one binary stream, decompressing on the way.

Compression is chosen by the file suffix (``.gz``, ``.bz2``, ``.xz``, ``.zst``); standard input, which has
no name, is recognised by its first bytes instead. Every read error of the stream, including a truncated or
corrupt compressed file, surfaces as one :class:`~hashaudit.errors.InputError` naming the source.
"""

from __future__ import annotations

import bz2
import gzip
import io
import lzma
import os
import stat
import sys
import zlib
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Protocol

import zstandard

from hashaudit.errors import InputError

STDIN = "-"

COMPRESSION_SUFFIXES = {".gz": "gzip", ".bz2": "bz2", ".xz": "xz", ".zst": "zstd"}

# Magic numbers: gzip (RFC 1952: ID1 ID2 CM=deflate), xz (.xz file format 1.0.4, 2.1.1.1), zstd frame
# (RFC 8878, 3.1.1) and a bzip2 stream header followed by the first block's or the end-of-stream magic.
_MAGIC = (
    (b"\x1f\x8b\x08", "gzip"),
    (b"\xfd7zXZ\x00", "xz"),
    (b"\x28\xb5\x2f\xfd", "zstd"),
)
_BZ2_BLOCK_MAGIC = (b"\x31\x41\x59\x26\x53\x59", b"\x17\x72\x45\x38\x50\x90")
SNIFF_BYTES = 10

FORMAT_SUFFIXES = {
    ".csv": "csv",
    ".tsv": "tsv",
    ".tab": "tsv",
    ".jsonl": "jsonl",
    ".ndjson": "jsonl",
    ".parquet": "parquet",
    ".pq": "parquet",
    ".arrow": "arrow",
    ".feather": "arrow",
    ".ipc": "arrow",
}


class Readable(Protocol):
    """What the readers need of a stream: ``readinto`` and ``read`` (binary)."""

    def readinto(self, buffer: Any, /) -> int | None: ...

    def read(self, size: int = -1, /) -> bytes | None: ...


_READ_ERRORS = (OSError, EOFError, zlib.error, lzma.LZMAError, zstandard.ZstdError)
# zstd's decompressobj returns all the output of its input at once, and a file of repeated lines can expand
# ten thousand times; so input is fed in chunks sized to give about this much output each.
_ZSTD_OUTPUT_TARGET = 8 << 20
_ZSTD_CHUNK_BOUNDS = (1 << 10, 1 << 20)


def display_name(source: str) -> str:
    """How messages name a source: the path as given (a URL's password masked), ``<stdin>`` for ``-``."""
    if source == STDIN:
        return "<stdin>"
    if "://" in source:  # a database URL read as a file (--format lines): its password stays out of messages
        from hashaudit.keys.sql import mask_url

        return mask_url(source)
    return source


def compression_for(source: str) -> str | None:
    """Compression implied by the file name's suffix (``gzip``, ``bz2``, ``xz``, ``zstd``) or None."""
    if source == STDIN:
        return None
    return COMPRESSION_SUFFIXES.get(os.path.splitext(source)[1].lower())


def sniff_compression(head: bytes) -> str | None:
    """Compression whose magic number ``head`` (the first few bytes of a stream) starts with, or None."""
    for magic, name in _MAGIC:
        if head.startswith(magic):
            return name
    if len(head) >= 10 and head[:3] == b"BZh" and head[3:4] in b"123456789" and head[4:10] in _BZ2_BLOCK_MAGIC:
        return "bz2"
    return None


def format_for(source: str) -> str:
    """Source format implied by the suffix left after removing a compression suffix; ``lines`` otherwise."""
    if source == STDIN:
        return "lines"
    stem = source
    if compression_for(source) is not None:
        stem = os.path.splitext(source)[0]
    return FORMAT_SUFFIXES.get(os.path.splitext(stem)[1].lower(), "lines")


def source_size(source: str) -> int | None:
    """On-disk size of a regular file (or of standard input redirected from one); raise InputError if absent."""
    try:
        if source == STDIN:
            try:
                st = os.fstat(sys.stdin.fileno())
            except (AttributeError, OSError, ValueError, io.UnsupportedOperation):
                return None
        else:
            st = os.stat(source)
    except OSError as exc:
        raise InputError(f"{display_name(source)}: cannot open: {exc.strerror or type(exc).__name__}") from None
    if stat.S_ISDIR(st.st_mode):
        raise InputError(f"{display_name(source)}: is a directory, not a file of keys")
    if source != STDIN and (stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode)):
        # /dev/zero or /dev/urandom never end; a disk read as keys is a mistake. A pipe (or - ) is still welcome.
        raise InputError(f"{display_name(source)}: is a device, not a file of keys (pipe a bounded part of it instead)")
    return st.st_size if stat.S_ISREG(st.st_mode) else None


class _Counting(io.RawIOBase):
    """Counts the bytes taken from the underlying stream (compressed bytes for compressed sources)."""

    def __init__(self, inner: Readable) -> None:
        self._inner = inner
        self.bytes_read = 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[no-untyped-def, override]
        n = self._inner.readinto(buffer) or 0
        self.bytes_read += n
        return n


class PrefixedReader(io.RawIOBase):
    """Replays bytes already taken from a stream (to sniff or peek) before the rest of it."""

    def __init__(self, prefix: bytes, inner: Readable) -> None:
        self._prefix = memoryview(prefix)
        self._inner = inner

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[no-untyped-def, override]
        if len(self._prefix):
            n = min(len(buffer), len(self._prefix))
            memoryview(buffer).cast("B")[:n] = self._prefix[:n]
            self._prefix = self._prefix[n:]
            return n
        return self._inner.readinto(buffer) or 0


class _ZstdReader(io.RawIOBase):
    """Zstandard frames one after another; unlike the package's stream reader it notices a cut-off frame."""

    def __init__(self, inner: io.RawIOBase) -> None:
        self._inner = inner
        self._decompressor = zstandard.ZstdDecompressor()
        self._frame = self._decompressor.decompressobj()
        self._in_frame = False
        self._pending = memoryview(b"")
        self._eof = False
        self._chunk = _ZSTD_CHUNK_BOUNDS[0]

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[no-untyped-def, override]
        while not len(self._pending):
            if self._eof:
                return 0
            chunk = self._inner.read(self._chunk)
            if not chunk:
                self._eof = True
                if self._in_frame:
                    raise EOFError("compressed data ends inside a zstd frame (truncated file?)")
                return 0
            self._pending = memoryview(self._decompress(chunk))
            ratio = max(len(self._pending), 1) / len(chunk)
            self._chunk = int(min(max(_ZSTD_OUTPUT_TARGET / ratio, _ZSTD_CHUNK_BOUNDS[0]), _ZSTD_CHUNK_BOUNDS[1]))
        n = min(len(buffer), len(self._pending))
        memoryview(buffer).cast("B")[:n] = self._pending[:n]
        self._pending = self._pending[n:]
        return n

    def _decompress(self, chunk: bytes) -> bytes:
        parts = []
        while chunk:
            self._in_frame = True
            parts.append(self._frame.decompress(chunk))
            if not self._frame.eof:
                break
            # A frame ended inside this chunk; what follows is the next frame (zstd allows concatenation).
            chunk = self._frame.unused_data
            self._frame = self._decompressor.decompressobj()
            self._in_frame = False
        return b"".join(parts)


class _Guarded(io.RawIOBase):
    """Turns any read failure (I/O, truncated or corrupt compressed data) into one InputError line."""

    def __init__(self, inner: Readable, name: str, compression: str | None) -> None:
        self._inner = inner
        self._name = name
        self._what = f"{compression} data" if compression else "input"

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[no-untyped-def, override]
        try:
            return self._inner.readinto(buffer) or 0
        except InputError:
            raise
        except _READ_ERRORS as exc:
            detail = " ".join(str(exc).split()) or type(exc).__name__
            raise InputError(f"{self._name}: cannot read {self._what}: {detail}") from None


@dataclass
class OpenedSource:
    """An open source: ``stream`` yields the decompressed bytes; ``bytes_read`` counts bytes taken from disk."""

    stream: io.RawIOBase
    compression: str | None
    _counter: _Counting

    @property
    def bytes_read(self) -> int:
        """Bytes taken from the file or pipe so far (compressed bytes for a compressed source)."""
        return self._counter.bytes_read


def _read_head(stream: io.RawIOBase, size: int) -> bytes:
    head = bytearray()
    while len(head) < size:
        chunk = stream.read(size - len(head))
        if not chunk:
            break
        head += chunk
    return bytes(head)


def _decompressing(raw: Any, compression: str | None) -> Readable:
    if compression == "gzip":
        return gzip.GzipFile(fileobj=raw, mode="rb")
    if compression == "bz2":
        return bz2.BZ2File(raw, mode="rb")
    if compression == "xz":
        return lzma.LZMAFile(raw, mode="rb")
    if compression == "zstd":
        return _ZstdReader(raw)
    return raw


@contextmanager
def open_source(source: str) -> Iterator[OpenedSource]:
    """Open ``source`` (a path or ``-`` for standard input) for reading its decompressed bytes.

    Parameters
    ----------
    source : str
        A file path, or ``-`` for standard input (``sys.stdin.buffer``, never closed here).

    Yields
    ------
    OpenedSource
        ``stream`` supports ``readinto`` and ``read``; its read errors are :class:`InputError`.

    Raises
    ------
    InputError
        The file cannot be opened or read.
    """
    name = display_name(source)
    if source == STDIN:
        stdin: Any = sys.stdin.buffer  # a BufferedReader (has readinto), typed as the narrower BinaryIO
        counter = _Counting(stdin)
        try:
            head = _read_head(counter, SNIFF_BYTES)
        except OSError as exc:
            raise InputError(f"{name}: cannot read: {exc.strerror or type(exc).__name__}") from None
        compression = sniff_compression(head)
        raw: io.RawIOBase = PrefixedReader(head, counter)
        decompressed = _decompressing(raw, compression)
        yield OpenedSource(_Guarded(decompressed, name, compression), compression, counter)
        return
    compression = compression_for(source)
    try:
        file = open(source, "rb", buffering=0)  # noqa: SIM115 - closed below, after the generator finishes
    except OSError as exc:
        raise InputError(f"{name}: cannot open: {exc.strerror or type(exc).__name__}") from None
    try:
        counter = _Counting(file)
        decompressed = _decompressing(counter, compression)
        yield OpenedSource(_Guarded(decompressed, name, compression), compression, counter)
    finally:
        file.close()
