"""Keys from databases: SQLite files through the standard library, and any SQLAlchemy URL, with PostgreSQL read
through the Arrow-native ADBC driver when it is installed.

A source is a database when its name ends in ``.sqlite``, ``.sqlite3`` or ``.db`` (an SQLite file) or is a URL
(``postgresql://…``, ``sqlite:///…``, any SQLAlchemy dialect). The keys are the first column of ``query`` (several
columns, listed in ``columns``, make a composite key), or of ``SELECT <columns> FROM <table>`` built with quoted
identifiers. Rows stream in batches: SQLite through ``fetchmany``; SQLAlchemy with a server-side cursor
(``stream_results``) and ``Result.yield_per`` — the ``yield_per`` execution option is ignored for ``text()``
queries, so it is called on the result —; ADBC as Arrow record batches, converted like a Parquet column.

Sessions are read-only, and a query may only read:

- SQLite (a file path, and every ``sqlite://`` URL form, read through the standard library, not SQLAlchemy) opens
  ``file:PATH?mode=ro`` as a URI, so a missing file is an error and never created, sets ``PRAGMA query_only`` and
  installs an authorizer (``sqlite3.Connection.set_authorizer``) that allows reading tables, calling ordinary
  functions and recursive common table expressions, and denies every other action: writes, ``PRAGMA``, ``ATTACH``
  (which ``VACUUM INTO`` uses), transactions. A refused action is a one-line error naming it.
- A database server (PostgreSQL through ADBC or SQLAlchemy + psycopg; any other SQLAlchemy dialect) gets one
  statement that is a query: it starts with ``SELECT``, ``WITH``, ``VALUES`` or ``TABLE`` and calls none of the
  server functions in ``DENIED_FUNCTIONS`` (see :func:`check_query`). PostgreSQL sessions also start with
  ``default_transaction_read_only`` on, so a query that writes a table is refused by the database itself; a
  read-only transaction does not stop a superuser's ``COPY … TO 'file'`` or the large-object functions, hence the
  check. The real safeguard on a server is a least-privilege role.

Credentials may come from the environment (``PGPASSWORD``, ``PGUSER``… are read by libpq); a credential in a URL
never appears in a report or a message: :func:`mask_url` replaces the authority's password and every secret query
parameter (``SECRET_PARAMETERS``) with ``***``, and messages from the database are cleaned of them.

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
import itertools
import os
import re
from collections.abc import Callable, Iterator
from dataclasses import dataclass, replace
from typing import Any
from urllib.parse import parse_qsl, quote, unquote

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


# Query parameters that carry a credential (compared case-insensitively, after percent-decoding the name).
SECRET_PARAMETERS = frozenset(
    {"password", "passwd", "pwd", "sslpassword", "token", "access_token", "secret", "api_key", "apikey"}
)
# The password of the authority: from the first ``:`` of the user part to the LAST ``@`` of the URL, so that one
# holding a raw ``@``, ``/`` or ``?`` is masked whole (an ``@`` later in the URL masks more, never less).
_USERINFO = re.compile(r"(?P<head>[A-Za-z][A-Za-z0-9+.\-]*://[^/:@?#\s]*:)(?P<secret>.*)@", re.DOTALL)
# A query parameter ``name=value``; the value runs to the next ``&name=`` (or ``;name=``) or the end, so that one
# holding a raw ``&`` or ``#`` is masked whole.
_PARAMETER = re.compile(r"(?P<head>[?&;](?P<key>[^=&;?#/\s]+)=)(?P<value>.*?)(?=[&;][^=&;?#/\s]+=|\Z)", re.DOTALL)
_URL_WORD = re.compile(r"\b[A-Za-z][A-Za-z0-9+.\-]*://\S*")


def mask_url(url: str) -> str:
    """The URL with every credential replaced by ``***``.

    The authority's password (``postgresql://ann:***@db/x``), taken to the last ``@`` of the URL, and the value of
    every query parameter named in ``SECRET_PARAMETERS`` (``?user=ann&password=***``). Text that is no URL (a file
    path) is returned as it is. The whole string is one URL; :func:`mask_urls_in` masks the URLs inside a text.

    Parameters
    ----------
    url : str
        A database URL, or a file path.

    Returns
    -------
    str
        The URL with its credentials masked; more than a credential may be masked, never less.

    Examples
    --------
    >>> mask_url("postgresql://ann:p@ss@db/x?user=ann&password=hunter2")
    'postgresql://ann:***@db/x?user=ann&password=***'
    """
    if "://" not in url:
        return url

    def parameter(match: re.Match[str]) -> str:
        return f"{match['head']}***" if unquote(match["key"]).lower() in SECRET_PARAMETERS else match[0]

    return _USERINFO.sub(r"\g<head>***@", _PARAMETER.sub(parameter, url), count=1)


def mask_urls_in(text: str) -> str:
    """``text`` with every URL in it (``scheme://`` up to the next whitespace) passed through :func:`mask_url`.

    Parameters
    ----------
    text : str
        Free text: a message, a report's field.

    Returns
    -------
    str
        The text with the credentials of its URLs masked.
    """
    return _URL_WORD.sub(lambda match: mask_url(match[0]), text)


def _secrets(url: str) -> tuple[list[str], list[str]]:
    """The credentials written in a URL (as written and percent-decoded), longest first, and the pieces of a
    password that holds a raw ``@``, ``/``, ``:``, ``?`` or ``#``: a driver cuts it there and may then quote a piece
    as a host, a port or a database name (a piece of one character is left: it would mask every such word)."""
    found: set[str] = set()
    pieces: set[str] = set()
    for match in _PARAMETER.finditer(url):
        if unquote(match["key"]).lower() in SECRET_PARAMETERS:
            found.add(match["value"])
    userinfo = _USERINFO.search(url)
    if userinfo:
        found.add(userinfo["secret"])
        pieces = {piece for piece in re.split(r"[@/:?#]", userinfo["secret"]) if len(piece) > 1} - found
    found |= {unquote(secret) for secret in found}
    pieces |= {unquote(piece) for piece in pieces}
    return sorted(filter(None, found), key=len, reverse=True), sorted(filter(None, pieces), key=len, reverse=True)


def _clean(message: object, url: str) -> str:
    """A database message on one line, without the URL's credentials (wherever the driver quotes them)."""
    text = " ".join(str(message).split())
    secrets, pieces = _secrets(url)
    for secret in secrets:
        text = text.replace(secret, "***")
    for piece in pieces:  # a piece only where it stands as a word: "ss" of "p@ss" is no part of "address"
        text = re.sub(rf"(?<![^\W_]){re.escape(piece)}(?![^\W_])", "***", text)
    return mask_urls_in(text)


# --- what a query may do ---------------------------------------------------------------------------------------

QUERY_WORDS = ("select", "with", "values", "table")
# Server functions refused in a query, because a read-only transaction does not stop them (PostgreSQL 15 lets a
# read-only transaction create large objects, and a superuser write server files). A short list, not a sandbox:
# the real safeguard is a least-privilege role (no superuser, not in pg_write_server_files, no adminpack, no
# dblink, and no grant on the tables it should not read).
DENIED_FUNCTIONS = frozenset(
    {
        # write a server file (large objects to and from files; the adminpack extension)
        "lo_export", "lo_import", "pg_file_write", "pg_file_rename", "pg_file_unlink", "pg_file_sync",
        # write a large object
        "lo_create", "lo_creat", "lo_from_bytea", "lo_put", "lowrite", "lo_truncate", "lo_truncate64", "lo_unlink",
        # run SQL text given as a string (which this check cannot read), or in another, writable session
        "query_to_xml", "query_to_xmlschema", "query_to_xml_and_xmlschema",
        "dblink", "dblink_exec", "dblink_open", "dblink_send_query",
    }
)  # fmt: skip
_SERVER_FILE_WORDS = ("outfile", "dumpfile")  # MySQL's SELECT … INTO OUTFILE / DUMPFILE write a server file


@dataclass(frozen=True)
class _Lexis:
    """How a dialect reads quotes and comments: only what it takes to find statements, words and calls."""

    backslash: str = ""  # the quotes in which a backslash escapes the next character
    nested: bool = False  # /* */ comments nest (PostgreSQL)
    dollar: bool = False  # $tag$…$tag$ strings, E'…' strings and U&"…" names (PostgreSQL)
    mysql: bool = False  # # comments, -- only before a space, and /*! … */ text that runs
    backticks: bool = False  # `…` names (MySQL, SQLite)
    brackets: bool = False  # […] names (SQLite, SQL Server)


# A check passes only when it passes under every reading listed for the dialect: a PostgreSQL server may have
# standard_conforming_strings off (a backslash escapes in '…'), and for another dialect the reading is not known.
_POSTGRES = (_Lexis(nested=True, dollar=True), _Lexis(backslash="'", nested=True, dollar=True))
_SQLITE = (_Lexis(backticks=True, brackets=True),)
_MYSQL = (_Lexis(mysql=True, backticks=True), _Lexis(backslash="'\"", mysql=True, backticks=True))
_LEXES = {"sqlite": _SQLITE, "postgresql": _POSTGRES}
_ANY_DIALECT = (*_POSTGRES, *_SQLITE, *_MYSQL, _Lexis(backslash="'", backticks=True, brackets=True))
_WORD = re.compile(r"[^\W\d][\w$]*")
_NUMBER = re.compile(r"\d[\w.]*")
_DOLLAR_TAG = re.compile(r"\$(?:[^\W\d]\w*)?\$")
_PARAMETER_MARK = re.compile(r"\$\d+")
_LINE_END = re.compile(r"[\n\r]")


def _quoted_end(query: str, start: int, quote: str, backslash: bool) -> int:
    """The index after the quote that closes the one at ``start`` (doubled quotes are one character; the end of
    the text when it is not closed)."""
    i, n = start + 1, len(query)
    while i < n:
        if backslash and query[i] == "\\":
            i += 2
        elif query[i] == quote:
            if query.startswith(quote, i + 1):
                i += 2
            else:
                return i + 1
        else:
            i += 1
    return n


def _comment_end(query: str, start: int, nested: bool) -> int:
    """The index after the ``*/`` that closes the ``/*`` at ``start`` (the end of the text when it is not closed)."""
    i, depth, n = start + 2, 1, len(query)
    while i < n and depth:
        if nested and query.startswith("/*", i):
            depth, i = depth + 1, i + 2
        elif query.startswith("*/", i):
            depth, i = depth - 1, i + 2
        else:
            i += 1
    return i


def _tokens(query: str, lexis: _Lexis) -> Iterator[tuple[str, str]]:
    """The tokens of ``query`` as ``(kind, text)``, comments and whitespace left out: ``word`` (lower case),
    ``name`` (a quoted name, lower case), ``unicode name``, ``string``, ``number``, ``parameter``, or a punctuation
    character as both kind and text."""
    i, n = 0, len(query)
    while i < n:
        c = query[i]
        if c.isspace():
            i += 1
        elif (query.startswith("--", i) and not (lexis.mysql and i + 2 < n and not query[i + 2].isspace())) or (
            c == "#" and lexis.mysql
        ):
            line_end = _LINE_END.search(query, i)
            i = n if line_end is None else line_end.end()
        elif query.startswith("/*!", i) and lexis.mysql:
            i += 3  # MySQL runs the text of a /*! … */ comment: read it as code
        elif query.startswith("/*", i):
            i = _comment_end(query, i, lexis.nested)
        elif query.startswith("*/", i) and lexis.mysql:
            i += 2
        elif word := _WORD.match(query, i):
            text, i = word[0].lower(), word.end()
            if lexis.dollar and text == "e" and query.startswith("'", i):
                i = _quoted_end(query, i, "'", backslash=True)  # E'…': a backslash always escapes
                yield "string", ""
            elif lexis.dollar and text == "u" and query.startswith('&"', i):
                i = _quoted_end(query, i + 1, '"', backslash=False)
                yield "unicode name", ""
            else:
                yield "word", text
        elif c in "'\"" or (c == "`" and lexis.backticks):
            end = _quoted_end(query, i, c, c in lexis.backslash)
            text, i = query[i + 1 : end - 1].replace(c + c, c).lower(), end
            yield ("string", "") if c == "'" else ("name", text)
        elif c == "[" and lexis.brackets:
            end = query.find("]", i)
            end = n if end < 0 else end + 1
            text, i = query[i + 1 : end - 1].lower(), end
            yield "name", text
        elif c == "$" and lexis.dollar and (tag := _DOLLAR_TAG.match(query, i)):
            end = query.find(tag[0], tag.end())
            i = n if end < 0 else end + len(tag[0])
            yield "string", ""
        elif c == "$" and (mark := _PARAMETER_MARK.match(query, i)):
            i = mark.end()
            yield "parameter", mark[0]
        elif number := _NUMBER.match(query, i):
            i = number.end()
            yield "number", number[0]
        else:
            i += 1
            yield c, c


def _shown_token(kind: str, text: str) -> str:
    """How a refusal names the first token of a query: a word in capitals, never more of the text."""
    if kind == "word":
        return text.upper() if len(text) <= 24 else text[:21].upper() + "..."
    return {"name": "a quoted name", "unicode name": "a quoted name", "string": "a string"}.get(kind, repr(text[:1]))


def _problem(query: str, lexis: _Lexis, server: bool) -> str | None:
    """Why ``query`` read with ``lexis`` must not run (None: it may); ``server``: also the query-only rules."""
    tokens = list(_tokens(query, lexis))
    if any(kind == ";" for kind, _ in tokens[:-1]):
        return "holds more than one statement (text follows a ';'); give one query"
    if not server:
        return None
    first = next((token for token in tokens if token[0] != "("), None)
    if first is None:
        return "is empty (nothing but spaces or comments)"
    if first == ("word", "copy"):
        return "may not be COPY (it reads or writes files on the database server); give a SELECT"
    if first[0] != "word" or first[1] not in QUERY_WORDS:
        return f"must be a query starting with SELECT, WITH, VALUES or TABLE, not {_shown_token(*first)}"
    if any(kind == "unicode name" for kind, _ in tokens):
        return 'uses a Unicode-escaped name (U&"…"), which this check cannot read; write the name plainly'
    for (kind, text), (next_kind, next_text) in itertools.pairwise(tokens):
        if kind in ("word", "name") and text in DENIED_FUNCTIONS and next_kind == "(":
            return f"calls {text}(), a server function that writes files or large objects or runs SQL text"
        if (kind, text) == ("word", "into") and next_kind == "word" and next_text in _SERVER_FILE_WORDS:
            return f"writes a server file (INTO {next_text.upper()})"
    return None


def check_query(query: str, dialect: str, name: str = "the database") -> None:
    """Refuse a query that a read-only session must not be given.

    Every dialect: one statement (a ``;`` may be followed by nothing but whitespace and comments). A database
    server (any dialect but ``sqlite``) also: a query, starting (after whitespace, comments and opening
    parentheses) with ``SELECT``, ``WITH``, ``VALUES`` or ``TABLE``, so never ``COPY``; no call of a function in
    ``DENIED_FUNCTIONS``; no ``INTO OUTFILE``/``DUMPFILE``. Quotes and comments are read the way the dialect reads
    them, and where that may vary (a backslash in a string) every way must pass. For SQLite the authorizer of the
    session is the exact check; for a server, a least-privilege role is the real safeguard.

    Parameters
    ----------
    query : str
        The query as the user wrote it.
    dialect : str
        ``sqlite``, ``postgresql``, or the name of another SQLAlchemy dialect.
    name : str
        How the message names the source (a masked URL).

    Raises
    ------
    SettingError
        On ``query``, one line naming the reason and at most the query's first word or a function's name.
    """
    for lexis in _LEXES.get(dialect, _ANY_DIALECT):
        problem = _problem(query, lexis, server=dialect != "sqlite")
        if problem is not None:
            raise SettingError("query", f"of {name} {problem}")


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


# The authorizer's action codes (sqlite3 names them, but some of its names share a value with a result code).
_SQLITE_ACTIONS = (
    "CREATE_INDEX", "CREATE_TABLE", "CREATE_TEMP_INDEX", "CREATE_TEMP_TABLE", "CREATE_TEMP_TRIGGER",
    "CREATE_TEMP_VIEW", "CREATE_TRIGGER", "CREATE_VIEW", "DELETE", "DROP_INDEX", "DROP_TABLE", "DROP_TEMP_INDEX",
    "DROP_TEMP_TABLE", "DROP_TEMP_TRIGGER", "DROP_TEMP_VIEW", "DROP_TRIGGER", "DROP_VIEW", "INSERT", "PRAGMA",
    "READ", "SELECT", "TRANSACTION", "UPDATE", "ATTACH", "DETACH", "ALTER_TABLE", "REINDEX", "ANALYZE",
    "CREATE_VTABLE", "DROP_VTABLE", "FUNCTION", "SAVEPOINT", "RECURSIVE",
)  # fmt: skip
# Functions an SQLite session refuses although they are functions: extension loading, the file functions of the
# command-line shell and the tokenizer registration of FTS3, none of which a key query needs.
SQLITE_DENIED_FUNCTIONS = frozenset({"load_extension", "readfile", "writefile", "edit", "fts3_tokenizer"})


def _sqlite_authorizer(denied: list[str]) -> Callable[[int, str | None, str | None, str | None, str | None], int]:
    """An authorizer that allows reading (SELECT, reading a column, an ordinary function, a recursive common table
    expression) and denies every other action, noting in ``denied`` what it refused."""
    import sqlite3

    names = {getattr(sqlite3, f"SQLITE_{action}"): action for action in _SQLITE_ACTIONS}
    reads = {sqlite3.SQLITE_SELECT, sqlite3.SQLITE_READ, sqlite3.SQLITE_RECURSIVE}

    def authorize(action: int, first: str | None, second: str | None, database: str | None, trigger: str | None) -> int:
        function = (second or "").lower() if action == sqlite3.SQLITE_FUNCTION else None
        if action in reads or (function is not None and function not in SQLITE_DENIED_FUNCTIONS):
            return sqlite3.SQLITE_OK
        # name the action and, for a PRAGMA, a function or a transaction, the keyword (never a file name or a value)
        what = names.get(action, f"action {action}").replace("_", " ")
        if action == sqlite3.SQLITE_PRAGMA:
            what = f"PRAGMA {first}"
        elif function is not None:
            what = f"the function {function}()"
        elif action == sqlite3.SQLITE_TRANSACTION and first:
            what = first.upper()
        denied.append(what)
        return sqlite3.SQLITE_DENY

    return authorize


def _sqlite_target(url: str) -> str:
    """The file an ``sqlite://`` URL names, read the way SQLAlchemy reads it: ``sqlite:///keys.db`` relative,
    ``sqlite:////srv/keys.db`` absolute, percent-escapes decoded, ``sqlite:///file:PATH?…&uri=true`` an SQLite URI
    filename; ``:memory:`` for ``sqlite://`` and ``sqlite:///:memory:``. The URL's parameters are not used: the
    file is always opened read-only."""
    location, _, parameters = url.split("://", 1)[1].partition("?")
    database = unquote(location.partition("/")[2])
    uri = dict((k.lower(), v.lower()) for k, v in parse_qsl(parameters)).get("uri") in ("true", "1")
    if uri and database.startswith("file:"):
        database = database[len("file:") :]
        if database.startswith("//"):  # file://localhost/srv/keys.db
            database = "/" + database[2:].partition("/")[2]
        database = unquote(re.split(r"[?#]", database, maxsplit=1)[0])
    return database or ":memory:"


def _connect_sqlite(path: str, name: str) -> tuple[Any, list[str]]:
    """A read-only SQLite session and the list its authorizer notes refused actions in.

    The file opens as the URI ``file:PATH?mode=ro`` (never created), with ``PRAGMA query_only``, and an authorizer
    that allows reads only (see :func:`_sqlite_authorizer`); ``:memory:`` is an empty database under the same
    authorizer.
    """
    import sqlite3

    memory = path == ":memory:"
    if not memory and not os.path.isfile(path):
        raise InputError(f"{name}: no such SQLite file")
    target = ":memory:" if memory else f"file:{quote(os.path.abspath(path))}?mode=ro"
    denied: list[str] = []
    try:
        # one thread at a time, but maybe not the one that opened it (the reading thread takes over the stream);
        # autocommit, so that the module never begins a transaction of its own
        connection = sqlite3.connect(target, uri=not memory, check_same_thread=False, isolation_level=None)
    except sqlite3.Error as exc:
        raise InputError(f"{name}: cannot open: {exc}") from None
    try:
        connection.execute("PRAGMA query_only = ON")
        connection.set_authorizer(_sqlite_authorizer(denied))  # after the PRAGMA, which it would deny
    except sqlite3.Error as exc:
        connection.close()
        raise InputError(f"{name}: cannot open: {exc}") from None
    return connection, denied


def _connect_adbc(url: str, name: str) -> Any:
    """A PostgreSQL session through ADBC whose transactions are all read-only."""
    import adbc_driver_postgresql.dbapi as adbc

    plain = re.sub(r"^postgresql\+[a-z0-9]+://", "postgresql://", url)
    try:
        return adbc.connect(_read_only_url(plain))
    except Exception as exc:  # noqa: BLE001 - any driver error is an input error with its message
        raise InputError(f"{name}: cannot connect: {_clean(exc, url)}") from None


def _connect_sqlalchemy(url: str, name: str) -> tuple[Any, Any]:
    """An SQLAlchemy engine and connection (PostgreSQL: every transaction read-only)."""
    try:
        import sqlalchemy as sa
    except ImportError:
        raise UsageError("reading a database URL needs SQLAlchemy: pip install 'hashaudit[sql]'") from None
    try:
        postgres = url.split("://", 1)[0].startswith("postgresql")
        engine = sa.create_engine(url, connect_args={"options": READ_ONLY} if postgres else {})
        connection = engine.connect()
    except Exception as exc:  # noqa: BLE001
        raise InputError(f"{name}: cannot connect: {_clean(exc, url)}") from None
    return engine, connection


@contextlib.contextmanager
def _session(kind: str, url: str, name: str) -> Iterator[Any]:
    """A read-only connection of the driver ``kind`` (``sqlite``, ``adbc``, ``sqlalchemy``), closed on leaving;
    a driver error inside becomes a one-line InputError naming ``name``, without the URL's credentials, and an
    action SQLite's authorizer refused a SettingError on ``query`` naming the action."""
    denied: list[str] = []
    if kind == "sqlite":
        connection, denied = _connect_sqlite(url, name)
        close = connection.close
    elif kind == "adbc":
        connection = _connect_adbc(url, name)
        close = connection.close
    else:
        engine, connection = _connect_sqlalchemy(url, name)

        def close() -> None:
            connection.close()
            engine.dispose()

    try:
        yield connection
    except (InputError, UsageError):
        raise
    except Exception as exc:  # noqa: BLE001 - any driver error is an input error with its message
        if denied:
            raise SettingError(
                "query", f"of {name} may only read (a readonly session): {denied[0]} is refused"
            ) from None
        raise InputError(f"{name}: {_clean(exc, url)}") from None
    finally:
        close()


def _read_rows(kind: str, url: str, name: str, query: str, options: SourceOptions, stats: SourceStats,
               parameters: Any = ()) -> Iterator[RecordBatch]:  # fmt: skip
    """The records of a query: Python rows in batches for SQLite (``fetchmany``) and SQLAlchemy (a server-side
    cursor and ``yield_per``), Arrow record batches for ADBC (converted like a Parquet column)."""
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


def _fetch(kind: str, url: str, name: str, query: str) -> tuple[list[str], list[tuple]]:
    """The column names and every row of a small query (planning key ranges), in a read-only session of the
    source's driver."""
    with _session(kind, url, name) as connection:
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
    """The driver that reads a source (``sqlite``, ``adbc`` or ``sqlalchemy``) and the path or URL it is given:
    every SQLite source, file or URL, goes to the standard library's read-only session."""
    if not _URL.match(source):
        return "sqlite", source
    scheme = source.split("://", 1)[0].lower()
    if scheme.split("+", 1)[0] == "sqlite":
        return "sqlite", _sqlite_target(source)
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


def _checked_route(source: str, options: SourceOptions, name: str) -> tuple[str, str]:
    """:func:`_route`, after :func:`check_query` has passed the source's own query in the driver's dialect (the
    SELECT built from ``db_table`` is safe by construction: its names are checked, and quoted)."""
    kind, url = _route(source, options)
    if options.query:
        dialect = {"sqlite": "sqlite", "adbc": "postgresql"}.get(kind) or url.split("://", 1)[0].split("+")[0].lower()
        check_query(options.query, "postgresql" if dialect == "postgres" else dialect, name)
    return kind, url


def read_database(source: str, options: SourceOptions, stats: SourceStats) -> Iterator[RecordBatch]:
    """Yield the keys a database source's query returns (see the module notes); with ``options.key_range``, only
    those of the rows in that range of ``options.db_split_column``."""
    name = mask_url(source)
    query = build_query(options, name)  # the usage errors of the options before any driver is chosen
    kind, url = _checked_route(source, options, name)
    if options.key_range is None:
        yield from _read_rows(kind, url, name, query, options, stats)
        return
    style = _PARAMSTYLES[kind]
    query = build_query(options, name, style)
    yield from _read_rows(kind, url, name + _range_label(options), query, options, stats,
                          range_parameters(options.key_range, style))  # fmt: skip


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
    kind, url = _checked_route(source, options, name)
    inner = _bare(_base_query(options, name, with_split=True))
    column = _quoted_split(options)
    adbc = kind == "adbc"
    # through ADBC the bounds are the server's text form (cast back when reading), and pg_typeof names the type
    lowest_sql, highest_sql = (f"CAST({f}({column}) AS text)" if adbc else f"{f}({column})" for f in ("min", "max"))
    typed = f", CAST(pg_typeof(min({column})) AS text)" if adbc else ""
    summary = f"SELECT {lowest_sql}, {highest_sql}, count({column}), count(*){typed} FROM (\n{inner}\n) AS hashaudit_q"
    try:
        row = _fetch(kind, url, name, summary)[1][0]
    except InputError:
        names = _result_columns(kind, url, name, inner)
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
        _, boundaries = _fetch(kind, url, name, tiled)
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


def _result_columns(kind: str, url: str, name: str, query: str) -> list[str] | None:
    """The column names of a query's result (None when it cannot run): to explain a missing split column."""
    try:
        return _fetch(kind, url, name, f"SELECT * FROM (\n{query}\n) AS hashaudit_q LIMIT 0")[0]
    except HashAuditError:
        return None
