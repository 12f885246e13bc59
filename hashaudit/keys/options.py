"""Options that say how a source's records become keys (shared by the CLI, the library and later the gate config)."""

from __future__ import annotations

from dataclasses import dataclass

from hashaudit.settings import Setting

KEY_FORMATS = ("bytes", "hex", "base64", "int")
SOURCE_FORMATS = ("auto", "lines", "csv", "tsv", "jsonl", "parquet", "arrow", "sql")
DRIVERS = ("auto", "adbc", "sqlalchemy")
INTEGER_FORMATS = ("le64", "decimal")
ON_BAD_RECORD = ("fail", "skip")
MAX_SPLIT_PARTS = 4096
JSON_VALUES = ("auto", "text", "json")
DEFAULT_MAX_KEY_BYTES = 16 << 20

SOURCE_SETTINGS: tuple[Setting, ...] = (
    Setting(
        "format",
        "sources",
        "Input format (auto: by suffix).",
        default="auto",
        kind="choice",
        choices=SOURCE_FORMATS,
    ),
    Setting(
        "columns",
        "sources",
        "CSV/TSV column by name or 0-based index (repeatable: composite key).",
        default=(),
        repeatable=True,
        flag="--column",
        short="-c",
        metavar="NAME|INDEX",
    ),
    Setting("join", "sources", "Separator of composite keys.", default="|", metavar="SEP"),
    Setting("field", "sources", "JSON Lines field, dotted path (user.id).", short="-f", metavar="PATH"),
    Setting("delimiter", "sources", "CSV delimiter (default , for csv, tab for tsv).", metavar="CHAR"),
    Setting(
        "header",
        "sources",
        "CSV/TSV files have a header row naming the columns.",
        default=True,
        kind="bool",
        negatable=True,
    ),  # fmt: skip
    Setting(
        "key_format",
        "sources",
        "How a key's text becomes bytes; int = decimal, hashed as 8-byte little-endian.",
        default="bytes",
        kind="choice",
        choices=KEY_FORMATS,
    ),
    Setting("keep_cr", "sources", "Keep a CR before the LF as part of the key.", default=False, kind="bool"),
    Setting("skip_empty", "sources", "Skip empty keys instead of hashing them.", default=False, kind="bool"),
    Setting("raw_bytes", "sources", "Accept keys that are not UTF-8 text (binary dumps).", default=False, kind="bool"),
    Setting("strip", "sources", "Strip leading and trailing ASCII whitespace from keys.", default=False, kind="bool"),
    Setting("lowercase", "sources", "ASCII-lowercase keys.", default=False, kind="bool"),
    Setting("pattern", "sources", "Hash only the first group of REGEX's match in each key.", metavar="REGEX"),
    Setting(
        "weight_column",
        "sources",
        "CSV/TSV/Parquet column or JSON Lines path of each record's weight (requests, bytes) for the shard loads.",
        metavar="COLUMN|PATH",
        toml_aliases=("weight",),
    ),
    Setting(
        "integers",
        "sources",
        "Parquet/Arrow integer key columns: hashed as 8-byte little-endian words, or as decimal text.",
        default="le64",
        kind="choice",
        choices=INTEGER_FORMATS,
    ),
    Setting(
        "query",
        "sources",
        "Database sources (an SQLite file or a URL such as postgresql://…): the SELECT whose first column, or "
        "--column, holds the keys.",
        metavar="SQL",
    ),
    Setting(
        "db_table",
        "sources",
        "Database sources: read --column from TABLE (instead of --query).",
        metavar="TABLE",
        toml_aliases=("table",),
    ),
    Setting(
        "db_split_column",
        "sources",
        "Database sources, --engine dask: split the source into key ranges of COLUMN, read in parallel "
        "(equal-width ranges of an integer column, ntile boundaries of any other, one more for NULLs).",
        metavar="COLUMN",
    ),
    Setting(
        "db_split_parts",
        "sources",
        f"With --db-split-column: the number of key ranges, 1 to {MAX_SPLIT_PARTS} (default: one per 2,000,000 rows).",
        kind="int",
        minimum=1,
        maximum=MAX_SPLIT_PARTS,
        metavar="N",
    ),
    Setting(
        "db_driver",
        "sources",
        "PostgreSQL: the Arrow-native ADBC driver when installed, or SQLAlchemy with psycopg.",
        default="auto",
        kind="choice",
        choices=DRIVERS,
        toml_aliases=("driver",),
    ),
    Setting(
        "json_values",
        "sources",
        "JSON Lines: text hashes a string's content and any other value's JSON text (1 and \"1\" are one key); "
        "json hashes every value's JSON text (they are two); auto is text, but stops at a field mixing strings "
        "with other values (unless --key-format reads the text: int, hex, base64).",
        default="auto",
        kind="choice",
        choices=JSON_VALUES,
    ),
    Setting(
        "max_key_bytes",
        "sources",
        "Longest key (a JSON Lines source: longest line) accepted; a longer record is a bad record, refused as soon "
        "as that many of its bytes are read. 16m, 64k, 2^20.",
        default=DEFAULT_MAX_KEY_BYTES,
        kind="size",
        minimum=1,
        metavar="SIZE",
    ),
    Setting(
        "on_bad_record",
        "sources",
        "A record that cannot become a key (not JSON, no such field, a bad weight, a key --key-format cannot "
        "decode, a line that is not UTF-8): stop with an error, or skip it and count it in the report.",
        default="fail",
        kind="choice",
        choices=ON_BAD_RECORD,
    ),
)
"""How a source's records become keys: the command line's source options, a ``[[sources]]`` entry's keys of
``hashaudit gate``, and the fields of :class:`SourceOptions`."""


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
    db_table : str or None
        Database sources: a table to read ``columns`` from instead of a query.
    db_driver : {"auto", "adbc", "sqlalchemy"}
        PostgreSQL: the Arrow-native ADBC driver when installed (``auto``), or SQLAlchemy with psycopg.
    weight_column : str or None
        Delimited and columnar files: the column (name or 0-based index) holding each record's weight; JSON Lines: its dotted
        path. Weights are non-negative numbers (requests, bytes) that the load checks add up.
    on_bad_record : {"fail", "skip"}
        What to do with a record that cannot become a key: a JSON Lines line that is not JSON, lacks the field or
        has a missing, null or invalid weight; a key that ``key_format`` cannot decode; a text line that is not
        UTF-8 or holds a NUL byte; a delimited, columnar or database row whose weight is missing, null, negative,
        not finite or not a number. ``fail`` (the default) stops with an error naming the record; ``skip`` drops
        it and counts it in ``SourceStats.skipped`` as ``bad_json``, ``missing_field``, ``bad_weight``,
        ``bad_key_format``, ``bad_utf8``, ``nul_byte``, ``too_long`` (see ``max_key_bytes``) or ``ragged_row`` (a
        delimited row with too few or too many fields). A quoted field that never closes is an error either way: the records after it cannot be told
        apart.
    json_values : {"auto", "text", "json"}
        JSON Lines: how a value becomes key bytes (see ``hashaudit.keys.jsonl.read_jsonl``); ``auto`` stops at a
        field that mixes strings with other values, where ``1`` and ``"1"`` would otherwise be one key.
    max_key_bytes : int
        Longest key accepted, in bytes (default 16 MiB); for text and JSON Lines sources, longest line. A longer one
        is a bad record (see ``on_bad_record``), refused as soon as that many of its bytes are read: a file without
        line breaks does not fill memory.
    db_split_column : str or None
        Database sources, Dask engine: a column of the query's result (with ``table``: of the table) to split the
        source on into key ranges read in parallel; the local engine reads the source unsplit, as one stream.
    db_split_parts : int or None
        Database sources, Dask engine: how many key ranges (1 to 4096; None: one per 2,000,000 rows), plus one for
        the rows whose split column is NULL.
    key_range : KeyRange or None
        Database sources: read only this range of ``db_split_column`` (set by the Dask engine for each partition).
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
    weight_column: str | None = None
    integers: str = "le64"
    query: str | None = None
    db_table: str | None = None
    db_driver: str = "auto"
    on_bad_record: str = "fail"
    max_key_bytes: int = DEFAULT_MAX_KEY_BYTES
    json_values: str = "auto"
    db_split_column: str | None = None
    db_split_parts: int | None = None
    key_range: KeyRange | None = None

    @classmethod
    def from_settings(cls, **values: object) -> SourceOptions:
        """Options from settings of :data:`SOURCE_SETTINGS` by name (text or TOML values; checked and converted);
        a setting left out or None takes its default. Former TOML keys (``weight``, ``table``, ``driver``) are
        accepted."""
        from hashaudit.settings import by_name

        declared = by_name(SOURCE_SETTINGS)
        aliases = {old: s.name for s in SOURCE_SETTINGS for old in s.toml_aliases}
        converted: dict[str, object] = {}
        for key, raw in values.items():
            name = aliases.get(key, key)
            if name not in declared:
                raise TypeError(f"unknown source setting {key!r}")
            if raw is not None:
                converted[name] = declared[name].value(raw)
        return cls(**converted)  # type: ignore[arg-type]
