"""Reading data files as text, in record batches with bounded memory.

Every reader hands out ``pyarrow.RecordBatch``es whose columns are all strings, null where a cell is
empty: CSV is read as text on purpose, so that a bad value in a numeric column can be *reported* by the
checker instead of silently turning the column into text. Parquet and Excel values are converted to
text the same way for every consumer: integers as ``12``, floats as their shortest round-trip text
(pyarrow's cast: ``0.1``, ``3``, ``1e+20``; NaN as missing), dates and datetimes in ISO 8601, booleans
``true``/``false``.

Malformed input never escapes as a library's exception: it becomes :class:`InputFileError` naming the
file and, where it can be found, the line (the physical line of the file; for Excel, the sheet's row).

Formats: ``.csv``/``.txt`` (delimiter detected among comma, semicolon, tab and pipe), ``.tsv``/``.tab``,
``.parquet``/``.pq``, ``.xlsx``/``.xlsm`` (first sheet or ``sheet=``). The data layer never prints; a
caller that wants a progress bar passes ``progress(bytes_done, bytes_total)``. ``read_table`` reads a
whole CSV at once where it can (:mod:`studylog.data.read_whole`), else through these readers.
"""

from __future__ import annotations

import codecs
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from studylog.errors import InputFileError, StudylogError, UsageError

if TYPE_CHECKING:
    import pyarrow as pa

Progress = Callable[[int, int], None]
# told each batch of data rows as a CSV is read at once, then None if that read is given up
Watch = Callable[["pa.RecordBatch | None"], None]

CSV_EXTENSIONS = {".csv": "csv", ".txt": "csv", ".tsv": "tsv", ".tab": "tsv"}
PARQUET_EXTENSIONS = {".parquet", ".pq"}
EXCEL_EXTENSIONS = {".xlsx", ".xlsm"}
DELIMITERS = (",", ";", "\t", "|")
UTF8_BOM = codecs.BOM_UTF8
SAMPLE_BYTES = 1 << 16
# A CSV block must hold whole rows; a row longer than a block is retried with a larger block, up to this.
# Small blocks keep the parser's memory small (see _csv_batches).
FIRST_BLOCK = 1 << 20
LARGEST_BLOCK = 1 << 30
CHUNK = 1 << 20
QUOTE = ord('"')

# Magic numbers of files that are often given a .csv name by mistake.
_SIGNATURES = (
    (b"PK\x03\x04", "a zip archive (an Excel workbook?)"),
    (b"PAR1", "a Parquet file"),
    (b"\xd0\xcf\x11\xe0", "an old binary Office file (.xls)"),
    (b"%PDF", "a PDF document"),
    (b"\x1f\x8b", "a gzip archive"),
    (b"SQLite format 3\x00", "a SQLite database"),
    (b"\x89PNG", "a PNG image"),
)


@dataclass
class Source:
    """An opened data file: its columns, and a way to stream its rows as all-text record batches.

    ``batches()`` reads the file again on every call, so a source can be passed over more than once.
    ``rows`` is known up front for Parquet only (else None).
    """

    path: Path
    format: str
    columns: list[str]
    size: int
    encoding: str = "utf-8"
    delimiter: str | None = None
    sheet: str | None = None
    rows: int | None = None
    batch_rows: int = 65_536
    progress: Progress | None = field(default=None, repr=False)

    def table(self) -> pa.Table:
        """The whole file as one table of string columns."""
        return _whole(self)

    def batches(self) -> Iterator[pa.RecordBatch]:
        from studylog.data import read_columnar

        if self.format in ("csv", "tsv"):
            yield from _csv_batches(self)
        elif self.format == "parquet":
            yield from read_columnar.parquet_batches(self)
        else:
            yield from read_columnar.excel_batches(self)


def _whole(source: Source) -> pa.Table:
    from studylog.data.read_whole import csv_whole

    if source.format in ("csv", "tsv"):
        table = csv_whole(source)
        if table is not None:
            return table.slice(1).rename_columns(source.columns)
    return _streamed_whole(source)


def _streamed_whole(source: Source) -> pa.Table:
    import pyarrow as pa

    # positional names while concatenating: the file's own names may be anything (quotes, dots, ...)
    names = [f"c{i}" for i in range(len(source.columns))]
    schema = pa.schema([pa.field(name, pa.string()) for name in names])
    batches = [batch.rename_columns(names) for batch in source.batches()]
    return pa.Table.from_batches(batches, schema=schema).rename_columns(source.columns)


def open_source(
    path: str | os.PathLike[str],
    *,
    encoding: str | None = None,
    sheet: str | None = None,
    batch_rows: int = 65_536,
    progress: Progress | None = None,
) -> Source:
    """Open a data file, check that it is a table with a header and at least one data row."""
    return _open(Path(path), encoding, sheet, batch_rows, progress, probe=True)


def _open(file: Path, encoding: str | None, sheet: str | None, batch_rows: int, progress: Progress | None,
          *, probe: bool) -> Source:
    """``open_source``; without ``probe`` a CSV's header is not read (its columns are only counted)."""
    if not file.exists():
        raise InputFileError(str(file), "no such file")
    if not file.is_file():
        raise InputFileError(str(file), "not a file")
    if encoding is not None:
        try:
            encoding = codecs.lookup(encoding).name
        except LookupError:
            raise UsageError(f"unknown encoding '{encoding}' (try utf-8, latin-1 or cp1252)") from None
    try:
        size = file.stat().st_size
        with open(file, "rb") as handle:
            handle.read(1)
    except OSError as exc:
        raise InputFileError(str(file), f"cannot be read ({exc.strerror})") from None
    suffix = file.suffix.lower()
    if suffix == ".xls":
        raise InputFileError(str(file), "old Excel format (.xls); save it as .xlsx or CSV")
    if size == 0:
        raise InputFileError(str(file), "the file is empty")
    if suffix in CSV_EXTENSIONS:
        return _open_csv(file, CSV_EXTENSIONS[suffix], size, encoding, batch_rows, progress, probe)
    from studylog.data import read_columnar

    if suffix in PARQUET_EXTENSIONS:
        return read_columnar.open_parquet(file, size, batch_rows, progress)
    if suffix in EXCEL_EXTENSIONS:
        return read_columnar.open_excel(file, size, sheet, batch_rows, progress)
    known = ", ".join(sorted({*CSV_EXTENSIONS, *PARQUET_EXTENSIONS, *EXCEL_EXTENSIONS}))
    raise InputFileError(str(file), f"unknown kind of file '{suffix or '(no extension)'}' (known: {known})")


def read_table(
    path: str | os.PathLike[str],
    *,
    encoding: str | None = None,
    sheet: str | None = None,
    batch_rows: int = 65_536,
    progress: Progress | None = None,
    watch: Watch | None = None,
) -> pa.Table:
    """The whole file as one table of string columns.

    A CSV is read at once and its header taken from the table (the check of the header and of a data
    row is the same as ``open_source``'s); anything unusual, and every other format, takes the way of
    ``open_source``, whose errors are then the same as a check's. ``watch`` (CSV without progress) is
    told each batch of data rows of that read as it comes, positionally named: the table's chunks in
    their order; and None if the read is given up (the rows then come from the streaming reader, and
    what it was told stands for nothing)."""
    file = Path(path)
    if tells_batches(file, progress):
        from studylog.data.read_whole import csv_whole

        source = _open(file, encoding, sheet, batch_rows, progress, probe=False)
        table = csv_whole(source, watch)
        if table is None and watch is not None:
            watch(None)
        if table is not None:
            header = [table.column(i)[0].as_py() for i in range(table.num_columns)]
            source.columns = check_names(file, header, 1)
            if table.num_rows < 2:
                raise InputFileError(str(file), "no data rows (the file holds a header only)")
            return table.slice(1).rename_columns(source.columns)
        return _streamed_whole(open_source(file, encoding=encoding, sheet=sheet, batch_rows=batch_rows))
    source = open_source(path, encoding=encoding, sheet=sheet, batch_rows=batch_rows, progress=progress)
    return source.table()


def tells_batches(path: Path, progress: Progress | None = None) -> bool:
    """Whether ``read_table`` reads the file in one CSV parse and tells ``watch`` of its batches as they
    come (else it tells nothing before the end)."""
    return progress is None and path.suffix.lower() in CSV_EXTENSIONS


def file_facts(path: str | os.PathLike[str]) -> tuple[str, int]:
    """The file's SHA-256 (hex) and its size in bytes, read in chunks."""
    import hashlib  # here: OpenSSL's loading would delay every read's start by some milliseconds

    digest = hashlib.sha256()
    size = 0
    try:
        with open(path, "rb") as handle:
            while chunk := handle.read(CHUNK):
                digest.update(chunk)
                size += len(chunk)
    except OSError as exc:
        raise InputFileError(str(path), f"cannot be read ({exc.strerror or exc})") from None
    return digest.hexdigest(), size


# ---------------------------------------------------------------------------------------------- checks


def check_names(path: Path, names: list[Any], line: int | None) -> list[str]:
    """Column names must be present, non-blank and unique (a checker cannot address the others)."""
    texts = ["" if name is None else str(name) for name in names]
    for position, name in enumerate(texts, start=1):
        if not name.strip():
            raise InputFileError(str(path), f"column {position} has a blank name", line)
    seen: dict[str, int] = {}
    for position, name in enumerate(texts, start=1):
        if name in seen:
            raise InputFileError(
                str(path), f"duplicate column name '{short(name)}' (columns {seen[name]} and {position})", line
            )
        seen[name] = position
    return texts


def short(text: str, limit: int = 60) -> str:
    text = text.replace("\n", " ").replace("\r", " ")
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _line_at(path: Path, offset: int) -> int:
    """The 1-based physical line holding byte ``offset``."""
    lines = 1
    done = 0
    with open(path, "rb") as handle:
        while done < offset and (chunk := handle.read(min(CHUNK, offset - done))):
            lines += chunk.count(b"\n")
            done += len(chunk)
    return lines


def _first_undecodable(path: Path, encoding: str) -> tuple[int, str] | None:
    """The line of the first byte that does not decode in ``encoding``, and that byte, if any."""
    decoder = codecs.getincrementaldecoder(encoding)()
    lines = 1
    with open(path, "rb") as handle:
        while True:
            chunk = handle.read(CHUNK)
            try:
                text = decoder.decode(chunk, final=not chunk)
            except UnicodeDecodeError as exc:
                text = chunk[: exc.start].decode(encoding, errors="replace")
                return lines + text.count("\n"), chunk[exc.start : exc.start + 1].hex()
            lines += text.count("\n")
            if not chunk:
                return None


# ------------------------------------------------------------------------------------------------- CSV


class WatchedFile:
    """The raw file as pyarrow reads it, watched on the way: progress, NUL bytes, and quote parity."""

    def __init__(self, path: Path, size: int, progress: Progress | None, watch_nul: bool) -> None:
        import numpy as np

        self._np = np
        self._handle = open(path, "rb")  # noqa: SIM115 - closed by close(), which pyarrow calls
        self._size = size
        self._progress = progress
        self._watch_nul = watch_nul
        self.done = 0
        self.quotes = 0
        self.nul_at: int | None = None
        self.closed = False

    def read(self, size: int = -1) -> bytes:
        chunk = self._handle.read(size)
        if self._watch_nul and self.nul_at is None:
            found = chunk.find(b"\x00")
            if found >= 0:
                self.nul_at = self.done + found
        # numpy counts bytes five times faster than bytes.count
        self.quotes += int(self._np.count_nonzero(self._np.frombuffer(chunk, dtype=self._np.uint8) == QUOTE))
        self.done += len(chunk)
        if self._progress is not None and chunk:
            self._progress(self.done, self._size)
        return chunk

    def readable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return False

    def writable(self) -> bool:
        return False

    def tell(self) -> int:
        return self.done

    def close(self) -> None:
        self._handle.close()
        self.closed = True

    def __enter__(self) -> WatchedFile:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _sample_text(path: Path, encoding: str) -> tuple[bytes, str]:
    with open(path, "rb") as handle:
        raw = handle.read(SAMPLE_BYTES)
    text = raw.decode(encoding if encoding != "utf-8" else "utf-8-sig", errors="replace")
    return raw, text


def _detect_delimiter(text: str, prefer: str) -> str:
    """The candidate that splits the header most often and every sampled line the same number of times.

    Quoted parts are skipped, so a comma inside ``"Smith, J."`` does not count.
    """
    import re

    lines = [line for line in text.splitlines()[:50] if line.strip()]
    if len(text) >= SAMPLE_BYTES and len(lines) > 1:
        lines = lines[:-1]  # the last sampled line may be cut short
    if not lines:
        return prefer
    unquoted = [re.sub(r'"(?:[^"]|"")*"', "", line) for line in lines]
    order = [prefer, *[d for d in DELIMITERS if d != prefer]]
    best = prefer
    best_score = (-1.0, 0, 0)
    for rank, delimiter in enumerate(order):
        header = unquoted[0].count(delimiter)
        if header == 0:
            continue
        rest = unquoted[1:]
        agree = sum(line.count(delimiter) == header for line in rest) / len(rest) if rest else 1.0
        score = (agree, header, -rank)
        if score > best_score:
            best, best_score = delimiter, score
    return best


def _open_csv(
    path: Path, kind: str, size: int, encoding: str | None, batch_rows: int, progress: Progress | None,
    probe: bool = True,
) -> Source:
    codec = encoding or "utf-8"
    raw, text = _sample_text(path, codec)
    ascii_family = not codec.startswith(("utf-16", "utf-32"))
    body = raw[len(UTF8_BOM):] if raw.startswith(UTF8_BOM) else raw
    if ascii_family and not body.strip():
        what = "holds only a byte-order mark" if raw.startswith(UTF8_BOM) and not raw[3:] else "holds no text"
        raise InputFileError(str(path), f"the file {what}")
    if encoding is None and raw.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE)):
        raise InputFileError(str(path), "this is UTF-16 text (it starts with its byte-order mark); "
                             "pass --encoding utf-16")
    if ascii_family:
        for signature, what in _SIGNATURES:
            if raw.startswith(signature):
                raise InputFileError(str(path), f"this is {what}, not delimited text")
    source = Source(
        path=path,
        format=kind,
        columns=[],
        size=size,
        encoding=codec,
        delimiter=_detect_delimiter(text, "\t" if kind == "tsv" else ","),
        batch_rows=batch_rows,
        progress=None,
    )
    first = text.split("\n", 1)[0]
    width = first.count(source.delimiter or ",") + 1
    if not probe:
        source.columns = [""] * width  # named from the header once it is read
        source.progress = progress
        return source
    header, has_data = _probe_csv(source, width)
    source.columns = check_names(path, header, 1)
    if not has_data:
        raise InputFileError(str(path), "no data rows (the file holds a header only)")
    source.progress = progress
    return source


def csv_options(source: Source, width: int, block: int, threads: bool, check_utf8: bool = True) -> dict[str, Any]:
    import pyarrow as pa
    import pyarrow.csv as pacsv

    read_options = pacsv.ReadOptions(
        use_threads=threads,
        block_size=block,
        autogenerate_column_names=True,  # the header is read as data row 0, exactly as parsed
        encoding=source.encoding,
    )
    parse_options = pacsv.ParseOptions(
        delimiter=source.delimiter or ",",
        quote_char='"',
        double_quote=True,
        newlines_in_values=True,
        ignore_empty_lines=True,
    )
    convert_options = pacsv.ConvertOptions(
        column_types={f"f{i}": pa.string() for i in range(width)},
        strings_can_be_null=True,
        quoted_strings_can_be_null=True,
        null_values=[""],
        check_utf8=check_utf8,
    )
    return {"read_options": read_options, "parse_options": parse_options, "convert_options": convert_options}


def _csv_reader(source: Source, width: int, block: int, handle: WatchedFile) -> Any:
    import pyarrow.csv as pacsv

    return pacsv.open_csv(handle, **csv_options(source, width, block, threads=False))


def _probe_csv(source: Source, width: int) -> tuple[list[Any], bool]:
    """The header as pyarrow parses it, and whether any data row follows it."""
    import pyarrow as pa

    header: list[Any] | None = None
    rows = 0
    for batch in _csv_raw_batches(source, width):
        if header is None:
            header = [column.cast(pa.string())[0].as_py() for column in batch.columns]
        rows += batch.num_rows
        if rows > 1:
            return header, True
    if header is None:
        raise InputFileError(str(source.path), "the file holds no rows")
    return header, False


def _csv_raw_batches(source: Source, width: int) -> Iterator[pa.RecordBatch]:
    """The file's rows (header first) as pyarrow batches, translated errors, larger blocks on demand."""
    import pyarrow as pa

    block = FIRST_BLOCK
    skip = 0  # rows already handed out before a retry with a larger block
    while True:
        handle = WatchedFile(
            source.path, source.size, source.progress, watch_nul=not source.encoding.startswith(("utf-16", "utf-32"))
        )
        with handle:
            try:
                reader = _csv_reader(source, width, block, handle)
                seen = 0
                for batch in reader:
                    _raise_nul(source, handle)
                    if seen + batch.num_rows <= skip:
                        seen += batch.num_rows
                        continue
                    if seen < skip:
                        batch = batch.slice(skip - seen)
                        seen = skip
                    seen += batch.num_rows
                    skip = seen
                    yield batch
                _raise_nul(source, handle)
                if handle.quotes % 2:
                    _raise_unterminated(source)
                return
            except StudylogError:
                raise
            except pa.ArrowInvalid as exc:
                message = str(exc)
                if "straddle" in message and block < LARGEST_BLOCK:
                    block *= 8
                    continue
                _raise_nul(source, handle)
                raise _translate_csv_error(source, message) from None
            except (pa.ArrowException, UnicodeError, OSError, ValueError, LookupError) as exc:
                _raise_nul(source, handle)
                raise _translate_csv_error(source, str(exc)) from None


def _raise_nul(source: Source, handle: WatchedFile) -> None:
    if handle.nul_at is not None:
        raise InputFileError(
            str(source.path), "holds a NUL byte: a binary file, or text in another encoding (try --encoding)",
            _line_at(source.path, handle.nul_at),
        )


def _raise_unterminated(source: Source) -> None:
    """An odd number of quote characters: find whether a quoted field runs to the end of the file."""
    import csv

    with open(source.path, encoding=source.encoding, errors="replace", newline="") as handle:
        reader = csv.reader(handle, delimiter=source.delimiter or ",", strict=True)
        start = 1
        try:
            for _ in reader:
                start = reader.line_num + 1
        except csv.Error as exc:
            if "end of data" in str(exc) or "EOF" in str(exc):
                raise InputFileError(
                    str(source.path), "a quoted value is never closed (unterminated quote)", start
                ) from None
            # A stray quote inside an unquoted value: legal for the reader, nothing to report.


def _translate_csv_error(source: Source, message: str) -> InputFileError:
    import re

    path = str(source.path)
    # pyarrow's own wording; a row handler cannot be used because pyarrow decodes the row's text for it
    # and fails (outside our reach) when that text is not UTF-8
    ragged = re.search(r"Row #(\d+): Expected (\d+) columns, got (\d+)", message)
    if ragged:
        number, expected, actual = (int(part) for part in ragged.groups())
        return InputFileError(
            path,
            f"row has {actual} value{'s' if actual != 1 else ''} but the header has {expected} (ragged rows)",
            _physical_line_of_row(source, number),
        )
    if "Empty CSV file" in message:
        # pyarrow's word for a single line without an end of line: a header and nothing else
        return InputFileError(path, "no data rows (the file holds a header only)")
    if "UTF8" in message or "UTF-8" in message or "decode" in message.lower():
        found = _first_undecodable(source.path, source.encoding)
        if found is not None:
            line, byte = found
            hint = " (try --encoding latin-1 or cp1252)" if source.encoding == "utf-8" else ""
            return InputFileError(path, f"byte 0x{byte} is not valid {source.encoding}{hint}", line)
        return InputFileError(path, f"text is not valid {source.encoding}")
    first = message.strip().splitlines()[0] if message.strip() else "unreadable"
    return InputFileError(path, f"cannot be parsed as delimited text ({short(first, 120)})")


def _physical_line_of_row(source: Source, row_number: int) -> int | None:
    """pyarrow numbers rows without empty lines and counts a multi-line value once; find the file line."""
    import csv

    try:
        with open(source.path, encoding=source.encoding, errors="replace", newline="") as handle:
            reader = csv.reader(handle, delimiter=source.delimiter or ",")
            rows = 0
            start = 1
            for record in reader:
                if record:
                    rows += 1
                    if rows == row_number:
                        return start
                start = reader.line_num + 1
    except csv.Error:
        return None
    return None


def _csv_batches(source: Source) -> Iterator[pa.RecordBatch]:
    """The data rows in batches of ``batch_rows``: small blocks of the parser, joined.

    pyarrow parses a block at a time and its memory for a block is held (and kept by the allocator)
    in proportion to the block size, so blocks are small (``FIRST_BLOCK``, 1 MB) and consecutive ones
    are concatenated into batches of ``batch_rows`` rows, which keeps the per-batch work of the check
    few and large.
    """
    import pyarrow as pa

    width = len(source.columns)
    names = [f"c{i}" for i in range(width)]
    first = True
    pending: list[pa.RecordBatch] = []
    pending_rows = 0
    for batch in _csv_raw_batches(source, width):
        if first:
            batch = batch.slice(1)  # the header row
            first = False
        if not batch.num_rows:
            continue
        pending.append(batch.rename_columns(names))
        pending_rows += batch.num_rows
        if pending_rows >= source.batch_rows:
            joined = pa.concat_batches(pending) if len(pending) > 1 else pending[0]
            whole = (joined.num_rows // source.batch_rows) * source.batch_rows
            yield from _rechunk(joined.slice(0, whole).rename_columns(source.columns), source.batch_rows)
            rest = joined.slice(whole)
            pending, pending_rows = ([rest] if rest.num_rows else []), rest.num_rows
    if pending:
        joined = pa.concat_batches(pending) if len(pending) > 1 else pending[0]
        yield from _rechunk(joined.rename_columns(source.columns), source.batch_rows)


def _rechunk(batch: pa.RecordBatch, rows: int) -> Iterator[pa.RecordBatch]:
    for start in range(0, batch.num_rows, rows):
        yield batch.slice(start, rows)
