"""Reading data files as all-text record batches; malformed input as one InputFileError."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from studylog.data import read, read_whole
from studylog.data.read import file_facts, open_source, read_table
from studylog.errors import InputFileError, StudylogError, UsageError


def write(tmp_path: Path, name: str, data: bytes) -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


@pytest.mark.parametrize(
    ("data", "delimiter"),
    [
        (b"a,b,c\n1,2,3\n", ","),
        (b"a;b;c\n1,5;2,25;3\n4;5;6\n", ";"),  # decimal commas do not fool the detector
        (b"a\tb\n1\t2\n", "\t"),
        (b"a|b\n1|2\n", "|"),
        (b'name,comment\n"Smith; J.",ok; fine\n', ","),  # quoted and unquoted semicolons in values
    ],
)
def test_delimiter_is_detected(tmp_path: Path, data: bytes, delimiter: str) -> None:
    source = open_source(write(tmp_path, "x.csv", data))
    assert source.delimiter == delimiter
    header = data.split(b"\n")[0].decode().split(delimiter)
    assert len(source.columns) == len(header)


def test_cells_are_text_and_empty_cells_are_null(tmp_path: Path) -> None:
    path = write(tmp_path, "x.csv", b"id,amount,note\n001,1.50,\n002,,\"\"\n003,abc,x\n")
    table = read_table(path)
    assert table.schema.types == [pa.string()] * 3
    # leading zeros and trailing decimals survive: CSV is read as text
    assert table.column("id").to_pylist() == ["001", "002", "003"]
    assert table.column("amount").to_pylist() == ["1.50", None, "abc"]
    assert table.column("note").to_pylist() == [None, None, "x"]


def test_bom_and_crlf_and_missing_final_newline(tmp_path: Path) -> None:
    path = write(tmp_path, "x.csv", b"\xef\xbb\xbfa,b\r\n1,2\r\n3,4")
    table = read_table(path)
    assert table.column_names == ["a", "b"]
    assert table.to_pydict() == {"a": ["1", "3"], "b": ["2", "4"]}


def test_other_encoding_by_name(tmp_path: Path) -> None:
    path = write(tmp_path, "x.csv", "name\ncafé\nMüller\n".encode("latin-1"))
    with pytest.raises(InputFileError) as caught:
        open_source(path)
    assert caught.value.line == 2
    assert "--encoding" in caught.value.message
    assert read_table(path, encoding="latin-1").column("name").to_pylist() == ["café", "Müller"]


def test_unknown_encoding_is_a_usage_error(tmp_path: Path) -> None:
    with pytest.raises(UsageError):
        open_source(write(tmp_path, "x.csv", b"a\n1\n"), encoding="klingon-8")


def test_batches_keep_file_order_and_respect_batch_rows(tmp_path: Path) -> None:
    rows = "\n".join(f"{i},{i * 2}" for i in range(1000))
    path = write(tmp_path, "x.csv", ("i,j\n" + rows + "\n").encode())
    source = open_source(path, batch_rows=64)
    batches = list(source.batches())
    assert max(batch.num_rows for batch in batches) <= 64
    assert [v for b in batches for v in b.column(0).to_pylist()] == [str(i) for i in range(1000)]
    # a source can be read more than once
    assert sum(b.num_rows for b in source.batches()) == 1000


def test_a_row_longer_than_a_block_is_read(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(read, "FIRST_BLOCK", 1024)
    big = "x" * 50_000
    path = write(tmp_path, "x.csv", f"a,b\n1,short\n2,{big}\n3,end\n".encode())
    table = read_table(path)
    assert table.column("b").to_pylist() == ["short", big, "end"]
    assert table.column("a").to_pylist() == ["1", "2", "3"]


def test_progress_reaches_the_file_size(tmp_path: Path) -> None:
    path = write(tmp_path, "x.csv", b"a\n" + b"1\n" * 10_000)
    seen: list[tuple[int, int]] = []
    list(open_source(path, progress=lambda done, total: seen.append((done, total))).batches())
    assert seen and seen[-1] == (path.stat().st_size, path.stat().st_size)


def test_quoted_values_may_span_lines(tmp_path: Path) -> None:
    path = write(tmp_path, "x.csv", b'a,b\n1,"two\nlines"\n2,"say ""hi"""\n')
    assert read_table(path).column("b").to_pylist() == ["two\nlines", 'say "hi"']


@pytest.mark.parametrize(
    ("name", "data", "words", "line"),
    [
        ("empty.csv", b"", "empty", None),
        ("bom.csv", b"\xef\xbb\xbf", "byte-order mark", None),
        ("blank.csv", b" \n\n\t\n", "no text", None),
        ("header.csv", b"a,b,c\n", "no data rows", None),
        ("dup.csv", b"a,b,a\n1,2,3\n", "duplicate column name 'a'", 1),
        ("blankname.csv", b"a,,c\n1,2,3\n", "column 2 has a blank name", 1),
        ("spacename.csv", b"a,  ,c\n1,2,3\n", "column 2 has a blank name", 1),
        # pyarrow numbers rows without the empty line and counts the quoted two-line value once;
        # the message gives the physical line of the file
        ("ragged.csv", b'a,b\n1,"x\ny"\n\n3,4,5\n', "3 values but the header has 2", 5),
        ("short.csv", b"a,b\n1,2\n3\n", "1 value but the header has 2", 3),
        ("quote.csv", b'a,b\n1,2\n3,"4\n5,6\n', "never closed", 3),
        ("latin.csv", b"a,b\n1,2\n3,caf\xe9\n", "0xe9 is not valid utf-8", 3),
        ("nul.csv", b"a,b\n1,2\n3,x\x00y\n", "NUL byte", 3),
        ("zip.csv", b"PK\x03\x04\x14\x00\x00\x00", "zip archive", None),
        ("parquet.csv", b"PAR1\x00\x00", "Parquet", None),
        ("data.json", b"{}", "unknown kind of file '.json'", None),
        ("noext", b"a\n1\n", "unknown kind of file", None),
        ("old.xls", b"\xd0\xcf\x11\xe0", ".xls", None),
    ],
)
def test_malformed_csv_names_the_problem_and_line(
    tmp_path: Path, name: str, data: bytes, words: str, line: int | None
) -> None:
    path = write(tmp_path, name, data)
    with pytest.raises(InputFileError) as caught:
        list(open_source(path).batches())
    assert words in caught.value.message
    assert caught.value.line == line
    assert str(path) in caught.value.message


def test_errors_late_in_the_file_surface_while_streaming(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(read, "FIRST_BLOCK", 1 << 16)
    good = b"".join(b"%d,%d\n" % (i, i) for i in range(200_000))
    path = write(tmp_path, "x.csv", b"a,b\n" + good + b"1,2,3\n")
    source = open_source(path)  # the first block is fine
    with pytest.raises(InputFileError) as caught:
        list(source.batches())
    assert caught.value.line == 200_002


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(InputFileError, match="no such file"):
        open_source(tmp_path / "nope.csv")


def test_parquet_values_become_text(tmp_path: Path) -> None:
    table = pa.table(
        {
            "i": pa.array([1, None, -3], pa.int64()),
            "f": [1.5, float("nan"), 0.1],
            "s": ["x", "", None],
            "b": [True, False, None],
            "d": [dt.date(2024, 1, 2), None, dt.date(1999, 12, 31)],
            "t": pa.array([dt.datetime(2024, 1, 2, 3, 4, 5), None, dt.datetime(2024, 1, 2)], pa.timestamp("ns")),
            "tz": pa.array([dt.datetime(2024, 1, 2, 3, 4, 5, 250000), None, None], pa.timestamp("us", tz="UTC")),
            "c": pa.array(["u", "v", "u"]).dictionary_encode(),
        }
    )
    path = tmp_path / "x.parquet"
    pq.write_table(table, path)
    source = open_source(path)
    assert source.rows == 3 and source.format == "parquet"
    got = read_table(path)
    assert set(got.schema.types) == {pa.string()}
    assert got.to_pydict() == {
        "i": ["1", None, "-3"],
        "f": ["1.5", None, "0.1"],  # NaN is a missing value
        "s": ["x", None, None],
        "b": ["true", "false", None],
        "d": ["2024-01-02", None, "1999-12-31"],
        "t": ["2024-01-02T03:04:05", None, "2024-01-02T00:00:00"],
        "tz": ["2024-01-02T03:04:05.250000Z", None, None],
        "c": ["u", "v", "u"],
    }


def test_truncated_parquet(tmp_path: Path) -> None:
    path = tmp_path / "x.parquet"
    pq.write_table(pa.table({"a": list(range(1000))}), path)
    path.write_bytes(path.read_bytes()[:300])
    with pytest.raises(InputFileError, match="not a readable Parquet file"):
        open_source(path)


def test_nested_parquet_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "x.parquet"
    pq.write_table(pa.table({"a": [[1, 2], [3]]}), path)
    with pytest.raises(InputFileError, match="nested"):
        open_source(path)


def test_excel_first_sheet_or_named(tmp_path: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    first = book.active
    first.title = "visits"
    first.append(["id", "weight", "seen", "ok"])
    first.append([1, 71.5, dt.datetime(2024, 3, 1), True])
    first.append([None, 3.0, dt.datetime(2024, 3, 2), False])
    first.append([])  # an empty row is skipped, like an empty line in CSV
    first.append([3, None, None, None])
    other = book.create_sheet("codes")
    other.append(["code"])
    other.append(["A"])
    path = tmp_path / "x.xlsx"
    book.save(path)
    got = read_table(path)
    assert got.to_pydict() == {
        "id": ["1", None, "3"],
        "weight": ["71.5", "3", None],
        "seen": ["2024-03-01", "2024-03-02", None],  # midnight datetimes of a column are dates
        "ok": ["true", "false", None],
    }
    assert read_table(path, sheet="codes").to_pydict() == {"code": ["A"]}
    with pytest.raises(InputFileError, match="no sheet 'nope'"):
        open_source(path, sheet="nope")


def test_excel_header_only_and_not_a_workbook(tmp_path: Path) -> None:
    import openpyxl
    import zipfile

    book = openpyxl.Workbook()
    book.active.append(["a", "b"])
    path = tmp_path / "h.xlsx"
    book.save(path)
    with pytest.raises(InputFileError, match="no data rows"):
        open_source(path)
    fake = tmp_path / "z.xlsx"
    with zipfile.ZipFile(fake, "w") as archive:
        archive.writestr("readme.txt", "not a workbook")
    with pytest.raises(InputFileError, match="not a readable Excel workbook"):
        open_source(fake)


def test_file_facts_against_hashlib(tmp_path: Path) -> None:
    import hashlib

    data = b"a,b\n" + b"1,2\n" * 300_000
    path = write(tmp_path, "x.csv", data)
    # reference: hashlib over the whole content at once
    assert file_facts(path) == (hashlib.sha256(data).hexdigest(), len(data))


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.binary(max_size=400), suffix=st.sampled_from([".csv", ".tsv", ".parquet", ".xlsx"]))
def test_arbitrary_bytes_raise_only_our_error(tmp_path: Path, data: bytes, suffix: str) -> None:
    path = tmp_path / f"any{suffix}"
    path.write_bytes(data)
    try:
        source = open_source(path)
        for batch in source.batches():
            assert all(pa.types.is_string(t) or pa.types.is_large_string(t) for t in batch.schema.types)
    except StudylogError:
        pass


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    data=st.lists(
        st.lists(st.text(st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00"), max_size=8),
                 min_size=3, max_size=3),
        min_size=1, max_size=20,
    )
)
def test_csv_round_trip_through_the_standard_writer(tmp_path: Path, data: list[list[str]]) -> None:
    """Python's csv writer (the reference) writes any cells; we read back the same texts, '' as null."""
    import csv
    import io

    buffer = io.StringIO()
    writer = csv.writer(buffer, quoting=csv.QUOTE_ALL, lineterminator="\n")
    writer.writerow(["a", "b", "c"])
    writer.writerows(data)
    path = tmp_path / "x.csv"
    path.write_text(buffer.getvalue(), encoding="utf-8")
    table = read_table(path)
    # every value quoted, so nothing is an empty line; \r inside quotes is kept by both
    expected = [[cell if cell != "" else None for cell in row] for row in data]
    got = [list(row) for row in zip(*(table.column(i).to_pylist() for i in range(3)))]
    assert got == expected


def test_excel_and_parquet_progress_reach_the_file_size(tmp_path: Path) -> None:
    import openpyxl

    book = openpyxl.Workbook()
    book.active.append(["n"])
    for i in range(300):
        book.active.append([i])
    workbook = tmp_path / "x.xlsx"
    book.save(workbook)
    parquet = tmp_path / "x.parquet"
    pq.write_table(pa.table({"n": list(range(300))}), parquet)
    for path in (workbook, parquet):
        seen: list[tuple[int, int]] = []
        batches = list(open_source(path, batch_rows=100, progress=lambda d, t: seen.append((d, t))).batches())
        assert sum(b.num_rows for b in batches) == 300
        assert seen[-1] == (path.stat().st_size, path.stat().st_size)
        assert [d for d, _ in seen] == sorted(d for d, _ in seen)


def _streamed(path: Path) -> pa.Table:
    source = open_source(path)
    return pa.Table.from_batches(list(source.batches())).rename_columns(source.columns)


@pytest.mark.parametrize(
    "data",
    [
        b"a,b\n1,2\n3,4\n",
        b'a,b\n"x\ny",2\n\n3,"say ""hi"""\n',  # a newline in a value, an empty line, doubled quotes
        b"\xef\xbb\xbfa;b\r\n1;\r\n;4",  # BOM, CRLF, empty cells, no final newline
    ],
)
def test_whole_file_read_equals_the_streamed_batches(tmp_path: Path, data: bytes) -> None:
    path = write(tmp_path, "x.csv", data)
    assert read_whole.csv_whole(open_source(path)) is not None
    assert read_table(path).equals(_streamed(path))


def test_whole_file_read_of_many_blocks_keeps_row_order(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(read_whole, "WHOLE_BLOCK", 1 << 10)
    rows = "".join(f"{i},v{i % 7}\n" for i in range(5000))
    path = write(tmp_path, "x.csv", ("n,v\n" + rows).encode())
    table = read_table(path)
    assert table.column("n").num_chunks > 1
    assert table.column("n").to_pylist() == [str(i) for i in range(5000)]
    assert table.equals(_streamed(path))


def test_a_watched_whole_file_read_tells_each_chunk_of_data_rows(tmp_path: Path,
                                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(read_whole, "WHOLE_BLOCK", 1 << 10)
    rows = "".join(f"{i},v{i % 7}\n" for i in range(5000))
    path = write(tmp_path, "x.csv", ("n,v\n" + rows).encode())
    told: list[pa.RecordBatch | None] = []
    table = read_table(path, watch=told.append)
    assert table.equals(read_table(path)) and None not in told
    assert [batch.num_rows for batch in told] == [len(chunk) for chunk in table.column("n").chunks]
    assert pa.Table.from_batches(told).rename_columns(table.column_names).equals(table)


def test_a_watched_read_given_up_says_so(tmp_path: Path) -> None:
    # an odd number of quotes sends the file to the streaming reader (a stray quote is legal there)
    path = write(tmp_path, "x.csv", b'a,b\n1,x"y\n3,4\n')
    told: list[pa.RecordBatch | None] = []
    table = read_table(path, watch=told.append)
    assert told and told[-1] is None
    assert table.equals(_streamed(path))


@pytest.mark.parametrize(
    ("data", "error", "line"),
    [
        (b"a,b\n1,2\n3,4,5\n", "ragged rows", 3),
        (b'a,b\n1,"open\n2,3\n', "unterminated quote", 2),
        (b"a,b\n1,2\n3,\x004\n", "NUL byte", 3),
        (b"a,b\n1,2\n\xff,3\n", "not valid utf-8", 3),
    ],
)
def test_whole_file_read_reports_errors_as_the_streaming_reader(
    tmp_path: Path, data: bytes, error: str, line: int
) -> None:
    path = write(tmp_path, "x.csv", data)
    with pytest.raises(InputFileError) as caught:
        read_table(path)
    assert error in caught.value.message
    assert caught.value.line == line


def test_whole_file_read_with_progress_reaches_the_file_size(tmp_path: Path) -> None:
    path = write(tmp_path, "x.csv", b"a,b\n" + b"1,2\n" * 5000)
    seen: list[tuple[int, int]] = []
    table = read_table(path, progress=lambda done, total: seen.append((done, total)))
    assert table.num_rows == 5000
    assert seen[-1] == (path.stat().st_size, path.stat().st_size)


@pytest.mark.parametrize("data", [b'a,"b"\n1,2\n', b'a,b\n"1",\x00\n' + b"x" * (3 << 20) + b'\x00"\n', b""])
def test_the_scan_finds_what_the_watched_file_finds(tmp_path: Path, data: bytes,
                                                    monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(read_whole, "SCAN_BLOCK", 1 << 20)
    path = write(tmp_path, "x.csv", data)
    watched = read.WatchedFile(path, len(data), None, watch_nul=True)
    with watched:
        while watched.read(1 << 16):
            pass
    assert read_whole.scan_bytes(path, watch_nul=True) == (watched.nul_at, watched.quotes, True)


@pytest.mark.parametrize(
    ("data", "valid"),
    [
        (b"a,b\n1,2\n", True),
        ("a,b\ncafé,naïve ☕\n".encode(), True),  # characters cut by the ends of 4-byte blocks
        (b"a,b\n\xc3\xa9,\xff\n", False),
        (b"a,b\n1,\xed\xa0\x80\n", False),  # an encoded surrogate
        (b"a,b\n1,\xe2\x98", False),  # the file ends inside a character
    ],
)
def test_the_scan_validates_utf8_as_the_parser_does(tmp_path: Path, data: bytes, valid: bool,
                                                   monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(read_whole, "SCAN_BLOCK", 4)
    path = write(tmp_path, "x.csv", data)
    assert read_whole.scan_bytes(path, watch_nul=True, check_utf8=True)[2] is valid
    if not valid:
        with pytest.raises(InputFileError) as caught:
            read_table(path)
        assert "not valid utf-8" in caught.value.message


def test_only_a_whole_csv_read_tells_of_its_batches(tmp_path: Path) -> None:
    # the profile waits for the first batch before its imports only where one will come
    path = tmp_path / "members.csv"
    path.write_text("id,age\n1,30\n2,41\n", encoding="utf-8")
    told: list[object] = []
    table = read_table(path, watch=told.append)
    assert read.tells_batches(path) and told and sum(len(batch) for batch in told) == table.num_rows == 2
    assert not read.tells_batches(path, progress=lambda done, total: None)
    assert not read.tells_batches(tmp_path / "members.parquet")
    assert read.tells_batches(tmp_path / "MEMBERS.TSV")
