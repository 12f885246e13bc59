"""Keys from one or more columns of a delimited file (CSV with RFC 4180 quoting, or TSV without quoting).

pyarrow's streaming CSV reader does the parsing, with the key columns read as ``large_binary`` so a field's
bytes reach the hash unchanged (no type inference: ``007`` stays ``007``, ``NULL`` stays ``NULL``). A column
given by number needs the header's names before the reader opens, so the first row is read ahead with the
standard :mod:`csv` module and then replayed to pyarrow.

pyarrow ends a quoted field at the end of the input without a word when its closing quote is missing, so a stray
quote in the last column would silently turn the rest of the file into one value. :class:`_QuoteWatch` follows the
quotes of the bytes pyarrow reads (a quote opens a field only at its start; inside, ``""`` is a quote and any other
quote closes it, as pyarrow reads them) and an input that ends inside a quoted field is an error.

Messages name the row and the column, never a field's text: pyarrow's own message for a row with the wrong number
of fields ends with the whole row, so that error is worded here from the numbers pyarrow hands to its invalid-row
handler (the reader runs on one thread, where pyarrow knows the row's number). A weight column is read as bytes and
parsed here, so a bad weight is reported by row and reason ("is negative") rather than by pyarrow quoting it.
"""

from __future__ import annotations

import hashaudit._numba_setup  # noqa: F401

# isort: split

import csv
import io
import math
import threading
import time
import weakref
from collections.abc import Iterator

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pa_csv
from numba import njit

from hashaudit.errors import InputError
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.open import PrefixedReader, Readable
from hashaudit.keys.options import SourceOptions
from hashaudit.keys.records import RecordBatch, SourceStats, arrow_reason, weight_problem
from hashaudit.settings import SettingError

CSV_BLOCK_BYTES = 4 << 20
"""Bytes pyarrow parses per block (tests shrink it)."""

_PROBE_BYTES = 1 << 16
_MAX_FIRST_ROW_BYTES = 64 << 20
_LISTED_COLUMNS = 20


@njit(cache=True, nogil=True)
def _follow_quotes(data, delimiter, state):  # pragma: no cover - compiled
    """Advance ``state`` = [previous byte, inside a quoted field, a quote seen inside one, offset of the quote that
    opened it, offset of ``data`` in the input] over ``data``."""
    previous, quoted, pending, base = state[0], state[1], state[2], state[4]
    for i in range(data.shape[0]):
        c = data[i]
        if c != 34:  # not a quote
            if pending:  # a lone quote inside the field: it closed the field
                quoted, pending = 0, 0
            previous = c
            continue
        if quoted:
            pending = 1 - pending  # a first quote may close the field; a second makes it a literal ""
        elif previous == delimiter or previous == 10 or previous == 13:
            quoted, state[3] = 1, base + i  # a quote at the start of a field opens it
        previous = c
    state[0], state[1], state[2], state[4] = previous, quoted, pending, base + data.shape[0]


class _QuoteWatch(io.RawIOBase):
    """Passes a stream's bytes through, following the quotes (see the module notes)."""

    def __init__(self, inner: io.RawIOBase, delimiter: str) -> None:
        self._inner = inner
        self._delimiter = ord(delimiter)
        self._state = np.array([10, 0, 0, 0, 0], dtype=np.int64)  # the input starts as after a line break

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[no-untyped-def, override]
        n = self._inner.readinto(buffer) or 0
        if n:
            _follow_quotes(np.frombuffer(buffer, dtype=np.uint8, count=n), self._delimiter, self._state)
        return n

    def unclosed(self) -> int | None:
        """The byte offset of a quote whose field the input ended in, or None."""
        return int(self._state[3]) if self._state[1] and not self._state[2] else None


class _Handoff(io.RawIOBase):
    """The stream pyarrow reads, which only pyarrow holds: once it is freed, pyarrow will not call it again.

    pyarrow reads ahead on a thread of its own, which calls this object's ``readinto`` (Python code) and goes on for
    a moment after the reader is dropped. If such a call lands while the interpreter shuts down, the process aborts
    ("PyGILState_Release ... finalizing", "terminate called without an active exception") instead of exiting with
    its one line of error. :func:`_await_release` waits for pyarrow to let go of this object before the reader
    function returns, so no call is left for shutdown.
    """

    def __init__(self, inner: io.RawIOBase) -> None:
        self._inner = inner

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[no-untyped-def, override]
        return self._inner.readinto(buffer) or 0


# A read from a file ends in milliseconds; one from a pipe whose writer stalls may not end at all, and the process
# must still exit (it may then abort, as it would have without the wait).
_RELEASE_WAIT_SECONDS = 5.0


def _await_release(released: weakref.ref) -> None:
    """Wait (without the GIL, so pyarrow's thread can finish its read) until pyarrow has freed the stream."""
    deadline = time.monotonic() + _RELEASE_WAIT_SECONDS
    while released() is not None and time.monotonic() < deadline:
        time.sleep(0.001)


def delimiter_for(fmt: str, options: SourceOptions) -> str:
    """The delimiter in force: ``options.delimiter``, else comma for csv and tab for tsv."""
    delimiter = options.delimiter if options.delimiter is not None else ("," if fmt == "csv" else "\t")
    if len(delimiter) != 1 or len(delimiter.encode("utf-8")) != 1 or delimiter in '\r\n"':
        raise SettingError("delimiter", f"{delimiter!r} must be one ASCII character other than a quote, CR or LF")
    return delimiter


def _first_row(stream: Readable, name: str, delimiter: str, quoted: bool) -> tuple[bytes, list[str] | None]:
    """Read ahead until the first non-empty row is complete; return the bytes read and that row (None: no rows)."""
    prefix = b""
    while True:
        chunk = stream.read(max(_PROBE_BYTES, len(prefix)))
        prefix += chunk or b""
        text = prefix.decode("utf-8-sig", "replace")
        buffer = io.StringIO(text, newline="")
        reader = csv.reader(buffer, delimiter=delimiter, quoting=csv.QUOTE_MINIMAL if quoted else csv.QUOTE_NONE)
        try:
            row = next((r for r in reader if r), None)
        except csv.Error as exc:
            raise InputError(f"{name}: cannot read the first row: {exc}") from None
        # The row is whole once text follows it, or when the input has ended.
        if not chunk or buffer.tell() < len(text):
            return prefix, row
        if len(prefix) > _MAX_FIRST_ROW_BYTES:
            raise InputError(f"{name}: the first row is longer than {_MAX_FIRST_ROW_BYTES >> 20} MiB")


def _listing(names: list[str]) -> str:
    shown = ", ".join(repr(n) for n in names[:_LISTED_COLUMNS])
    return shown + (f", ... ({len(names)} in all)" if len(names) > _LISTED_COLUMNS else "")


def resolve_columns(columns: tuple[str, ...], names: list[str], header: bool, name: str) -> list[str]:
    """Map each requested column (a header name, or a 0-based number) to the reader's column name.

    A header name wins over a number, so a column titled ``2024`` is found by its title.

    Raises
    ------
    InputError
        A column the file does not have (the message lists the columns it has).
    UsageError
        A column given by name when the file has no header.
    """
    resolved = []
    for column in columns or ("0",):
        if header and column in names:
            resolved.append(column)
        elif column.isascii() and column.isdigit():
            index = int(column)
            if index >= len(names):
                have = f"the header has {_listing(names)}" if header else f"the first row has {len(names)} fields"
                raise InputError(f"{name}: no column {index} (numbered from 0); {have}")
            resolved.append(names[index])
        elif not header:
            raise SettingError(
                "columns",
                f"{column!r}: the files have no header row ({{header}} false), so give columns as 0-based numbers",
            )
        else:
            raise InputError(f"{name}: no column {column!r}; the header has {_listing(names)}")
    return resolved


def _weight_error(column: pa.ChunkedArray, values: np.ndarray, index: int) -> str:
    """Why the weight of row ``index`` of a block is not usable, without showing it (``"is empty"``, ``"is
    negative"``)."""
    raw = column[index].as_py()
    if not (raw or b"").strip():
        return "is empty"
    return weight_problem(float(values[index])) or "is not a number"


def _parse_weight(raw: bytes | None) -> float:
    """One weight field as a number (NaN when it is not one), the way the CSV reader parses a float column."""
    try:
        text = (raw or b"").decode("ascii").strip()
        return math.nan if "_" in text else float(text)
    except (UnicodeDecodeError, ValueError):
        return math.nan


def _weights_or_bad(column: pa.ChunkedArray) -> tuple[np.ndarray, np.ndarray]:
    """A weight column read as bytes: its values as float64 and the mask of rows whose weight is not a number of
    at least 0. Arrow parses the column in one call; only a block with a field it cannot parse goes row by row."""
    try:
        text = pc.utf8_trim_whitespace(column.cast(pa.large_string()))
        values = text.cast(pa.float64()).to_numpy(zero_copy_only=False)
    except pa.ArrowException:
        values = np.array([_parse_weight(v) for v in column.to_pylist()], dtype=np.float64)
    values = np.ascontiguousarray(values, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        bad = ~np.isfinite(values) | (values < 0)
    return values, bad


def read_delimited(
    stream: Readable, name: str, fmt: str, options: SourceOptions, stats: SourceStats
) -> Iterator[RecordBatch]:
    """Yield the key column(s) of a csv or tsv stream, joined with ``options.join`` when there are several.

    Parameters
    ----------
    stream : binary file-like
        The decompressed source.
    name : str
        How messages name the source.
    fmt : {"csv", "tsv"}
        csv follows RFC 4180 (quoted fields may hold delimiters, quotes and line breaks); tsv has no quoting,
        so quotes are ordinary bytes of a key.
    options : SourceOptions
        Uses ``columns``, ``join``, ``delimiter``, ``header``, ``weight``, ``batch_keys`` and ``on_bad_record``
        (``skip``: a row whose weight is not a number of at least 0 is dropped and counted as ``bad_weight``, a row
        with the wrong number of fields as ``ragged_row``; a quoted field that never closes is still an error).
    stats : SourceStats
        ``records`` counts data rows.

    Yields
    ------
    RecordBatch
        Keys numbered by data row (1-based, the header not counted). An empty field is an empty key.

    Raises
    ------
    InputError
        Missing column, a ragged row (``"row 3 has 5 fields, the header 4"``), a bad weight (``"row 3: weight 'w'
        is negative"``) or any other parse error (pyarrow's message on one line, without the text it quotes).
    """
    delimiter = delimiter_for(fmt, options)
    quoted = fmt == "csv"
    prefix, first = _first_row(stream, name, delimiter, quoted)
    if first is None:
        return
    names = first if options.header else [f"f{i}" for i in range(len(first))]
    columns = resolve_columns(options.columns, names, options.header, name)
    weight = None
    if options.weight_column is not None:
        (weight,) = resolve_columns((options.weight_column,), names, options.header, name)
        if weight in columns:
            raise SettingError("weight_column", f"{options.weight_column!r} is also a key column")
    wanted = list(dict.fromkeys(columns + ([weight] if weight is not None else [])))
    skip_bad = options.on_bad_record == "skip"
    # One thread: pyarrow numbers the rows only then (its invalid-row handler gets None otherwise), and a message
    # must name the row. The streaming reader parses one block after another either way.
    reader_options = pa_csv.ReadOptions(
        block_size=CSV_BLOCK_BYTES, autogenerate_column_names=not options.header, use_threads=False
    )
    ragged = [0]
    first_ragged: list[tuple[int | None, int, int]] = []  # (row number, expected fields, fields): never its text
    counting = threading.Lock()

    def on_ragged(row: pa_csv.InvalidRow) -> str:  # called by pyarrow for a row with the wrong number of fields
        with counting:
            ragged[0] += 1
            if not first_ragged:
                first_ragged.append((row.number, row.expected_columns, row.actual_columns))
        return "skip" if skip_bad else "error"

    parse_options = pa_csv.ParseOptions(
        delimiter=delimiter,
        quote_char='"' if quoted else False,
        newlines_in_values=quoted,
        invalid_row_handler=on_ragged,
    )
    types = {c: pa.large_binary() for c in columns}
    if weight is not None:
        types[weight] = pa.large_binary()  # parsed here, so a bad weight is named by its row, not quoted
    convert_options = pa_csv.ConvertOptions(column_types=types, include_columns=wanted, strings_can_be_null=False)
    separator = pa.scalar(options.join.encode("utf-8"), pa.large_binary())
    rows = 0
    failure = None
    reader = handoff = released = None
    try:
        source: io.RawIOBase = PrefixedReader(prefix, stream)
        watch = _QuoteWatch(source, delimiter) if quoted else None
        handoff = _Handoff(watch or source)
        released = weakref.ref(handoff)
        reader = pa_csv.open_csv(handoff, reader_options, parse_options, convert_options)
        handoff = None  # pyarrow's reference is the only one left
        for table in reader:
            parts = [table.column(c) for c in columns]
            parts = [p.fill_null(b"") if p.null_count else p for p in parts]
            joined = parts[0] if len(parts) == 1 else pc.binary_join_element_wise(*parts, separator)
            keys = KeyBatch.from_arrow(joined)
            numbers = None
            if weight is None:
                weights = None
            else:
                weights, bad = _weights_or_bad(table.column(weight))
                if bad.any() and not skip_bad:
                    i = int(np.flatnonzero(bad)[0])
                    why = _weight_error(table.column(weight), weights, i)
                    raise InputError(f"{name} row {rows + i + 1}: weight {options.weight_column!r} {why}")
                if bad.any():
                    stats.skip("bad_weight", int(np.count_nonzero(bad)))
                    kept = np.flatnonzero(~bad)
                    keys, weights, numbers = keys.take(kept), weights[kept], rows + 1 + kept
            stats.records += table.num_rows
            for start in range(0, len(keys), options.batch_keys):
                stop = min(start + options.batch_keys, len(keys))
                part = None if weights is None else weights[start:stop]
                if numbers is None:
                    yield RecordBatch(keys.slice(start, stop), rows + start + 1, None, part)
                else:
                    yield RecordBatch(keys.slice(start, stop), int(numbers[start]), numbers[start:stop], part)
            rows += table.num_rows
        stats.records += ragged[0]
        stats.skip("ragged_row", ragged[0])
        opened = watch.unclosed() if watch is not None else None
        if opened is not None:
            raise InputError(
                f"{name}: the quoted field that opens at byte {opened + 1} never closes: the rest of the input would "
                "be one value (a stray quote at the start of a field?)"
            )
    except pa.ArrowException as exc:
        if first_ragged and not skip_bad:
            failure = _ragged_message(name, first_ragged[0], options.header, rows)
        else:
            # pyarrow parses ahead of the rows handed on and does not say which row failed: name the last good one
            failure = f"{name}: {arrow_reason(exc)}" + (
                f" (somewhere after data row {rows:,}, the last one read)" if rows else ""
            )
    finally:
        # Whatever ends the read (the end of the input, an error, a consumer that stops), pyarrow's read-ahead
        # thread is done with the stream before this returns (see _Handoff). The reader is dropped first, which
        # stops the reading ahead; the error is raised after the except clause, so that pyarrow's exception, whose
        # traceback holds the reader, is gone by then.
        reader = handoff = None
        if released is not None:
            _await_release(released)
    if failure is not None:
        raise InputError(failure)


def _ragged_message(name: str, ragged: tuple[int | None, int, int], header: bool, rows: int) -> str:
    """``"keys.csv row 3 has 5 fields, the header 4"``: the row named by its data row number, never shown."""
    number, expected, actual = ragged
    if number is None:  # pyarrow did not number it: say which rows it follows
        where = f"a row somewhere after data row {rows:,}" if rows else "a row"
    else:
        where = f"row {number - 1 if header else number}"  # pyarrow counts the header row as row 1
    first = "the header" if header else "the first row"
    return f"{name} {where} has {actual} field{'s' if actual != 1 else ''}, {first} {expected}"
