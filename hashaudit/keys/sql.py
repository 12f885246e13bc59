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
"""

from __future__ import annotations

import os
import re
from collections.abc import Iterator
from typing import Any
from urllib.parse import urlsplit

import numpy as np

from hashaudit.errors import InputError, UsageError
from hashaudit.keys.batch import KeyBatch
from hashaudit.keys.options import SourceOptions
from hashaudit.keys.records import RecordBatch, SourceStats

SQLITE_SUFFIXES = (".sqlite", ".sqlite3", ".db")
_URL = re.compile(r"^[a-z][a-z0-9+.-]*://", re.IGNORECASE)
_IDENTIFIER = re.compile(r"^[A-Za-z_][A-Za-z0-9_$]*(\.[A-Za-z_][A-Za-z0-9_$]*)?$")


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


def build_query(options: SourceOptions, name: str) -> str:
    """The query of a source: ``options.query``, or a SELECT of ``options.columns`` from ``options.table``."""
    if options.query and options.table:
        raise UsageError("give --query or --db-table, not both")
    if options.query:
        return options.query
    if not options.table:
        raise UsageError(f'{name}: give --query "SELECT …" or --db-table TABLE --column COLUMN')
    columns = list(options.columns)
    if not columns:
        raise UsageError("--db-table needs --column (the key column)")
    names = [options.table, *columns] + ([options.weight] if options.weight else [])
    for identifier in names:
        if not _IDENTIFIER.match(identifier):
            raise UsageError(f"{identifier!r} is not a plain table or column name; write the SELECT with --query")
    quoted = ", ".join(f'"{c}"' for c in columns + ([options.weight] if options.weight else []))
    table = ".".join(f'"{part}"' for part in options.table.split("."))
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
    if options.weight is not None:
        if options.weight not in names:
            raise UsageError(f"{name}: the query has no column {options.weight!r} for --weight-column")
        weight = names.index(options.weight)
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
                raise InputError(f"{name} row {first + offset}: weight {options.weight!r} is {w!r}, not a number ≥ 0")
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


def _read_sqlite(path: str, query: str, options: SourceOptions, stats: SourceStats) -> Iterator[RecordBatch]:
    import sqlite3

    if not os.path.isfile(path):
        raise InputError(f"{path}: no such SQLite file")
    try:
        # one thread at a time, but maybe not the one that opened it (the reading thread takes over the stream)
        connection = sqlite3.connect(f"file:{os.path.abspath(path)}?mode=ro", uri=True, check_same_thread=False)
    except sqlite3.Error as exc:
        raise InputError(f"{path}: cannot open: {exc}") from None
    try:
        connection.execute("PRAGMA query_only = ON")
        cursor = connection.execute(query)
        names = [d[0] for d in cursor.description or []]
        keys, weight = _key_columns(names, options, path)
        row = 1
        while True:
            rows = cursor.fetchmany(min(options.batch_keys, 1 << 16))
            if not rows:
                break
            stats.records += len(rows)
            batch = _rows_to_batch(rows, keys, weight, options, row, stats, path)
            row += len(rows)
            if batch is not None:
                yield batch
    except sqlite3.Error as exc:
        raise InputError(f"{path}: {' '.join(str(exc).split())}") from None
    finally:
        connection.close()


def _read_adbc(url: str, query: str, options: SourceOptions, stats: SourceStats) -> Iterator[RecordBatch]:
    """PostgreSQL as Arrow batches (ADBC); the conversion is that of Parquet columns."""
    import adbc_driver_postgresql.dbapi as adbc

    from hashaudit.keys.columnar import arrow_records

    plain = re.sub(r"^postgresql\+[a-z0-9]+://", "postgresql://", url)
    try:
        connection = adbc.connect(_read_only_url(plain))
    except Exception as exc:  # noqa: BLE001 - any driver error is an input error with its message
        raise InputError(f"{mask_url(url)}: cannot connect: {_clean(exc, url)}") from None
    try:
        with connection.cursor() as cursor:
            cursor.execute(query)
            reader = cursor.fetch_record_batch()
            names = list(reader.schema.names)
            keys, weight = _key_columns(names, options, mask_url(url))
            row = 1
            for batch in reader:
                records = arrow_records(batch, keys, weight, options, row, stats, mask_url(url))
                if records is not None:
                    yield records
                row += batch.num_rows
    except (InputError, UsageError):
        raise
    except Exception as exc:  # noqa: BLE001
        raise InputError(f"{mask_url(url)}: {_clean(exc, url)}") from None
    finally:
        connection.close()


def _read_sqlalchemy(url: str, query: str, options: SourceOptions, stats: SourceStats) -> Iterator[RecordBatch]:
    try:
        import sqlalchemy as sa
    except ImportError:
        raise UsageError("reading a database URL needs SQLAlchemy: pip install 'hashaudit[sql]'") from None
    name = mask_url(url)
    try:
        postgres = url.split("://", 1)[0].startswith("postgresql")
        engine = sa.create_engine(url, connect_args={"options": READ_ONLY} if postgres else {})
        connection = engine.connect()
    except Exception as exc:  # noqa: BLE001
        raise InputError(f"{name}: cannot connect: {_clean(exc, url)}") from None
    try:
        if engine.dialect.name == "sqlite":
            connection.exec_driver_sql("PRAGMA query_only = ON")
        result = connection.execution_options(stream_results=True).execute(sa.text(query))
        result = result.yield_per(min(options.batch_keys, 1 << 16))  # the option is ignored for text(): call it
        keys, weight = _key_columns(list(result.keys()), options, name)
        row = 1
        for rows in result.partitions():
            stats.records += len(rows)
            batch = _rows_to_batch([tuple(r) for r in rows], keys, weight, options, row, stats, name)
            row += len(rows)
            if batch is not None:
                yield batch
    except (InputError, UsageError):
        raise
    except Exception as exc:  # noqa: BLE001
        raise InputError(f"{name}: {_clean(exc, url)}") from None
    finally:
        connection.close()
        engine.dispose()


def adbc_available() -> bool:
    """True when the ADBC PostgreSQL driver can be imported."""
    try:
        import adbc_driver_postgresql.dbapi  # noqa: F401
    except ImportError:
        return False
    return True


def read_database(source: str, options: SourceOptions, stats: SourceStats) -> Iterator[RecordBatch]:
    """Yield the keys a database source's query returns (see the module notes)."""
    name = mask_url(source)
    query = build_query(options, name)
    if not _URL.match(source):
        yield from _read_sqlite(source, query, options, stats)
        return
    scheme = source.split("://", 1)[0].lower()
    if scheme in ("postgresql", "postgres", "postgresql+adbc") and options.driver != "sqlalchemy" and adbc_available():
        yield from _read_adbc(source.replace("postgres://", "postgresql://", 1), query, options, stats)
        return
    if scheme == "postgresql+adbc":
        raise UsageError("postgresql+adbc needs the ADBC driver: pip install adbc-driver-postgresql")
    if scheme in ("postgresql", "postgres"):
        source = "postgresql+psycopg://" + source.split("://", 1)[1]
    yield from _read_sqlalchemy(source, query, options, stats)
