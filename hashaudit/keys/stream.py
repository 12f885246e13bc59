"""``open_keys``: a source path and ``SourceOptions`` in, a lazy stream of ``KeyBatch`` out."""

from __future__ import annotations

import os
from collections.abc import Callable, Iterable, Iterator
from typing import Any

import numpy as np

from hashaudit.errors import InputError, UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.encode import Normaliser
from hashaudit.keys.lines import read_lines, too_long_message
from hashaudit.keys.open import (
    STDIN,
    Readable,
    compression_for,
    display_name,
    format_for,
    open_source,
    source_size,
)
from hashaudit.keys.options import DRIVERS, INTEGER_FORMATS, ON_BAD_RECORD, SOURCE_FORMATS, SourceOptions
from hashaudit.keys.records import RecordBatch, SourceStats
from hashaudit.settings import SettingError

_DELIMITED = ("csv", "tsv")
_COLUMNAR = ("parquet", "arrow")
_DEFAULT_OPTIONS = SourceOptions()


def _check_options(options: SourceOptions, fmt: str, name: str) -> None:
    """Refuse options that cannot work, or that the chosen format would silently ignore."""
    if not isinstance(options.batch_keys, int) or options.batch_keys < 1:
        raise UsageError(f"batch_keys must be a positive integer, not {options.batch_keys!r}")
    if (options.query or options.db_table) and fmt != "sql":
        raise SettingError("query", f"and {{db_table}} apply to database sources, but {name} is read as {fmt}")
    if fmt == "sql":
        from hashaudit.keys.sql import check_split_options

        check_split_options(options)
    elif options.db_split_column is not None or options.db_split_parts is not None or options.key_range is not None:
        raise UsageError(
            f"--db-split-column and --db-split-parts apply to database sources, but {name} is read as {fmt}"
        )
    if options.on_bad_record not in ON_BAD_RECORD:
        raise SettingError("on_bad_record", f"takes {' or '.join(ON_BAD_RECORD)}, not {options.on_bad_record!r}")
    if options.db_driver not in DRIVERS:
        raise SettingError("db_driver", f"takes {', '.join(DRIVERS)}, not {options.db_driver!r}")
    if fmt not in (*_DELIMITED, *_COLUMNAR, "sql"):
        if options.columns:
            raise UsageError(
                f"--column {', '.join(options.columns)} applies to csv, tsv, parquet and arrow sources, but {name} is "
                f"read as {fmt} (use --format csv or --format tsv)"
            )
        if options.delimiter is not None:
            raise SettingError("delimiter", f"applies to csv and tsv sources, but {name} is read as {fmt}")
    if fmt == "jsonl":
        if not options.field:
            raise InputError(f"{name}: --field is required for JSON Lines (the dotted path of the key, e.g. user.id)")
    elif options.field is not None:
        raise SettingError(
            "field", f"applies to JSON Lines sources, but {name} is read as {fmt} (use {{format}} jsonl)"
        )
    if options.weight_column is not None and fmt not in (*_DELIMITED, *_COLUMNAR, "jsonl", "sql"):
        raise UsageError(
            f"--weight-column applies to csv, tsv, JSON Lines, parquet and arrow sources, but {name} is read as {fmt}"
        )
    if fmt in _COLUMNAR and name == "standard input":
        raise UsageError(f"{fmt} files are read from a file, not standard input")
    if options.integers not in INTEGER_FORMATS:
        raise SettingError("integers", f"takes {' or '.join(INTEGER_FORMATS)}, not {options.integers!r}")


class KeyStream:
    """The keys of one source, read lazily, batch by batch; iterate it once.

    Use :func:`open_keys` to make one.

    Attributes
    ----------
    stats : SourceStats
        Counts, filled in while iterating.
    description : dict
        JSON-able account of how the keys are read: ``source``, ``format``, ``compression``,
        ``key_format``, ``columns``, ``field`` and the normalisation flags. For standard input,
        ``compression`` is known only once iteration has started.
    size_bytes : int or None
        On-disk size of the source when it is a regular file (for progress against ``stats.bytes_read``).
    """

    def __init__(self, source: str | os.PathLike[str], options: SourceOptions = _DEFAULT_OPTIONS) -> None:
        from hashaudit.keys.sql import is_database, mask_url

        path = os.fsdecode(os.fspath(source))
        self._source = path
        self._name = mask_url(display_name(path))
        if options.format not in SOURCE_FORMATS:
            raise UsageError(f"unknown source format {options.format!r}; choose one of {', '.join(SOURCE_FORMATS)}")
        if options.format == "auto":
            self._format = "sql" if is_database(path) or options.query or options.db_table else format_for(path)
        else:
            self._format = options.format
        _check_options(options, self._format, self._name)
        self._options = options
        self._skip_bad = options.on_bad_record == "skip"
        self._normaliser = Normaliser(options)
        delimiter = None
        if self._format in _DELIMITED:
            from hashaudit.keys.delimited import delimiter_for

            delimiter = delimiter_for(self._format, options)
        elif self._format == "jsonl":
            from hashaudit.keys.jsonl import split_field_path

            split_field_path(options.field or "")
        remote = self._format == "sql" and "://" in path
        self.size_bytes = None if remote else source_size(path)
        self.stats = SourceStats()
        self.description: dict[str, Any] = {
            "source": self._name if path != STDIN else "-",
            "format": self._format,
            "compression": compression_for(path),
            "key_format": options.key_format,
            "columns": list(options.columns or ("0",)) if self._format in (*_DELIMITED, *_COLUMNAR, "sql") else [],
            "join": options.join if len(options.columns) > 1 else None,
            "field": options.field,
            "weight_column": options.weight_column,
            "integers": options.integers if self._format in (*_COLUMNAR, "sql") else None,
            "delimiter": delimiter,
            "header": options.header if self._format in _DELIMITED else None,
            "pattern": options.pattern,
            "strip": options.strip,
            "lowercase": options.lowercase,
            "skip_empty": options.skip_empty,
            "keep_cr": options.keep_cr,
            "raw_bytes": options.raw_bytes,
            "on_bad_record": options.on_bad_record,
            "max_key_bytes": options.max_key_bytes,
            "json_values": options.json_values if self._format == "jsonl" else None,
        }
        if self._format == "sql":
            from hashaudit.keys.sql import build_query

            self.description["query"] = build_query(options, self._name)
            self.description["compression"] = None
        self._used = False

    def __repr__(self) -> str:
        return f"KeyStream({self._name!r}, format={self._format!r})"

    def __iter__(self) -> Iterator[KeyBatch]:
        if self._used:
            raise RuntimeError(f"the KeyStream of {self._name} was already iterated; call open_keys again")
        self._used = True
        return self._batches()

    def _records(self, stream: Readable) -> Iterator[RecordBatch]:
        o = self._options
        if self._format in _DELIMITED:
            from hashaudit.keys.delimited import read_delimited

            yield from read_delimited(stream, self._name, self._format, o, self.stats)
        elif self._format == "jsonl":
            from hashaudit.keys.jsonl import read_jsonl

            yield from read_jsonl(
                stream,
                self._name,
                o.field or "",
                self.stats,
                o.batch_keys,
                o.weight_column,
                skip_bad=self._skip_bad,
                max_key_bytes=o.max_key_bytes,
                # a key format reads the value's text (1 and "1" are the same integer): nothing to tell apart
                json_values="text" if o.json_values == "auto" and o.key_format != "bytes" else o.json_values,
            )
        else:
            yield from line_records(stream, self._name, o, self.stats)

    def _locate(self, record: int) -> str:
        return f"{self._name} {'row' if self._format in (*_DELIMITED, *_COLUMNAR, 'sql') else 'line'} {record}"

    def _batches(self) -> Iterator[KeyBatch]:
        if self._format in _COLUMNAR:
            from hashaudit.keys.columnar import read_columnar

            yield from self._keys(read_columnar(self._source, self._format, self._options, self.stats), None)
        elif self._format == "sql":
            from hashaudit.keys.sql import read_database

            yield from self._keys(read_database(self._source, self._options, self.stats), None)
        else:
            with open_source(self._source) as opened:
                self.description["compression"] = opened.compression
                yield from self._keys(self._records(opened.stream), opened)
                self.stats.bytes_read = opened.bytes_read
        if self.stats.keys == 0 and self._options.key_range is None:  # one key range of a source may hold none
            raise InputError(self._no_keys_message())

    def _keys(self, batches: Iterator[RecordBatch], opened: Any) -> Iterator[KeyBatch]:
        """Normalised keys of record batches, counted (``opened``: the byte stream, for progress)."""
        try:
            # lines and JSON Lines are held to the limit line by line, while they are read
            limit = None if self._format in ("lines", "jsonl") else self._options.max_key_bytes
            for keys in counted_keys(batches, self._normaliser, self.stats, self._locate, limit, self._skip_bad):
                if opened is not None:
                    self.stats.bytes_read = opened.bytes_read
                yield keys
        finally:
            # A reader stopped early (a bad record, a consumer that stops) lets go of its file and of pyarrow's
            # read-ahead thread now. Left to the garbage collector (an error's traceback keeps it alive), it could be
            # freed while the interpreter exits, and a read-ahead thread calling into it then aborts the process.
            close = getattr(batches, "close", None)
            if close is not None:
                close()

    def _no_keys_message(self) -> str:
        stats = self.stats
        if not stats.records and not stats.skipped:
            return f"{self._name}: no keys"
        skipped = ", ".join(f"{reason} {count}" for reason, count in sorted(stats.skipped.items()))
        return f"{self._name}: no keys ({stats.records} records read" + (f"; skipped: {skipped})" if skipped else ")")


def line_records(stream: Readable, name: str, options: SourceOptions, stats: SourceStats) -> Iterator[RecordBatch]:
    """The records of a one-key-per-line stream, each counted in ``stats.records`` (bad lines that ``skip`` drops
    are counted by :func:`read_lines` itself)."""
    for records in read_lines(
        stream,
        name,
        keep_cr=options.keep_cr,
        check_text=not options.raw_bytes,
        batch_keys=options.batch_keys,
        skip_bad=options.on_bad_record == "skip",
        stats=stats,
        max_key_bytes=options.max_key_bytes,
    ):
        stats.records += len(records.keys)
        yield records


def counted_keys(
    batches: Iterable[RecordBatch],
    normaliser: Normaliser,
    stats: SourceStats,
    locate: Callable[[int], str],
    max_key_bytes: int | None = None,
    skip_bad: bool = False,
) -> Iterator[KeyBatch]:
    """Record batches as key batches: normalised (``locate`` names a record in messages), held to
    ``max_key_bytes`` (a longer key raises ``InputError``, or with ``skip_bad`` is dropped as ``too_long``),
    weights attached, and counted in ``stats`` (keys, empty keys); batches left empty are dropped."""
    for records in batches:
        if not normaliser.is_identity:
            records = normaliser.apply(records, stats, locate)
        if max_key_bytes is not None and len(records.keys):
            records = _short_enough(records, max_key_bytes, skip_bad, stats, locate)
        keys = records.keys
        if records.weights is not None:
            keys = KeyBatch(keys.data, keys.offsets, records.weights)
        if len(keys):
            stats.keys += len(keys)
            stats.empty_keys += int(np.count_nonzero(keys.offsets[1:] == keys.offsets[:-1]))
            yield keys


def _short_enough(
    records: RecordBatch, limit: int, skip_bad: bool, stats: SourceStats, locate: Callable[[int], str]
) -> RecordBatch:
    """``records`` without its keys longer than ``limit`` bytes (or InputError for the first, unless ``skip_bad``)."""
    offsets = records.keys.offsets
    if int(offsets[-1] - offsets[0]) <= limit:
        return records
    too_long = np.diff(offsets) > limit
    if not too_long.any():
        return records
    if not skip_bad:
        raise InputError(too_long_message(locate(records.record_of(int(np.argmax(too_long)))), limit))
    stats.skip("too_long", int(np.count_nonzero(too_long)))
    kept = np.flatnonzero(~too_long)
    return records.subset(records.keys.take(kept), kept)


def open_keys(source: str | os.PathLike[str], options: SourceOptions = _DEFAULT_OPTIONS) -> KeyStream:
    """Open a key source; reading starts when the returned stream is iterated.

    Parameters
    ----------
    source : str or path-like
        A file (compressed by suffix: ``.gz``, ``.bz2``, ``.xz``, ``.zst``), or ``-`` for standard input
        (compression recognised by its first bytes).
    options : SourceOptions
        Format, columns or field, key format and normalisations.

    Returns
    -------
    KeyStream
        Iterable of :class:`KeyBatch`.

    Raises
    ------
    UsageError
        Options that cannot work (unknown format or key format, bad pattern, misplaced columns or field).
    InputError
        The source cannot be opened (raised here), or cannot be read as keys, or holds none (raised while
        iterating).
    """
    return KeyStream(source, options)
