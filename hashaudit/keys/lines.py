"""One key per line, byte for byte.

The stream is read in blocks of :data:`BLOCK_BYTES`; each block's complete lines are copied out without
their LF by a numba kernel (one pass; a second kernel also drops the CR of a CRLF, used once a file shows
CRs) and the unfinished last line moves on to the next block, so memory stays near one block whatever the
file size. A block whose lines all have the same length takes a strided-copy shortcut instead. Nothing else
is touched: commas, quotes, tabs and a CR that is not followed by an LF stay in the key.
"""

from __future__ import annotations

import codecs
from collections.abc import Iterator

import numpy as np

from hashaudit.errors import InputError
from hashaudit.keys._kernels import CR, LF, split_lines, split_lines_drop_cr
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.open import SNIFF_BYTES, Readable, sniff_compression
from hashaudit.keys.records import RecordBatch, SourceStats

BLOCK_BYTES = 16 << 20
"""Bytes read per block (tests shrink it to cross block boundaries everywhere)."""

_RAW_HINT = "use --raw-bytes to hash arbitrary bytes"


def _fill(stream: Readable, view: memoryview) -> int:
    """Read until ``view`` is full or the stream ends; return the bytes read."""
    total = 0
    while total < len(view):
        n = stream.readinto(view[total:])
        if not n:
            break
        total += n
    return total


_COUNT_CHUNK = 1 << 18


def _count_lf(region: np.ndarray) -> int:
    """LF bytes in ``region``, compared a chunk at a time into one small reused mask: ``region == LF`` whole would
    take a fresh mask as large as the block for every block, and first touch of fresh memory is what costs here."""
    mask = np.empty(min(len(region), _COUNT_CHUNK), dtype=np.bool_)
    total = 0
    for start in range(0, len(region), _COUNT_CHUNK):
        part = region[start : start + _COUNT_CHUNK]
        np.equal(part, LF, out=mask[: len(part)])
        total += int(np.count_nonzero(mask[: len(part)]))
    return total


def _find_lf(view: np.ndarray, last: bool) -> int:
    """Position of the first (or last) LF in ``view``, -1 if none; looks at a growing window from that end."""
    size = len(view)
    window = 4096
    while True:
        low = max(size - window, 0) if last else 0
        high = size if last else min(window, size)
        hits = np.flatnonzero(view[low:high] == LF)
        if len(hits):
            return low + int(hits[-1] if last else hits[0])
        if window >= size:
            return -1
        window *= 16


def _fixed_width(region: np.ndarray, lines: int, drop_cr: bool) -> tuple[np.ndarray, np.ndarray] | None:
    """Split ``region`` (``lines`` complete lines) with one strided copy when every line has the same length."""
    width = _find_lf(region, last=False)
    if lines * (width + 1) != len(region):
        return None
    rows = region.reshape(lines, width + 1)
    if not np.all(rows[:, width] == LF):
        return None
    if drop_cr and width:
        ends_with_cr = rows[:, width - 1] == CR
        if ends_with_cr.all():
            width -= 1
        elif ends_with_cr.any():
            return None
    data = rows[:, :width].copy().reshape(-1)  # a copy even when contiguous: the read buffer is reused
    offsets = np.arange(lines + 1, dtype=np.int64)
    offsets *= width  # in place: one array of offsets
    return data, offsets


class _Splitter:
    """Splits regions into keys, remembering whether the input has CRs (a CRLF file keeps having them)."""

    def __init__(self, drop_cr: bool) -> None:
        self.drop_cr = drop_cr
        self.saw_cr = False

    def split(self, region: np.ndarray, lines: int, final: bool) -> tuple[np.ndarray, np.ndarray]:
        """Keys of ``region``: its ``lines`` LF-terminated lines, plus the unterminated rest when ``final``."""
        tail = final and len(region) > 0 and region[-1] != LF
        if not tail and lines:
            fixed = _fixed_width(region, lines, self.drop_cr)
            if fixed is not None:
                return fixed
        out = np.empty(len(region) - lines + 1, dtype=np.uint8)  # +1: the branch-free kernel stores each LF too
        offsets = np.empty(lines + 2, dtype=np.int64)
        crs = 0
        if not (self.drop_cr and self.saw_cr):
            _, crs = split_lines(region, len(region), out, offsets)
        if self.drop_cr and (self.saw_cr or crs):
            self.saw_cr = True
            split_lines_drop_cr(region, len(region), out, offsets)
        keys = lines + 1 if tail else lines
        offsets = offsets[: keys + 1]
        return out[: offsets[-1]], offsets


def _ascii(region: np.ndarray) -> bool:
    """Whether every byte of ``region`` is below 0x80 (an empty region too)."""
    return not region.size or int(region.max()) < 0x80


class _TextCheck:
    """Refuses NUL bytes and invalid UTF-8 with a message that says where and what to do."""

    def __init__(self, name: str, hint: str | None) -> None:
        self.name = name
        self.hint = f"; {hint}" if hint else ""

    def check(self, region: np.ndarray, first_line: int, stream_offset: int) -> None:
        if _ascii(region):  # valid UTF-8 as it stands: only NUL bytes to look for (3x faster than decoding)
            if not region.all():
                self.no_nul(region, stream_offset)
            return
        try:
            text, _ = codecs.utf_8_decode(region.data, "strict", True)
        except UnicodeDecodeError as exc:
            self.no_nul(region, stream_offset)
            line_start = _find_lf(region[: exc.start], last=True) + 1
            line = first_line + _count_lf(region[: exc.start])
            # The position only: even one byte of a key is the key's content, which messages never show.
            raise InputError(
                f"{self.name} line {line}: not valid UTF-8 (at byte {exc.start - line_start + 1} of the line)"
                f"{self.hint}"
            ) from None
        if "\x00" in text:
            self.no_nul(region, stream_offset)

    def is_text(self, region: np.ndarray, stream_offset: int) -> bool:
        """True when ``region`` is UTF-8 without NUL bytes; raises only for a compressed file without its suffix."""
        try:
            text, _ = codecs.utf_8_decode(region.data, "strict", True)
        except UnicodeDecodeError:
            text = "\x00"
        if "\x00" not in text:
            return True
        kind = sniff_compression(region[:SNIFF_BYTES].tobytes()) if stream_offset == 0 else None
        if kind is not None:
            # Not a few bad records but a whole file read the wrong way: skipping would hash garbage.
            raise InputError(f"{self.name}: starts like {kind} data: give the file its compression suffix")
        return False

    def no_nul(self, region: np.ndarray, stream_offset: int) -> None:
        """Raise the binary-file error when ``region`` holds a NUL byte."""
        nul = np.flatnonzero(region == 0)
        if not len(nul):
            return
        where = ""
        kind = sniff_compression(region[:SNIFF_BYTES].tobytes()) if stream_offset == 0 else None
        if kind is not None:
            where = f" (it starts like {kind} data: give the file its compression suffix)"
        raise InputError(
            f"{self.name}: looks like a binary file (NUL byte at offset {stream_offset + int(nul[0])}){self.hint}"
            f"{where}"
        )


def _not_text(data: np.ndarray, offsets: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Masks of the keys (lines) that are not valid UTF-8, and of those that hold a NUL byte.

    Only lines with a byte of 0x80 or above go through the UTF-8 decoder (one Python call each): this runs on
    a block that failed the whole-block check, never on the fast path.
    """
    base = int(offsets[0])
    data = data[base : int(offsets[-1])]
    offsets = offsets - base
    flags = (data >= 0x80).view(np.uint8) | ((data == 0).view(np.uint8) << 1)
    per_line = np.zeros(len(offsets) - 1, dtype=np.uint8)
    nonempty = np.flatnonzero(np.diff(offsets))
    if len(nonempty):
        # Keys are back to back, so the segment from one non-empty key's start to the next one's is that key.
        per_line[nonempty] = np.bitwise_or.reduceat(flags, offsets[nonempty])
    bad_utf8 = np.zeros(len(per_line), dtype=bool)
    for i in np.flatnonzero(per_line & 1).tolist():
        try:
            codecs.utf_8_decode(data[offsets[i] : offsets[i + 1]].tobytes(), "strict", True)
        except UnicodeDecodeError:
            bad_utf8[i] = True
    return bad_utf8, (per_line & 2).astype(bool) & ~bad_utf8


def _kept_lines(
    block: KeyBatch, first_line: int, batch_keys: int, stats: SourceStats | None, dropped: dict[str, np.ndarray]
) -> Iterator[RecordBatch]:
    """The lines of a block that no mask of ``dropped`` (reason -> mask) marks, numbered; the others counted as
    skipped records under their first reason."""
    gone = np.zeros(len(block), dtype=bool)
    for reason, mask in dropped.items():
        fresh = mask & ~gone
        if stats is not None:
            stats.skip(reason, int(np.count_nonzero(fresh)))
            stats.records += int(np.count_nonzero(fresh))
        gone |= fresh
    kept = np.flatnonzero(~gone)
    keys = block.take(kept)
    numbers = first_line + kept
    for start in range(0, len(kept), batch_keys):
        stop = min(start + batch_keys, len(kept))
        yield RecordBatch(keys.slice(start, stop), int(numbers[start]), numbers[start:stop])


def too_long_message(where: str, limit: int) -> str:
    """The message for a record (``where``: source and line or row) whose key is longer than ``max_key_bytes``."""
    return (
        f"{where}: a key of more than {limit:,} bytes (raise --max-key-bytes, or skip such records with "
        f"--on-bad-record skip)"
    )


def read_lines(
    stream: Readable,
    name: str,
    *,
    keep_cr: bool = False,
    check_text: bool = True,
    batch_keys: int = 1 << 20,
    hint: str | None = _RAW_HINT,
    block_bytes: int | None = None,
    skip_bad: bool = False,
    stats: SourceStats | None = None,
    max_key_bytes: int | None = None,
) -> Iterator[RecordBatch]:
    """Yield the lines of ``stream`` as keys, in batches of at most ``batch_keys``.

    Parameters
    ----------
    stream : binary file-like
        Supports ``readinto``.
    name : str
        How messages name the source.
    keep_cr : bool
        Keep a CR that ends a line (before its LF) as part of the key.
    check_text : bool
        Refuse NUL bytes and invalid UTF-8 (``InputError`` naming the offset or line).
    batch_keys : int
        Most keys per batch.
    hint : str or None
        Advice appended to the binary / UTF-8 errors.
    block_bytes : int or None
        Bytes per read; default :data:`BLOCK_BYTES`.
    skip_bad : bool
        With ``check_text``: drop a line that is not UTF-8 or holds a NUL byte instead of raising (a file that
        starts like compressed data is still an error). Only a block where the fast whole-block check failed is
        looked at line by line.
    stats : SourceStats or None
        Where dropped lines are counted, as records read and skipped (``bad_utf8``, ``nul_byte``, ``too_long``).
    max_key_bytes : int or None
        Longest line accepted as a key: a longer one raises ``InputError`` naming its line (or, with
        ``skip_bad``, is dropped and counted as ``too_long``) as soon as that many bytes of it are read, so a file
        without line breaks never fills memory. None: no limit.

    Yields
    ------
    RecordBatch
        Keys with 1-based line numbers. A file ending in LF has no extra empty key after it; an
        unterminated last line is a key.
    """
    block = int(block_bytes or BLOCK_BYTES)
    slack = block // 8  # room for the unfinished line carried over, so the buffer is rarely reallocated
    checker = _TextCheck(name, hint) if check_text else None
    splitter = _Splitter(drop_cr=not keep_cr)
    limit = max_key_bytes
    buf = np.empty(block + slack, dtype=np.uint8)
    have = 0
    line_no = 1
    stream_offset = 0
    eof = False
    discarding = False  # skipping the rest of a line longer than the limit
    while not eof:
        if len(buf) - have < block:  # a long line is being carried: grow geometrically, not block by block
            grown = np.empty(max(have + block + slack, 2 * len(buf)), dtype=np.uint8)
            grown[:have] = buf[:have]
            buf = grown
        got = _fill(stream, buf.data[have : have + block])
        have += got
        eof = got < block
        if discarding:
            lf = _find_lf(buf[:have], last=False)
            stream_offset += have if lf < 0 else lf + 1
            if lf < 0:
                have = 0
                continue
            buf[: have - lf - 1] = buf[lf + 1 : have]
            have -= lf + 1
            line_no += 1
            discarding = False
        if eof:
            end = have
        else:
            end = _find_lf(buf[:have], last=True) + 1
            if end == 0:
                if limit is not None and have > limit:  # one line already longer than any key may be
                    if checker is not None:
                        checker.no_nul(buf[:have], stream_offset)
                    if not skip_bad:
                        raise InputError(too_long_message(f"{name} line {line_no}", limit))
                    if stats is not None:
                        stats.skip("too_long")
                        stats.records += 1
                    stream_offset += have
                    have = 0
                    discarding = True
                continue  # no complete line yet: read on
        region = buf[:end]
        lines = _count_lf(region)
        text = True
        if checker is not None:
            if skip_bad:
                text = checker.is_text(region, stream_offset)
            else:
                checker.check(region, line_no, stream_offset)
        data, offsets = splitter.split(region, lines, eof)
        keys = len(offsets) - 1
        dropped: dict[str, np.ndarray] = {}
        if not text:
            dropped["bad_utf8"], dropped["nul_byte"] = _not_text(data, offsets)
        if limit is not None and end > limit:
            too_long = np.diff(offsets) > limit
            if too_long.any():
                if not skip_bad:
                    raise InputError(too_long_message(f"{name} line {line_no + int(np.argmax(too_long))}", limit))
                dropped["too_long"] = too_long
        if dropped:
            yield from _kept_lines(KeyBatch(data, offsets), line_no, batch_keys, stats, dropped)
        else:
            for start in range(0, keys, batch_keys):
                stop = min(start + batch_keys, keys)
                yield RecordBatch(KeyBatch(data, offsets[start : stop + 1]), line_no + start)
        del data, offsets  # the consumer may keep its batches; this generator need not keep them too
        line_no += keys
        stream_offset += end
        carry = have - end
        buf[:carry] = buf[end:have]
        have = carry
