"""Keys from databases: SQLite files through the standard library, and any SQLAlchemy URL, with PostgreSQL read
through the Arrow-native ADBC driver when it is installed.

A source is a database when its name ends in ``.sqlite``, ``.sqlite3`` or ``.db`` (an SQLite file) or is a URL
(``postgresql://…``, ``sqlite:///…``, any SQLAlchemy dialect). The keys are the first column of ``query`` (several
columns, listed in ``columns``, make a composite key), or of ``SELECT <columns> FROM <table>`` built with quoted
identifiers. Rows stream in batches: SQLite through ``fetchmany``; SQLAlchemy with a server-side cursor
(``stream_results``) and ``Result.yield_per`` — the ``yield_per`` execution option is ignored for ``text()``
queries, so it is called on the result —; ADBC as Arrow record batches, converted like a Parquet column.

Sessions are read-only: SQLite files open with ``mode=ro`` and ``PRAGMA query_only``; PostgreSQL sessions start
with ``default_transaction_read_only`` on, so a query that writes is refused by the database itself. Credentials may
come from the environment (``PGPASSWORD``, ``PGUSER``… are read by libpq); a password in a URL never appears in a
report or a message: :func:`mask_url` replaces it with ``***``, and messages from the database are cleaned of it.

Key ranges (the Dask engine's ``--db-split-column``): :func:`plan_key_ranges` runs one query over the source's query
(``min``, ``max``, ``count`` of the split column and ``count(*)``). Integer columns are cut into ranges of equal
width, common practice for parallel reads of a table by a numeric column; for any other type a second query takes
the boundaries of the standard window function ``ntile(n) OVER (ORDER BY column)`` (SQL:2003; SQLite ≥ 3.25,
PostgreSQL), so that each range holds about as many rows. The ranges ``(lower, upper]`` ascend, the first open below
and the last open above, and the rows whose split column is NULL make one more range. A partition reads ``SELECT *
FROM (<query>) AS hashaudit_q WHERE hashaudit_q."column" > ? AND hashaudit_q."column" <= ?`` (qualified: SQLite
reads a double-quoted name that is no column as a string) with the bounds bound as driver parameters (never pasted
into the SQL); ADBC binds parameters with Arrow types, which miss some PostgreSQL types (``numeric`` comes back as text), so
through ADBC the bounds travel as the server's own text form and are cast back to the column's type there. Each
range is read in its own session: a table that changes during the audit is read as a mix of its states.
"""

from __future__ import annotations

import contextlib
import os
import re
from collections.abc import Iterator
from dataclasses import replace
from typing import Any
from urllib.parse import urlsplit

import numpy as np

from hashaudit.errors import HashAuditError, InputError, UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.options import MAX_SPLIT_PARTS, KeyRange, SourceOptions
from hashaudit.keys.records import RecordBatch, SourceStats
from hashaudit.settings import SettingError

SQLITE_SUFFIXES = (".sqlite", ".sqlite3", ".db")
_URL = re.compile(r"^[a-z][a-z0-9+.-]*://", re.IGNORECASE)
_IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_$]*(\.[A-Za-z_][A-Za-z0-9_$]*)?$")
SPLIT_ROWS = 2_000_000  # automatic --db-split-parts: one key range per this many rows with a split value
_PG_INTEGERS = ("smallint", "integer", "bigint")
_PG_TYPE = re.compile(r'^[A-Za-z_][A-Za-z0-9_ ."$\[\]]*$')  # a type name as pg_typeof prints it (no ; ' ( -)
_PARAMSTYLES = {"sqlite": "qmark", "adbc": "numeric_dollar", "sqlalchemy": "named"}


def is_database(source: str) -> bool:
    """True for an SQLite file name or a database URL."""
    return bool(_URL.match(source)) or source.lower().endswith(SQLITE_SUFFIXES)


def mask_url(url: str) -> str:
    """The URL with any password replaced by ``***`` (``postgresql://ann:***@db/x``)."""
    return re.sub(r"(://[^/:@]*):[^@/]*@", r"\1:***@", url)


def _secret(url: str) -> str | None:
    try:
        return urlsplit(url).password
    except ValueError:
        return None


def _clean(message: object, url: str) -> str:
    """A database message on one line, without the URL's password."""
    text = " ".join(str(message).split())
    secret = _secret(url)
    if secret:
        text = text.replace(secret, "***")
    return mask_url(text)


def check_split_options(options: SourceOptions) -> None:
    """Refuse key-range options that cannot work (a UsageError quoting the value)."""
    column, parts = options.db_split_column, options.db_split_parts
    if parts is not None:
        if column is None:
            raise SettingError("db_split_parts", "needs {db_split_column} (the column to split on)")
        if isinstance(parts, bool) or not isinstance(parts, int) or not 1 <= parts <= MAX_SPLIT_PARTS:
            raise SettingError("db_split_parts", f"must be between 1 and {MAX_SPLIT_PARTS}, not {parts!r}")
    if column is not None and (not isinstance(column, str) or not _IDENTIFIER.match(column) or "." in column):
        raise SettingError("db_split_column", f"takes a plain column name, not {column!r}")
    if options.key_range is not None and column is None:
        raise UsageError("a key range needs split_column")


def build_query(options: SourceOptions, name: str, paramstyle: str = "qmark") -> str:
    """The query of a source: ``options.query``, or a SELECT of ``options.columns`` from ``options.db_table``.

    With ``options.key_range``, that query (with ``table``, plus the split column) wrapped to keep the rows of the
    range; its bounds are parameters in the driver's ``paramstyle`` (``qmark``, ``named`` or ``numeric_dollar``),
    whose values :func:`range_parameters` gives.
    """
    key_range = options.key_range
    if key_range is None:
        return _base_query(options, name, with_split=False)
    check_split_options(options)
    inner = _base_query(options, name, with_split=True)
    return f"SELECT * FROM (\n{_bare(inner)}\n) AS hashaudit_q WHERE {_range_condition(options, paramstyle)}"


def range_parameters(key_range: KeyRange, paramstyle: str = "qmark") -> tuple | dict:
    """The values bound to the parameters of :func:`build_query` for ``key_range`` (a dict for ``named``)."""
    bounds = [] if key_range.is_null else [("lower", key_range.lower), ("upper", key_range.upper)]
    present = [(side, value) for side, value in bounds if value is not None]
    if paramstyle == "named":
        return {f"hashaudit_{side}": value for side, value in present}
    return tuple(value for _, value in present)


def _quoted_split(options: SourceOptions, alias: str = "hashaudit_q") -> str:
    """The split column qualified by the alias of the nested query: unqualified, SQLite would read a double-quoted
    name that is no column as a string literal."""
    return f'{alias}."{options.db_split_column}"'


def _bare(query: str) -> str:
    """A query without its trailing semicolons, to nest it (a trailing ``--`` comment ends at the newline after)."""
    return re.sub(r"[\s;]+$", "", query)


def _range_condition(options: SourceOptions, paramstyle: str) -> str:
    """The WHERE condition of ``options.key_range``, its bounds as parameters."""
    key_range = options.key_range
    assert key_range is not None
    column = _quoted_split(options)
    if key_range.is_null:
        return f"{column} IS NULL"
    if key_range.cast is not None and not _PG_TYPE.match(key_range.cast):
        raise UsageError(f"cannot split on a column of type {key_range.cast!r}")
    terms: list[str] = []
    for bound, side, operator in ((key_range.lower, "lower", ">"), (key_range.upper, "upper", "<=")):
        if bound is None:
            continue
        markers = {"qmark": "?", "numeric_dollar": f"${len(terms) + 1}", "named": f":hashaudit_{side}"}
        if paramstyle not in markers:
            raise ValueError(f"unknown paramstyle {paramstyle!r}")
        marker = markers[paramstyle]
        if key_range.cast is not None:
            marker = f"CAST({marker} AS {key_range.cast})"
        terms.append(f"{column} {operator} {marker}")
    return " AND ".join(terms) or f"{column} IS NOT NULL"


def _range_label(options: SourceOptions) -> str:
    """How messages name a key range: `` (rows where "id" > 100 AND "id" <= 200)``; empty without one."""
    key_range = options.key_range
    if key_range is None:
        return ""
    column = f'"{options.db_split_column}"'
    if key_range.is_null:
        return f" (rows where {column} IS NULL)"
    terms = [f"{column} > {_shown(key_range.lower)}"] if key_range.lower is not None else []
    terms += [f"{column} <= {_shown(key_range.upper)}"] if key_range.upper is not None else []
    return f" (rows where {' AND '.join(terms) or column + ' IS NOT NULL'})"


def _shown(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _base_query(options: SourceOptions, name: str, *, with_split: bool) -> str:
    """``options.query``, or the SELECT of ``options.db_table`` (``with_split``: with the split column too)."""
    if options.query and options.db_table:
        raise SettingError("query", "or {db_table}: give one, not both")
    if options.query:
        return options.query
    if not options.db_table:
        raise UsageError(f'{name}: give --query "SELECT …" or --db-table TABLE --column COLUMN')
    columns = list(options.columns)
    if not columns:
        raise SettingError("db_table", "needs {columns} (the key column)")
    selected = columns + ([options.weight_column] if options.weight_column else [])
    for identifier in [options.db_table, *selected]:
        if not _IDENTIFIER.match(identifier):
            raise UsageError(f"{identifier!r} is not a plain table or column name; write the SELECT with --query")
    quoted = ", ".join(f'"{c}"' for c in selected)
    table = ".".join(f'"{part}"' for part in options.db_table.split("."))
    if with_split and options.db_split_column and options.db_split_column not in selected:
        # last, after the key columns that _key_columns takes; qualified, so that a missing column is an error
        quoted += f', {table}."{options.db_split_column}"'
    return f"SELECT {quoted} FROM {table}"


READ_ONLY = "-c default_transaction_read_only=on"


def _read_only_url(url: str) -> str:
    """The URL with the libpq ``options`` that make every transaction of the session read-only."""
    from urllib.parse import quote

    joiner = "&" if "?" in url else "?"
    return f"{url}{joiner}options={quote(READ_ONLY)}"


def _value_bytes(value: Any, integers: str) -> bytes:
    if isinstance(value, bytes | bytearray | memoryview):
        return bytes(value)
    if isinstance(value, str):
        return value.encode("utf-8", "surrogatepass")
    if isinstance(value, bool):
        return b"1" if value else b"0"
    if isinstance(value, int):
        return value.to_bytes(8, "little", signed=value < 0) if integers == "le64" else str(value).encode()
    return str(value).encode("utf-8")


def _key_columns(names: list[str], options: SourceOptions, name: str) -> tuple[list[int], int | None]:
    """Positions of the key columns (default: every column but the weight) and of the weight column."""
    weight = None
    if options.weight_column is not None:
        if options.weight_column not in names:
            raise UsageError(f"{name}: the query has no column {options.weight_column!r} for --weight-column")
        weight = names.index(options.weight_column)
    if options.query and options.columns:
        missing = [c for c in options.columns if c not in names]
        if missing:
            raise UsageError(f"{name}: the query has no column {missing[0]!r} (it has: {', '.join(names)})")
        keys = [names.index(c) for c in options.columns]
    else:
        keys = [i for i in range(len(names)) if i != weight][: max(1, len(options.columns))]
    if not keys:
        raise UsageError(f"{name}: the query returns no key column")
    return keys, weight


def _rows_to_batch(rows: list[tuple], keys: list[int], weight: int | None, options: SourceOptions, first: int,
                   stats: SourceStats, name: str) -> RecordBatch | None:  # fmt: skip
    """Python rows (SQLite, SQLAlchemy) into a record batch; rows with a null key are counted and skipped, and so
    are rows with a bad weight when ``options.on_bad_record`` is ``skip``."""
    join = options.join.encode("utf-8")
    out, numbers, weights = [], [], []
    for offset, row in enumerate(rows):
        parts = [row[k] for k in keys]
        if any(p is None for p in parts):
            stats.skip("null")
            continue
        if weight is not None:
            w = row[weight]
            if isinstance(w, bool) or not isinstance(w, int | float) or not 0 <= w < float("inf"):
                if options.on_bad_record == "skip":
                    stats.skip("bad_weight")
                    continue
                raise InputError(
                    f"{name} row {first + offset}: weight {options.weight_column!r} is {w!r}, not a number ≥ 0"
                )
            weights.append(float(w))
        out.append(join.join(_value_bytes(p, options.integers) for p in parts))
        numbers.append(first + offset)
    if not out:
        return None
    return RecordBatch(
        KeyBatch.from_keys(out),
        numbers[0],
        np.asarray(numbers, dtype=np.int64),
        np.asarray(weights, dtype=np.float64) if weight is not None else None,
    )


def _connect_sqlite(path: str, name: str) -> Any:
    """A read-only SQLite session (``mode=ro`` and ``PRAGMA query_only``)."""
    import sqlite3

    if not os.path.isfile(path):
        raise InputError(f"{name}: no such SQLite file")
    try:
        # one thread at a time, but maybe not the one that opened it (the reading thread takes over the stream)
        connection = sqlite3.connect(f"file:{os.path.abspath(path)}?mode=ro", uri=True, check_same_thread=False)
        connection.execute("PRAGMA query_only = ON")
    except sqlite3.Error as exc:
        raise InputError(f"{name}: cannot open: {exc}") from None
    return connection


def _connect_adbc(url: str) -> Any:
    """A PostgreSQL session through ADBC whose transactions are all read-only."""
    import adbc_driver_postgresql.dbapi as adbc

    plain = re.sub(r"^postgresql\+[a-z0-9]+://", "postgresql://", url)
    try:
        return adbc.connect(_read_only_url(plain))
    except Exception as exc:  # noqa: BLE001 - any driver error is an input error with its message
        raise InputError(f"{mask_url(url)}: cannot connect: {_clean(exc, url)}") from None


def _connect_sqlalchemy(url: str) -> tuple[Any, Any]:
    """An SQLAlchemy engine and connection, read-only (PostgreSQL: every transaction; SQLite: query_only)."""
    try:
        import sqlalchemy as sa
    except ImportError:
        raise UsageError("reading a database URL needs SQLAlchemy: pip install 'hashaudit[sql]'") from None
    try:
        postgres = url.split("://", 1)[0].startswith("postgresql")
        engine = sa.create_engine(url, connect_args={"options": READ_ONLY} if postgres else {})
        connection = engine.connect()
    except Exception as exc:  # noqa: BLE001
        raise InputError(f"{mask_url(url)}: cannot connect: {_clean(exc, url)}") from None
    try:
        if engine.dialect.name == "sqlite":
            connection.exec_driver_sql("PRAGMA query_only = ON")
    except Exception as exc:  # noqa: BLE001
        connection.close()
        engine.dispose()
        raise InputError(f"{mask_url(url)}: cannot connect: {_clean(exc, url)}") from None
    return engine, connection


@contextlib.contextmanager
def _session(kind: str, url: str, name: str) -> Iterator[Any]:
    """A read-only connection of the driver ``kind`` (``sqlite``, ``adbc``, ``sqlalchemy``), closed on leaving;
    a driver error inside becomes a one-line InputError naming ``name``, without the URL's password."""
    if kind == "sqlite":
        connection = _connect_sqlite(url, name)
        close = connection.close
    elif kind == "adbc":
        connection = _connect_adbc(url)
        close = connection.close
    else:
        engine, connection = _connect_sqlalchemy(url)

        def close() -> None:
            connection.close()
            engine.dispose()

    try:
        yield connection
    except (InputError, UsageError):
        raise
    except Exception as exc:  # noqa: BLE001 - any driver error is an input error with its message
        raise InputError(f"{name}: {_clean(exc, url)}") from None
    finally:
        close()


def _read_rows(kind: str, url: str, query: str, options: SourceOptions, stats: SourceStats, parameters: Any = (),
               label: str = "") -> Iterator[RecordBatch]:  # fmt: skip
    """The records of a query: Python rows in batches for SQLite (``fetchmany``) and SQLAlchemy (a server-side
    cursor and ``yield_per``), Arrow record batches for ADBC (converted like a Parquet column)."""
    name = (url if kind == "sqlite" else mask_url(url)) + label
    step = min(options.batch_keys, 1 << 16)
    with _session(kind, url, name) as connection:
        if kind == "adbc":
            from hashaudit.keys.columnar import arrow_records

            with connection.cursor() as cursor:
                cursor.execute(query, parameters or None)
                reader = cursor.fetch_record_batch()
                keys, weight = _key_columns(list(reader.schema.names), options, name)
                row = 1
                for batch in reader:
                    records = arrow_records(batch, keys, weight, options, row, stats, name)
                    if records is not None:
                        yield records
                    row += batch.num_rows
            return
        if kind == "sqlite":
            cursor = connection.execute(query, parameters)
            names = [d[0] for d in cursor.description or []]
            pieces = iter(lambda: cursor.fetchmany(step), [])
        else:
            import sqlalchemy as sa

            result = connection.execution_options(stream_results=True).execute(sa.text(query), parameters or {})
            result = result.yield_per(step)  # the option is ignored for text(): call it
            names = list(result.keys())
            pieces = (list(map(tuple, rows)) for rows in result.partitions())
        keys, weight = _key_columns(names, options, name)
        row = 1
        for rows in pieces:
            stats.records += len(rows)
            batch = _rows_to_batch(rows, keys, weight, options, row, stats, name)
            row += len(rows)
            if batch is not None:
                yield batch


def _fetch(kind: str, url: str, query: str) -> tuple[list[str], list[tuple]]:
    """The column names and every row of a small query (planning key ranges), in a read-only session of the
    source's driver."""
    with _session(kind, url, mask_url(url)) as connection:
        if kind == "sqlalchemy":
            import sqlalchemy as sa

            result = connection.execute(sa.text(query))
            return list(result.keys()), [tuple(r) for r in result.fetchall()]
        cursor = connection.cursor()  # DB-API: SQLite and ADBC alike
        try:
            cursor.execute(query)
            return [d[0] for d in cursor.description or []], [tuple(r) for r in cursor.fetchall()]
        finally:
            cursor.close()


def adbc_available() -> bool:
    """True when the ADBC PostgreSQL driver can be imported."""
    try:
        import adbc_driver_postgresql.dbapi  # noqa: F401
    except ImportError:
        return False
    return True


def _route(source: str, options: SourceOptions) -> tuple[str, str]:
    """The driver that reads a source (``sqlite``, ``adbc`` or ``sqlalchemy``) and the path or URL it is given."""
    if not _URL.match(source):
        return "sqlite", source
    scheme = source.split("://", 1)[0].lower()
    if (
        scheme in ("postgresql", "postgres", "postgresql+adbc")
        and options.db_driver != "sqlalchemy"
        and adbc_available()
    ):
        return "adbc", source.replace("postgres://", "postgresql://", 1)
    if scheme == "postgresql+adbc":
        raise UsageError("postgresql+adbc needs the ADBC driver: pip install adbc-driver-postgresql")
    if scheme in ("postgresql", "postgres"):
        source = "postgresql+psycopg://" + source.split("://", 1)[1]
    return "sqlalchemy", source


def read_database(source: str, options: SourceOptions, stats: SourceStats) -> Iterator[RecordBatch]:
    """Yield the keys a database source's query returns (see the module notes); with ``options.key_range``, only
    those of the rows in that range of ``options.db_split_column``."""
    name = mask_url(source)
    query = build_query(options, name)  # the usage errors of the options before any driver is chosen
    kind, url = _route(source, options)
    if options.key_range is None:
        yield from _read_rows(kind, url, query, options, stats)
        return
    style = _PARAMSTYLES[kind]
    query = build_query(options, name, style)
    yield from _read_rows(kind, url, query, options, stats, range_parameters(options.key_range, style),
                          _range_label(options))  # fmt: skip


def plan_key_ranges(source: str, options: SourceOptions) -> list[KeyRange]:
    """The key ranges of a database source on ``options.db_split_column``, in ascending order (see the module notes).

    Parameters
    ----------
    source : str
        An SQLite file or a database URL.
    options : SourceOptions
        The source's options: ``query`` or ``table``, ``split_column`` and ``split_parts`` (None: one range per
        ``SPLIT_ROWS`` rows with a value in the split column, at least 1 and at most ``MAX_SPLIT_PARTS``).

    Returns
    -------
    list of KeyRange
        Ranges ``(lower, upper]`` that cover every value of the split column once, the first open below and the
        last open above, followed by the range of the NULLs when the column has any. An empty result gives one
        range.

    Raises
    ------
    UsageError
        No ``split_column``, bad split options, or a split column that the query does not return.
    InputError
        The database cannot be read (the message on one line, without the URL's password).
    """
    name = mask_url(source)
    check_split_options(options)
    if options.db_split_column is None:
        raise UsageError(f"{name}: give --db-split-column to split a database source into key ranges")
    options = replace(options, key_range=None)
    kind, url = _route(source, options)
    inner = _bare(_base_query(options, name, with_split=True))
    column = _quoted_split(options)
    adbc = kind == "adbc"
    # through ADBC the bounds are the server's text form (cast back when reading), and pg_typeof names the type
    lowest_sql, highest_sql = (f"CAST({f}({column}) AS text)" if adbc else f"{f}({column})" for f in ("min", "max"))
    typed = f", CAST(pg_typeof(min({column})) AS text)" if adbc else ""
    summary = f"SELECT {lowest_sql}, {highest_sql}, count({column}), count(*){typed} FROM (\n{inner}\n) AS hashaudit_q"
    try:
        row = _fetch(kind, url, summary)[1][0]
    except InputError:
        names = _result_columns(kind, url, inner)
        if names is not None and options.db_split_column not in names:
            raise UsageError(
                f"{name}: the query has no column {options.db_split_column!r} for --db-split-column "
                f"(it has: {', '.join(names)})"
            ) from None
        raise
    lowest, highest, filled, total = row[0], row[1], int(row[2]), int(row[3])
    cast = None
    if adbc:
        cast = str(row[4])
        if cast in _PG_INTEGERS and lowest is not None and highest is not None:
            lowest, highest, cast = int(lowest), int(highest), None
        elif not _PG_TYPE.match(cast):
            raise InputError(f"{name}: cannot split on {options.db_split_column!r}, a column of type {cast!r}")
    parts = options.db_split_parts or min(MAX_SPLIT_PARTS, max(1, -(-filled // SPLIT_ROWS)))
    if filled == 0:
        ranges = [KeyRange()]
    elif type(lowest) is int and type(highest) is int:  # not bool, a subclass of int
        ranges = _integer_ranges(lowest, highest, min(parts, filled))
    else:
        tiles = min(parts, filled)
        outer = _quoted_split(options, "hashaudit_x")
        highest_tile = f"CAST(max({outer}) AS text)" if adbc else f"max({outer})"
        tiled = (
            f"SELECT {highest_tile} FROM (SELECT {column}, ntile({int(tiles)}) OVER (ORDER BY {column}) AS hashaudit_t "
            f"FROM (\n{inner}\n) AS hashaudit_q WHERE {column} IS NOT NULL) AS hashaudit_x "
            "GROUP BY hashaudit_t ORDER BY hashaudit_t"
        )
        _, boundaries = _fetch(kind, url, tiled)
        ranges = _ranges_between([b[0] for b in boundaries[:-1]], cast)
    if filled < total:
        ranges.append(KeyRange(is_null=True))
    return ranges


def _integer_ranges(lowest: int, highest: int, parts: int) -> list[KeyRange]:
    """``parts`` ranges of equal width (up to one) over the integers ``lowest..highest`` (common practice)."""
    width = highest - lowest + 1
    parts = max(1, min(parts, width))
    return _ranges_between([lowest - 1 + width * i // parts for i in range(1, parts)], None)


def _ranges_between(boundaries: list[Any], cast: str | None) -> list[KeyRange]:
    """The ranges cut at ascending ``boundaries`` (repeats dropped: they would make empty ranges)."""
    cuts: list[Any] = []
    for boundary in boundaries:
        if boundary is not None and (not cuts or boundary != cuts[-1]):
            cuts.append(boundary)
    edges = [None, *cuts, None]
    return [KeyRange(edges[i], edges[i + 1], cast=cast) for i in range(len(edges) - 1)]


def _result_columns(kind: str, url: str, query: str) -> list[str] | None:
    """The column names of a query's result (None when it cannot run): to explain a missing split column."""
    try:
        return _fetch(kind, url, f"SELECT * FROM (\n{query}\n) AS hashaudit_q LIMIT 0")[0]
    except HashAuditError:
        return None
