"""Delimited files: columns by name or number, composite keys, RFC 4180 quoting, clear errors."""

from __future__ import annotations

import gzip

import pytest

from hashaudit.errors import InputError, UsageError
from hashaudit.keys import SourceOptions, open_keys
from hashaudit.keys import delimited as delimited_module

# Invented table; the quoting follows RFC 4180 (a doubled quote inside a quoted field is one quote, quoted
# fields may hold the delimiter and line breaks).
CSV = (
    b"id,name,city\r\n"
    b'1,"Smith, Jo",Oslo\r\n'
    b'2,"say ""hi""",\r\n'
    b'3,"two\r\nlines",Rome\r\n'
    b"4,,Lima\r\n"
    b"007,NULL,  Kyiv  \r\n"
)


def read_all(path, **options) -> list[bytes]:
    return [k for batch in open_keys(path, SourceOptions(**options)) for k in batch.to_list()]


@pytest.fixture
def csv_path(tmp_path):
    path = tmp_path / "people.csv"
    path.write_bytes(CSV)
    return path


def test_column_by_name(csv_path):
    assert read_all(csv_path, columns=("name",)) == [b"Smith, Jo", b'say "hi"', b"two\r\nlines", b"", b"NULL"]


def test_column_by_index_and_default_first_column(csv_path):
    assert read_all(csv_path, columns=("2",)) == [b"Oslo", b"", b"Rome", b"Lima", b"  Kyiv  "]
    assert read_all(csv_path) == [b"1", b"2", b"3", b"4", b"007"]  # text, not numbers


def test_composite_key(csv_path):
    keys = read_all(csv_path, columns=("city", "0"), join="/")
    assert keys == [b"Oslo/1", b"/2", b"Rome/3", b"Lima/4", b"  Kyiv  /007"]
    stream = open_keys(csv_path, SourceOptions(columns=("city", "0"), join="/"))
    assert stream.description["columns"] == ["city", "0"]
    assert stream.description["join"] == "/"


def test_header_named_like_a_number_is_found_by_name(tmp_path):
    path = tmp_path / "years.csv"
    path.write_bytes(b"id,2024\na,x\nb,y\n")
    assert read_all(path, columns=("2024",)) == [b"x", b"y"]
    assert read_all(path, columns=("1",)) == [b"x", b"y"]


def test_no_header(tmp_path):
    path = tmp_path / "bare.csv"
    path.write_bytes(b"a,1\nb,2\n")
    assert read_all(path, header=False) == [b"a", b"b"]
    assert read_all(path, header=False, columns=("1", "0")) == [b"1|a", b"2|b"]
    with pytest.raises(
        UsageError, match=r"the files have no header row \(header false\), so give columns as 0-based numbers"
    ):
        read_all(path, header=False, columns=("name",))


def test_missing_column_lists_the_header(csv_path):
    with pytest.raises(InputError, match=r"people\.csv: no column 'email'; the header has 'id', 'name', 'city'$"):
        read_all(csv_path, columns=("email",))
    with pytest.raises(InputError, match=r"people\.csv: no column 3 \(numbered from 0\); the header has 'id'"):
        read_all(csv_path, columns=("3",))


def test_ragged_rows_are_an_error(tmp_path, monkeypatch):
    path = tmp_path / "ragged.csv"
    path.write_bytes(b"a,b\n1,2\n3\n4,5\n")
    # the row is named by its data row number (the header not counted) and never shown
    with pytest.raises(InputError, match=r"/ragged\.csv row 2 has 1 field, the header 2$") as info:
        read_all(path, columns=("b",))
    assert "\n" not in str(info.value)
    monkeypatch.setattr(delimited_module, "CSV_BLOCK_BYTES", 16)
    path.write_bytes(b"a,b\n" + b"1,2\n" * 20 + b"3\n")
    with pytest.raises(InputError, match=r"/ragged\.csv row 21 has 1 field, the header 2$"):
        read_all(path)
    path.write_bytes(b"1,2\n" + b'"x\ny",2\n' * 5 + b"3,4,5\n")  # rows, not lines, are counted
    with pytest.raises(InputError, match=r"/ragged\.csv row 7 has 3 fields, the first row 2$"):
        read_all(path, header=False)


def test_tsv_has_no_quoting(tmp_path):
    path = tmp_path / "t.tsv"
    path.write_bytes(b'k\tv\n"quoted"\t1\nhalf"\t2\na,b\t3\n')
    assert read_all(path) == [b'"quoted"', b'half"', b"a,b"]
    assert open_keys(path).description["delimiter"] == "\t"


def test_custom_delimiter(tmp_path):
    path = tmp_path / "semi.csv"
    path.write_bytes(b'a;b\n"x;y";2\n')
    assert read_all(path, delimiter=";") == [b"x;y"]
    with pytest.raises(UsageError, match="delimiter"):
        open_keys(path, SourceOptions(delimiter=";;"))


def test_small_blocks_give_the_same_keys(tmp_path, monkeypatch):
    path = tmp_path / "big.csv.gz"
    rows = [b'%d,"k,%d"' % (i, i * 7) for i in range(5000)]
    path.write_bytes(gzip.compress(b"n,key\n" + b"\n".join(rows) + b"\n", mtime=0))
    expected = [b"k,%d" % (i * 7) for i in range(5000)]
    assert read_all(path, columns=("key",)) == expected
    monkeypatch.setattr(delimited_module, "CSV_BLOCK_BYTES", 1000)
    stream = open_keys(path, SourceOptions(columns=("key",), batch_keys=300))
    batches = list(stream)
    assert [k for b in batches for k in b.to_list()] == expected
    assert max(len(b) for b in batches) <= 300
    assert stream.stats.records == 5000


def test_header_longer_than_the_probe(tmp_path, monkeypatch):
    monkeypatch.setattr(delimited_module, "_PROBE_BYTES", 8)
    path = tmp_path / "wide.csv"
    names = [f"column_{i}" for i in range(50)]
    path.write_bytes((",".join(names) + "\n" + ",".join(str(i) for i in range(50)) + "\n").encode())
    assert read_all(path, columns=("column_42",)) == [b"42"]


def test_errors_name_the_row(tmp_path):
    path = tmp_path / "ints.csv"
    path.write_bytes(b"n\n1\n2\nthree\n")
    with pytest.raises(InputError, match=r"ints\.csv row 3: not a decimal integer \(5 bytes\)$"):
        read_all(path, key_format="int")


@pytest.mark.parametrize("data", [b"", b"id,name\n", b"\n\n"])
def test_no_rows_no_keys(tmp_path, data):
    path = tmp_path / "empty.csv"
    path.write_bytes(data)
    with pytest.raises(InputError, match=r"empty\.csv: no keys"):
        read_all(path)


def test_bom_is_not_part_of_the_first_name(tmp_path):
    path = tmp_path / "bom.csv"
    path.write_bytes(b"\xef\xbb\xbfid,v\nx,1\n")
    assert read_all(path, columns=("id",)) == [b"x"]


def test_columns_need_a_delimited_format(tmp_path):
    path = tmp_path / "keys.txt"
    path.write_bytes(b"a\n")
    with pytest.raises(
        UsageError, match=r"--column a applies to csv, tsv, parquet and arrow sources, .* \(use --format csv"
    ):
        open_keys(path, SourceOptions(columns=("a",)))
    assert read_all(path, format="csv", header=False) == [b"a"]


def test_a_quote_left_open_in_the_last_column_is_an_error(tmp_path):
    """pyarrow alone would read everything after the stray quote as one value of the last column."""
    path = tmp_path / "stray.csv"
    path.write_bytes(b'k,v\na,1\nb,"2\nc,3\nd,4\n')
    with pytest.raises(InputError, match=r"stray\.csv: the quoted field that opens at byte 11 never closes") as info:
        read_all(path, columns=("k",))
    assert "\n" not in str(info.value)


def test_closed_quotes_of_every_kind_are_read(tmp_path):
    """Quoted line breaks, doubled quotes, a quote inside an unquoted field, text after a closing quote, CR line
    ends and no line break at the end: all closed, nothing refused."""
    path = tmp_path / "fine.csv"
    path.write_bytes(b'k,v\n"a\nb",1\n"say ""hi""",2\nx"y,3\n"p"q,4\r\n"",5\r"last",6')
    assert read_all(path, columns=("k",)) == [b"a\nb", b'say "hi"', b'x"y', b"pq", b"", b"last"]


@pytest.mark.parametrize("step", [1, 2, 3, 7])
def test_quotes_are_followed_across_read_boundaries(step):
    """The watch sees the bytes in whatever pieces the reader asks for: the verdict must not depend on them."""
    import io

    import numpy as np

    class Trickle(io.RawIOBase):
        def __init__(self, data: bytes) -> None:
            self.data = memoryview(data)

        def readable(self) -> bool:
            return True

        def readinto(self, buffer) -> int:
            n = min(step, len(buffer), len(self.data))
            memoryview(buffer).cast("B")[:n] = self.data[:n]
            self.data = self.data[n:]
            return n

    rng = np.random.default_rng(step)
    for _ in range(200):
        data = bytes(rng.choice(list(b'ab,"\n'), size=int(rng.integers(0, 30))))
        whole = delimited_module._QuoteWatch(Trickle(data), ",")
        whole._inner = io.BytesIO(data)  # one read of everything
        whole.read()
        pieces = delimited_module._QuoteWatch(Trickle(data), ",")
        pieces.read()
        assert pieces.unclosed() == whole.unclosed(), data
        assert (whole.unclosed() is not None) == _open_at_end(data), data


def _open_at_end(data: bytes) -> bool:
    """A plain reading of the same rules: is the input left inside a quoted field?"""
    quoted, previous, i = False, ord("\n"), 0
    while i < len(data):
        c = data[i]
        if quoted and c == ord('"'):
            if i + 1 < len(data) and data[i + 1] == ord('"'):
                i += 2
                previous = ord('"')
                continue
            quoted = False
        elif not quoted and c == ord('"') and previous in (ord(","), ord("\n"), ord("\r")):
            quoted = True
        previous = c
        i += 1
    return quoted


def test_ragged_rows_are_skipped_and_counted_on_request(tmp_path):
    path = tmp_path / "ragged.csv"
    path.write_bytes(b"k,v\n1,2\n3\n4,5,6\n7,8\n")
    stream = open_keys(path, SourceOptions(columns=("k",), on_bad_record="skip"))
    assert [k for batch in stream for k in batch.to_list()] == [b"1", b"7"]
    assert stream.stats.skipped == {"ragged_row": 2} and stream.stats.records == 4 and stream.stats.keys == 2
    tsv = tmp_path / "ragged.tsv"
    tsv.write_bytes(b"k\tv\na\tb\nc\n")
    stream = open_keys(tsv, SourceOptions(columns=("k",), on_bad_record="skip"))
    assert [k for batch in stream for k in batch.to_list()] == [b"a"] and stream.stats.skipped == {"ragged_row": 1}
