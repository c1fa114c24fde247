"""The bad-input corpus of data files: malformed, hostile, or merely unusual.

Run as a script to write the files into a folder (``python tests/corpus/make_corpus.py DIR``); the tests
call :func:`make_corpus` into a temporary folder, so that the large files (10,000 columns, a 1 MB cell)
are never committed. Every file is made from fixed bytes or a seeded generator: the corpus is the same
on every run.

Each entry says what reading it must give: ``error`` with words the one-line message must contain (and
the line where one applies), or ``ok`` with facts a correct reading shows.
"""

from __future__ import annotations

import io
import random
import sys
import zipfile
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any


@dataclass
class CorpusFile:
    name: str
    make: Callable[[Path], None]
    error: str | None = None  # words of the InputFileError message; None: the file must be read
    line: int | None = None
    columns: int | None = None  # for readable files: the columns a correct reading finds
    rows: int | None = None
    types: dict[str, str] = field(default_factory=dict)  # inferred types a correct draft shows


def _bytes(data: bytes) -> Callable[[Path], None]:
    return lambda path: path.write_bytes(data)


def _text(text: str, encoding: str = "utf-8") -> Callable[[Path], None]:
    return lambda path: path.write_bytes(text.encode(encoding))


def _wide(path: Path) -> None:
    header = ",".join(f"c{i}" for i in range(10_000))
    rows = [",".join(str((i * 7 + r) % 100) for i in range(10_000)) for r in range(3)]
    path.write_text("\n".join([header, *rows]) + "\n", encoding="utf-8")


def _big_cell(path: Path) -> None:
    path.write_text("id,note\n1," + "x" * 1_000_000 + "\n2,short\n", encoding="utf-8")


def _random_binary(path: Path) -> None:
    generator = random.Random(20240301)
    path.write_bytes(bytes(generator.randrange(256) for _ in range(4096)))


def _parquet(table_of: Callable[[], Any], cut: int | None = None) -> Callable[[Path], None]:
    def make(path: Path) -> None:
        import pyarrow.parquet as pq

        buffer = io.BytesIO()
        pq.write_table(table_of(), buffer)
        data = buffer.getvalue()
        path.write_bytes(data[:cut] if cut else data)

    return make


def _numbers_table() -> Any:
    import pyarrow as pa

    return pa.table({"n": list(range(500)), "x": [i / 3 for i in range(500)]})


def _nested_table() -> Any:
    import pyarrow as pa

    return pa.table({"tags": [["a", "b"], ["c"]]})


def _empty_table() -> Any:
    import pyarrow as pa

    return pa.table({"a": pa.array([], pa.int64())})


def _binary_table() -> Any:
    import pyarrow as pa

    return pa.table({"blob": pa.array([b"\xff\xfe\x00", b"ok"], pa.binary())})


def _workbook(rows: list[list[Any]], *, empty: bool = False) -> Callable[[Path], None]:
    def make(path: Path) -> None:
        import openpyxl

        book = openpyxl.Workbook()
        sheet = book.active
        if not empty:
            for row in rows:
                sheet.append(row)
        book.save(path)

    return make


def _zip_of_other(path: Path) -> None:
    with zipfile.ZipFile(path, "w") as archive:
        archive.writestr("notes/readme.txt", "this archive holds no workbook")


def _many_lines(count: int) -> str:
    return "".join(f"{i},{i * 2}\n" for i in range(count))


HOSTILE_TEXT = (
    'id,comment,formula\n'
    '1,"<script>alert(""x"")</script>","=HYPERLINK(""http://example.invalid"",""click"")"\n'
    '2,<b>bold</b> & <i>more</i>,+cmd|\' /C calc\'!A0\n'
    '3,"{{ 7*7 }} {% raw %}","@SUM(1+1)"\n'
    '4,"\'; DROP TABLE variables; --",-2+3\n'
)

KEYWORD_NAMES = (
    'select,from,"drop table x;","it\'s","say ""hi""",where,"a;b"\n'
    "1,2,3,4,5,6,7\n8,9,10,11,12,13,14\n"
)

LONG_NAMES = ",".join(["v" * 200, "w" * 1000, "ok"]) + "\n1,2,3\n4,5,6\n"

NUMBER_EDGES = (
    "huge,nan,zero,arabic\n"
    + "".join(f"{'1e309' if i == 0 else i},{'NaN' if i % 5 == 0 else i / 2},{'-0' if i % 2 else '0'},٣\n"
              for i in range(40))
)

DATE_EDGES = "seen,born\n" + "".join(
    f"{'2024-02-30' if i == 0 else f'2024-01-{i % 28 + 1:02d}'},{'0000-01-01' if i == 0 else f'19{50 + i}-06-15'}\n"
    for i in range(40)
)


def corpus() -> list[CorpusFile]:
    utf16 = "a,b\n1,2\n".encode("utf-16")
    return [
        CorpusFile("empty.csv", _bytes(b""), error="the file is empty"),
        CorpusFile("header_only.csv", _text("a,b,c\n"), error="no data rows"),
        CorpusFile("header_only_no_newline.csv", _text("a,b,c"), error="no data rows"),
        CorpusFile("bom_only.csv", _bytes(b"\xef\xbb\xbf"), error="byte-order mark"),
        CorpusFile("newlines_only.csv", _text("\n\n\r\n"), error="holds no text"),
        CorpusFile("ragged_long.csv", _text("a,b\n1,2\n3,4,5\n"), error="ragged", line=3),
        CorpusFile("ragged_short.csv", _text("a,b,c\n1,2,3\n4\n"), error="ragged", line=3),
        CorpusFile("ragged_late.csv", _text("a,b\n" + _many_lines(50_000) + "1,2,3\n"), error="ragged",
                   line=50_002),
        CorpusFile("unterminated_quote.csv", _text('a,b\n1,2\n3,"never closed\n4,5\n'), error="never closed",
                   line=3),
        CorpusFile("nul_bytes.csv", _bytes(b"a,b\n1,2\n3,\x004\n"), error="NUL byte", line=3),
        CorpusFile("latin1_in_utf8.csv", _bytes("name,city\nAnne,Köln\n".encode("latin-1")),
                   error="not valid utf-8", line=2),
        CorpusFile("utf16_without_option.csv", _bytes(utf16), error="UTF-16 text"),
        CorpusFile("png_named.csv", _bytes(b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR"), error="PNG image"),
        CorpusFile("gzip_named.csv", _bytes(b"\x1f\x8b\x08\x00\x00\x00\x00\x00"), error="gzip"),
        CorpusFile("workbook_named.csv", _bytes(b"PK\x03\x04\x14\x00\x06\x00"), error="zip archive"),
        CorpusFile("random_binary.csv", _random_binary, error="NUL byte", line=3),
        CorpusFile("duplicate_headers.csv", _text("id,age,age\n1,2,3\n"), error="duplicate column name 'age'",
                   line=1),
        CorpusFile("blank_header.csv", _text("id,,age\n1,2,3\n"), error="blank name", line=1),
        CorpusFile("unknown.json", _text('{"a": 1}'), error="unknown kind of file"),
        CorpusFile("old_excel.xls", _bytes(b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"), error=".xls"),
        CorpusFile("truncated.parquet", _parquet(_numbers_table, cut=400), error="Parquet"),
        CorpusFile("text.parquet", _text("a,b\n1,2\n"), error="Parquet"),
        CorpusFile("nested.parquet", _parquet(_nested_table), error="nested"),
        CorpusFile("no_rows.parquet", _parquet(_empty_table), error="no data rows"),
        CorpusFile("binary_column.parquet", _parquet(_binary_table), error="binary values"),
        CorpusFile("zip_of_other.xlsx", _zip_of_other, error="not a readable Excel workbook"),
        CorpusFile("text_named.xlsx", _text("a,b\n1,2\n"), error="not a readable Excel workbook"),
        CorpusFile("header_only.xlsx", _workbook([["a", "b"]]), error="no data rows"),
        CorpusFile("empty_sheet.xlsx", _workbook([], empty=True), error="is empty"),
        CorpusFile("ragged.xlsx", _workbook([["a", "b"], [1, 2], [3, 4, 5]]), error="ragged", line=3),
        CorpusFile("duplicate_headers.xlsx", _workbook([["a", "a"], [1, 2]]), error="duplicate", line=1),
        # unusual but valid: a correct result
        CorpusFile("ten_thousand_columns.csv", _wide, columns=10_000, rows=3),
        CorpusFile("one_mb_cell.csv", _big_cell, columns=2, rows=2, types={"id": "identifier"}),
        CorpusFile("formula_and_html.csv", _text(HOSTILE_TEXT), columns=3, rows=4, types={"id": "identifier"}),
        CorpusFile("sql_keyword_names.csv", _text(KEYWORD_NAMES), columns=7, rows=2),
        CorpusFile("long_names.csv", _text(LONG_NAMES), columns=3, rows=2),
        CorpusFile("control_char_name.csv", _text("ok,bad\x01name\n1,2\n"), columns=2, rows=1),
        CorpusFile("number_edges.csv", _text(NUMBER_EDGES), columns=4, rows=40,
                   types={"huge": "integer", "nan": "number", "zero": "integer", "arabic": "categorical"}),
        CorpusFile("date_edges.csv", _text(DATE_EDGES), columns=2, rows=40,
                   types={"seen": "date", "born": "date"}),
        CorpusFile("quoted_newlines.csv", _text('id,text\n1,"two\nlines"\n2,"a ""quoted"" word"\n'),
                   columns=2, rows=2),
        CorpusFile("mixed_line_endings.csv", _text("a,b\r\n1,2\n3,4\r\n"), columns=2, rows=2),
        CorpusFile("semicolons_decimal_comma.csv", _text("a;b\n1,5;2\n3,25;4\n"), columns=2, rows=2),
        CorpusFile("bom_and_tabs.tsv", _bytes(b"\xef\xbb\xbfa\tb\n1\t2\n"), columns=2, rows=1),
        CorpusFile("hostile.xlsx", _workbook([["id", "note"], [1, "=1+1"], [2, "<script>x</script>"]]),
                   columns=2, rows=2),
    ]


def make_corpus(folder: Path) -> list[tuple[CorpusFile, Path]]:
    folder.mkdir(parents=True, exist_ok=True)
    made = []
    for item in corpus():
        path = folder / item.name
        item.make(path)
        made.append((item, path))
    return made


if __name__ == "__main__":
    target = Path(sys.argv[1] if len(sys.argv) > 1 else "corpus")
    for item, path in make_corpus(target):
        print(f"{path}  {'error: ' + item.error if item.error is not None else 'readable'}")
