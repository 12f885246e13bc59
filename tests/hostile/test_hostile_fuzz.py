"""Hypothesis fuzzing of the sources and of the option parsers, through the command line, with fixed seeds.

Every example must end with exit 0/1 and a report, or exit 2 and one line (click's own usage error, for a value
its parameter type refuses, is also accepted for options) — never a traceback or an internal error. Where the
outcome is easy to predict from the input (which key files are text, which options are in range), the test
predicts it and checks it.
"""

from __future__ import annotations

import codecs
import math
from pathlib import Path

import pytest
from hostile_cli import QUICK, expect_clean, read_report, run
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from hashaudit.keys.open import sniff_compression

FUZZ = settings(
    derandomize=True,
    max_examples=60,
    deadline=None,
    database=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)

# Pieces that often break parsers: line ends, quotes, delimiters, NUL, bytes that are not UTF-8, a BOM, JSON
# punctuation, escapes of lone surrogates, numbers past every range, compression magic numbers.
PIECES = [
    b"a", b"k", b"0", b"1", b"-", b"e", b" ", b"\t", b",", b";", b'"', b"'", b"\\", b"\n", b"\r", b"\r\n",
    b"\x00", b"\xff", b"\xc3", b"\xc3\xa9", b"\xed\xa0\x80", b"\xef\xbb\xbf", b"{", b"}", b"[", b"]", b":",
    b"null", b"true", b'"k"', b"\\ud800", b"9" * 30, b"1e400", b"\x1f\x8b\x08", b"\x28\xb5\x2f\xfd",
]  # fmt: skip

nasty_bytes = st.one_of(
    st.binary(max_size=200),
    st.lists(st.sampled_from(PIECES), max_size=60).map(b"".join),
)


def _records(data: bytes) -> list[bytes]:
    """The lines of a key file as the reader sees them: split at LF, a CR just before an LF dropped."""
    if not data:
        return []
    lines = data.split(b"\n")
    if data.endswith(b"\n"):
        lines.pop()
    ends = [True] * (len(lines) - 1) + [data.endswith(b"\n")]  # only a CR just before an LF is dropped
    return [line[:-1] if end and line.endswith(b"\r") else line for line, end in zip(lines, ends, strict=True)]


def _is_text(line: bytes) -> bool:
    try:
        codecs.utf_8_decode(line, "strict", True)
    except UnicodeDecodeError:
        return False
    return b"\x00" not in line


def _audit_bytes(tmp_path: Path, name: str, data: bytes, *options: str):
    source = tmp_path / name
    source.write_bytes(data)
    report = tmp_path / "fuzz.json"
    report.unlink(missing_ok=True)
    result = run(["audit", str(source), *QUICK, "--checks", "buckets", "--json", str(report), *options])
    code, line = expect_clean(result, names=str(source), report=report)
    event(f"exit {code}")
    return code, line, read_report(report) if code != 2 else None


# --- sources -------------------------------------------------------------------------------------------------


@FUZZ
@given(data=nasty_bytes)
def test_random_bytes_as_a_key_file(tmp_path, data):
    code, line, document = _audit_bytes(tmp_path, "keys.txt", data)
    records = _records(data)
    if records and all(_is_text(r) for r in records):
        assert code in (0, 1), line
        assert document["sources"][0]["stats"]["records"] == len(records)
    else:
        assert code == 2
        assert "no keys" in line or "binary" in line or "not valid UTF-8" in line


@FUZZ
@given(data=nasty_bytes)
def test_random_bytes_as_a_key_file_with_raw_bytes(tmp_path, data):
    code, line, document = _audit_bytes(tmp_path, "keys.bin", data, "--raw-bytes")
    records = _records(data)
    if records:
        assert code in (0, 1), line
        stats = document["sources"][0]["stats"]
        assert (stats["records"], stats["keys"]) == (len(records), len(records))
    else:
        assert code == 2
        assert line.endswith("no keys")


@FUZZ
@given(data=nasty_bytes)
def test_random_bytes_with_bad_lines_skipped(tmp_path, data):
    code, line, document = _audit_bytes(tmp_path, "keys.txt", data, "--on-bad-record", "skip")
    records = _records(data)
    text = [r for r in records if _is_text(r)]
    if len(text) < len(records) and sniff_compression(data[:10]) is not None:
        assert code == 2
        assert "give the file its compression suffix" in line
    elif text:
        assert code in (0, 1), line
        stats = document["sources"][0]["stats"]
        assert stats["records"] == len(records)
        assert stats["keys"] == len(text)
        assert sum(stats["skipped"].values()) == len(records) - len(text)
    else:
        assert code == 2
        assert "no keys" in line


@FUZZ
@given(data=nasty_bytes, header=st.booleans(), skip=st.booleans())
def test_random_bytes_as_csv(tmp_path, data, header, skip):
    options = [] if header else ["--no-header"]
    options += ["--on-bad-record", "skip"] if skip else []
    _audit_bytes(tmp_path, "rows.csv", data, *options)


csv_field = st.one_of(
    st.text(alphabet=st.sampled_from(list("ab1 ;\t\\") + ["\u00e9", "\ufeff", "\x00"]), max_size=6),
    st.text(alphabet=st.sampled_from(list('ab,"\r\n ')), max_size=6).map(lambda t: '"' + t.replace('"', '""') + '"'),
    st.sampled_from(['"', '"a', 'a"b', '""', '"a"b', "1e400", "-1", "NaN", " 2 "]),
)


@FUZZ
@given(
    rows=st.lists(st.lists(csv_field, min_size=1, max_size=3), min_size=1, max_size=6),
    line_end=st.sampled_from(["\n", "\r\n", "\r"]),
    weighted=st.booleans(),
    skip=st.booleans(),
)
def test_random_csv_rows(tmp_path, rows, line_end, weighted, skip):
    text = line_end.join(",".join(row) for row in rows) + line_end
    options = ["--no-header", "-c", "0"] + (["--weight-column", "1", "--shards", "3"] if weighted else [])
    options += ["--on-bad-record", "skip"] if skip else []
    _audit_bytes(tmp_path, "rows.csv", text.encode("utf-8"), *options)


@FUZZ
@given(data=nasty_bytes, skip=st.booleans())
def test_random_bytes_as_tsv(tmp_path, data, skip):
    _audit_bytes(tmp_path, "rows.tsv", data, "--no-header", *(["--on-bad-record", "skip"] if skip else []))


json_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | st.text(max_size=10),
    lambda children: st.lists(children, max_size=3) | st.dictionaries(st.sampled_from("kwx"), children, max_size=3),
    max_leaves=8,
)


def _json_text(value: object) -> str:
    import json

    return json.dumps(value)  # NaN and Infinity come out as Python writes them, which the reader accepts


@FUZZ
@given(
    lines=st.lists(
        st.one_of(
            json_values.map(_json_text),
            st.dictionaries(st.sampled_from("kw"), json_values, max_size=2).map(_json_text),
            st.tuples(json_values, st.one_of(st.floats(), st.integers(), st.none())).map(
                lambda p: _json_text({"k": p[0], "w": p[1]})
            ),
            st.text(max_size=30),
        ),
        max_size=8,
    ),
    weighted=st.booleans(),
    skip=st.booleans(),
)
def test_random_json_lines(tmp_path, lines, weighted, skip):
    data = "\n".join(lines).encode("utf-8", "surrogatepass")
    options = ["-f", "k"] + (["--weight-column", "w", "--shards", "3"] if weighted else [])
    options += ["--on-bad-record", "skip"] if skip else []
    _audit_bytes(tmp_path, "events.jsonl", data, *options)


@FUZZ
@given(data=nasty_bytes, key_format=st.sampled_from(["hex", "base64", "int"]), skip=st.booleans())
def test_random_bytes_under_each_key_format(tmp_path, data, key_format, skip):
    options = ["--raw-bytes", "--key-format", key_format] + (["--on-bad-record", "skip"] if skip else [])
    _audit_bytes(tmp_path, "keys.txt", data, *options)


# --- option parsers ------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def key_file(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("fuzz") / "keys.txt"
    path.write_bytes(b"".join(b"key-%d\n" % i for i in range(3000)))
    return path


def _audit_option(key_file: Path, *options: str) -> tuple[int, str]:
    code, line = expect_clean(run(["audit", str(key_file), "-H", "xxh3_64", *options]), usage_ok=True)
    event(f"exit {code}")
    return code, line


def _number_text(x: float | int) -> str:
    return repr(x) if isinstance(x, float) else str(x)


size_text = st.one_of(
    st.integers(min_value=-(2**70), max_value=2**70).map(str),
    st.integers(min_value=0, max_value=80).map(lambda e: f"2^{e}"),
    st.integers(min_value=0, max_value=80).map(lambda e: f"1<<{e}"),
    st.tuples(st.integers(0, 5000), st.sampled_from(["k", "K", "m", "M", "g", "t", "kb", ""])).map(
        lambda p: f"{p[0]}{p[1]}"
    ),
    st.text(alphabet="0123456789^<kmgKMG .-+e_x", max_size=12),
)


@FUZZ
@given(value=size_text)
def test_buckets_values(key_file, value):
    from hashaudit.errors import UsageError
    from hashaudit.tables.sizes import parse_size

    try:
        size: int | None = parse_size(value)
    except UsageError:
        size = None
    if size is not None and 2**20 < size <= 2**32:
        value, size = "2^10", 2**10  # in range but costly (2^32 counters are 32 GiB); the parser test covers these
    code, line = _audit_option(key_file, "-m", value, "--checks", "buckets")
    if size is not None and 1 <= size <= 2**20:
        assert code in (0, 1), line
    else:
        assert code == 2, value


@pytest.mark.parametrize("value", ["2^32", "4294967296"])
def test_buckets_at_the_maximum_are_accepted_by_the_parser(value):
    from hashaudit.tables.sizes import parse_size

    assert parse_size(value) == 2**32  # the largest size --buckets takes (the error message says "at most 2^32")


@FUZZ
@given(
    value=st.one_of(
        st.tuples(st.integers(-1, 20), st.none() | st.integers(-1, 70)).map(
            lambda p: str(p[0]) if p[1] is None else f"{p[0]}@{p[1]}"
        ),
        st.text(alphabet="0123456789@ -+.x", max_size=8),
    )
)
def test_tag_bits_values(key_file, value):
    code, line = _audit_option(key_file, "-m", "2^10", "--tag-bits", value, "--checks", "tags")
    if value.isdigit():
        assert (code in (0, 1)) == (1 <= int(value) <= 16), line


finite_or_not = st.floats(allow_nan=True, allow_infinity=True)


@FUZZ
@given(
    value=st.one_of(
        st.tuples(st.floats(0.5, 20), st.floats(0, 1.2)).map(lambda p: f"{p[0]:.4f}@{p[1]:.4f}"),
        st.tuples(finite_or_not, finite_or_not).map(lambda p: f"{p[0]!r}@{p[1]!r}"),
        st.text(alphabet="0123456789@.-e ", max_size=10),
    )
)
def test_growth_values(key_file, value):
    code, line = _audit_option(key_file, "-m", "2^10", "--growth", value, "--checks", "growth")
    factor, _, load = value.partition("@")
    try:
        good = 1 < float(factor) <= 16 and 0 < float(load) < 1 and "e" not in value and "-" not in value
    except ValueError:
        good = False
    if good:
        assert code in (0, 1), line


@FUZZ
@given(
    value=st.one_of(
        st.floats(0, 1).map(_number_text),
        finite_or_not.map(_number_text),
        st.text(alphabet="0123456789.-e+naif", max_size=8),
    )
)
def test_load_values(key_file, value):
    code, line = _audit_option(key_file, "-m", "2^10", "--load", value, "--checks", "tables")
    try:
        number = float(value)
    except ValueError:
        return
    assert (code in (0, 1)) == (0 < number < 1), (value, line)


@FUZZ
@given(value=st.one_of(st.integers(-10, 300), st.integers(-(2**70), 2**70)).map(str))
def test_shards_values(key_file, value):
    code, line = _audit_option(key_file, "-m", "2^10", "--shards", value, "--checks", "shards")
    if 1 <= int(value) <= 300:
        assert code in (0, 1), line
    if int(value) < 1 or int(value) > 65_536:
        assert code == 2


capacity_weight = st.one_of(
    st.floats(min_value=0, max_value=1e300),  # subnormal ones included
    st.sampled_from([0.0, -1.0, 5e-324, 1e308, math.nan, math.inf, -math.inf]),
)


@FUZZ
@given(
    weights=st.one_of(
        st.lists(capacity_weight, min_size=1, max_size=6).map(lambda ws: ",".join(repr(w) for w in ws)),
        st.text(alphabet="0123456789,.-e ", max_size=12),
    ),
    scheme=st.sampled_from(["rendezvous", "ring", "mod", "jump"]),
)
def test_shard_weights_values(key_file, weights, scheme):
    count = str(max(1, weights.count(",") + 1))
    options = ["-m", "2^10", "--shards", count, "--shard-scheme", scheme, "--vnodes", "16", "--checks", "shards"]
    code, line = _audit_option(key_file, *options, "--shard-weights", weights)
    if scheme in ("mod", "jump") and weights.strip():
        assert code == 2  # these schemes cannot weight shards


target_names = st.sampled_from(["mean-hit", "mean-miss", "p99-hit", "p99-miss", "no-collision", "nope", ""])


@FUZZ
@given(
    target=st.one_of(
        st.tuples(target_names, finite_or_not).map(lambda p: f"{p[0]}={p[1]!r}"),
        st.tuples(target_names, st.floats(0, 10)).map(lambda p: f"{p[0]}={p[1]!r}"),
        st.text(alphabet="meanhitp99-=.0123456789 ", max_size=14),
    ),
    kind=st.sampled_from(["chaining", "linear", "quadratic", "double", "robin-hood"]),
    keys=st.integers(1, 10**6),
)
def test_plan_target_values(target, kind, keys):
    result = run(["plan", "-n", str(keys), "--target", target, "--table-kind", kind])
    code, line = expect_clean(result, usage_ok=True)
    event(f"exit {code}")
    name = target.partition("=")[0]
    if name not in ("mean-hit", "mean-miss", "p99-hit", "p99-miss", "no-collision"):
        assert code == 2


CHECK_WORDS = [
    "all", "buckets", "bits", "collisions", "tables", "growth", "tags", "shards", "chi_square", "max_load",
    "bit_bias", "full_collisions", "probe_cost", "growth_cost", "nope", "", " ", "ALL",
]  # fmt: skip


@FUZZ
@given(words=st.lists(st.sampled_from(CHECK_WORDS), max_size=5))
def test_checks_values(key_file, words):
    value = ",".join(words)
    code, line = _audit_option(key_file, "-m", "2^10", "--checks", value, "--avalanche-keys", "64")
    if "nope" in words or "ALL" in words:
        assert code == 2
        assert "unknown check" in line
