"""Options that say how a source's records become keys (shared by the CLI, the library and later the gate config)."""

from __future__ import annotations

from dataclasses import dataclass

KEY_FORMATS = ("bytes", "hex", "base64", "int")
SOURCE_FORMATS = ("auto", "lines", "csv", "tsv", "jsonl", "parquet", "arrow", "sql")
DRIVERS = ("auto", "adbc", "sqlalchemy")
INTEGER_FORMATS = ("le64", "decimal")
ON_BAD_RECORD = ("fail", "skip")
MAX_SPLIT_PARTS = 4096


@dataclass(frozen=True)
class KeyRange:
    """One key range of a database source split on a column: the rows whose value ``v`` of the split column has
    ``lower < v <= upper`` (a bound of None is open), or, with ``is_null``, the rows where it is NULL.

    Parameters
    ----------
    lower : object or None
        Exclusive lower bound, as the driver returned it (None: unbounded below).
    upper : object or None
        Inclusive upper bound (None: unbounded above).
    is_null : bool
        The partition of the rows whose split column is NULL (the bounds are then None).
    cast : str or None
        PostgreSQL through ADBC: the column's type; the bounds are then its text form, cast back on the server
        (ADBC binds parameters with Arrow types, which do not cover every PostgreSQL type).
    """

    lower: object = None
    upper: object = None
    is_null: bool = False
    cast: str | None = None


@dataclass(frozen=True)
class SourceOptions:
    """How to read keys from a source.

    Parameters
    ----------
    format : str
        ``auto`` (by suffix: .csv, .tsv, .jsonl/.ndjson, anything else one key per line), ``lines``,
        ``csv``, ``tsv`` or ``jsonl``.
    columns : tuple of str
        Delimited files: column names, or 0-based indices written as digits. Several columns are joined
        with ``join`` into one composite key.
    join : str
        Separator between the parts of a composite key.
    field : str or None
        JSON Lines: dotted path of the field holding the key (``user.id``).
    delimiter : str or None
        Delimited files: the delimiter (default ``,`` for csv and tab for tsv).
    header : bool
        Delimited files: the first row names the columns.
    key_format : str
        ``bytes`` (as read), ``hex``, ``base64``, or ``int`` (decimal integer hashed as 8-byte little-endian).
    keep_cr : bool
        Text lines: keep a CR before the LF as part of the key.
    skip_empty : bool
        Drop empty keys instead of hashing them.
    raw_bytes : bool
        Text lines: accept any bytes (no UTF-8 or NUL check; for dumps whose keys are binary or not UTF-8).
    strip : bool
        Remove leading and trailing ASCII whitespace from each key.
    lowercase : bool
        ASCII-lowercase each key.
    pattern : str or None
        A regular expression; the key is the first group of its first match (keys that do not match are
        counted and skipped).
    batch_keys : int
        Target number of keys per batch.
    integers : {"le64", "decimal"}
        Parquet and Arrow integer key columns: hashed as 8-byte little-endian words (``le64``, what an
        integer-keyed table hashes) or as decimal text.
    query : str or None
        Database sources: the SELECT whose first column (or ``columns``) holds the keys.
    table : str or None
        Database sources: a table to read ``columns`` from instead of a query.
    driver : {"auto", "adbc", "sqlalchemy"}
        PostgreSQL: the Arrow-native ADBC driver when installed (``auto``), or SQLAlchemy with psycopg.
    weight : str or None
        Delimited and columnar files: the column (name or 0-based index) holding each record's weight; JSON Lines: its dotted
        path. Weights are non-negative numbers (requests, bytes) that the load checks add up.
    on_bad_record : {"fail", "skip"}
        What to do with a record that cannot become a key: a JSON Lines line that is not JSON, lacks the field or
        has a missing, null or invalid weight; a key that ``key_format`` cannot decode; a text line that is not
        UTF-8 or holds a NUL byte; a delimited, columnar or database row whose weight is missing, null, negative,
        not finite or not a number. ``fail`` (the default) stops with an error naming the record; ``skip`` drops
        it and counts it in ``SourceStats.skipped`` as ``bad_json``, ``missing_field``, ``bad_weight``,
        ``bad_key_format``, ``bad_utf8``, ``nul_byte`` or ``ragged_row`` (a delimited row with too few or too many
        fields). A quoted field that never closes is an error either way: the records after it cannot be told
        apart.
    split_column : str or None
        Database sources, Dask engine: a column of the query's result (with ``table``: of the table) to split the
        source on into key ranges read in parallel; the local engine reads the source unsplit, as one stream.
    split_parts : int or None
        Database sources, Dask engine: how many key ranges (1 to 4096; None: one per 2,000,000 rows), plus one for
        the rows whose split column is NULL.
    key_range : KeyRange or None
        Database sources: read only this range of ``split_column`` (set by the Dask engine for each partition).
    """

    format: str = "auto"
    columns: tuple[str, ...] = ()
    join: str = "|"
    field: str | None = None
    delimiter: str | None = None
    header: bool = True
    key_format: str = "bytes"
    keep_cr: bool = False
    skip_empty: bool = False
    raw_bytes: bool = False
    strip: bool = False
    lowercase: bool = False
    pattern: str | None = None
    batch_keys: int = 1 << 20
    weight: str | None = None
    integers: str = "le64"
    query: str | None = None
    table: str | None = None
    driver: str = "auto"
    on_bad_record: str = "fail"
    split_column: str | None = None
    split_parts: int | None = None
    key_range: KeyRange | None = None
