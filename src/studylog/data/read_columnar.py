"""Parquet and Excel readers behind :func:`studylog.data.read.open_source` (see its module docstring).

Both convert their typed values to text in one convention, so that every consumer sees the same strings
whatever the file format.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

from studylog.data.read import Progress, Source, check_names, short
from studylog.errors import InputFileError, StudylogError

if TYPE_CHECKING:
    import pyarrow as pa


# --------------------------------------------------------------------------------------------- Parquet


def open_parquet(path: Path, size: int, batch_rows: int, progress: Progress | None) -> Source:
    import pyarrow.parquet as pq

    try:
        meta = pq.ParquetFile(path)
        schema = meta.schema_arrow
        rows = meta.metadata.num_rows
    except StudylogError:
        raise
    except Exception as exc:  # any failure of the library on a damaged file is the file's fault
        raise InputFileError(str(path), f"not a readable Parquet file ({short(str(exc), 120)})") from None
    columns = check_names(path, list(schema.names), None)
    for item in schema:
        _text_conversion_allowed(path, item)
    if rows == 0:
        raise InputFileError(str(path), "no data rows")
    return Source(path=path, format="parquet", columns=columns, size=size, rows=rows,
                  batch_rows=batch_rows, progress=progress)


def _text_conversion_allowed(path: Path, item: pa.Field) -> None:
    import pyarrow as pa

    kind = item.type
    if pa.types.is_dictionary(kind):
        kind = kind.value_type
    if pa.types.is_nested(kind):
        raise InputFileError(str(path), f"column '{short(item.name)}' is nested ({kind}); studylog reads flat tables")


def parquet_batches(source: Source) -> Iterator[pa.RecordBatch]:
    import pyarrow as pa
    import pyarrow.parquet as pq

    done = 0
    try:
        reader = pq.ParquetFile(source.path)
        for batch in reader.iter_batches(batch_size=source.batch_rows):
            done += batch.num_rows
            columns = [_as_text(source.path, name, column) for name, column in zip(source.columns, batch.columns)]
            if source.progress is not None and source.rows:
                source.progress(int(source.size * done / source.rows), source.size)
            yield pa.RecordBatch.from_arrays(columns, names=source.columns)
    except StudylogError:
        raise
    except Exception as exc:
        raise InputFileError(str(source.path), f"Parquet data cannot be read ({short(str(exc), 120)})") from None


def _as_text(path: Path, name: str, column: pa.Array) -> pa.Array:
    """One Parquet column as text in studylog's conventions (see the module docstring)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    kind = column.type
    if pa.types.is_dictionary(kind):
        column = column.cast(kind.value_type)
        kind = kind.value_type
    if pa.types.is_string(kind) or pa.types.is_large_string(kind):
        text = column
    elif pa.types.is_floating(kind):
        text = pc.if_else(pc.is_nan(column), None, column).cast(pa.string())
    elif pa.types.is_timestamp(kind):
        text = _timestamp_text(column)
    elif pa.types.is_binary(kind) or pa.types.is_large_binary(kind) or pa.types.is_fixed_size_binary(kind):
        try:
            text = column.cast(pa.string())
        except pa.ArrowInvalid:
            raise InputFileError(str(path), f"column '{short(name)}' holds binary values that are not text") from None
    elif pa.types.is_null(kind):
        text = pa.nulls(len(column), pa.string())
    else:
        text = column.cast(pa.string())
    if pa.types.is_large_string(text.type):
        text = text.cast(pa.string())
    # an empty text is a missing value, as in CSV
    return pc.if_else(pc.equal(text, ""), None, text)


def _timestamp_text(column: pa.Array) -> pa.Array:
    import pyarrow as pa
    import pyarrow.compute as pc

    kind = column.type
    suffix = ""
    if kind.tz is not None:
        column = column.cast(pa.timestamp(kind.unit, tz="UTC"))
        suffix = "Z"
    per_second = {"s": 1, "ms": 1_000, "us": 1_000_000, "ns": 1_000_000_000}[kind.unit]
    ticks = column.cast(pa.int64())
    below_second = pc.subtract(ticks, pc.multiply(pc.divide(ticks, per_second), per_second))
    whole = per_second == 1 or not pc.any(pc.not_equal(below_second, 0)).as_py()
    if whole:
        column = column.cast(pa.timestamp("s", tz=column.type.tz), safe=False)
    return pc.strftime(column, format="%Y-%m-%dT%H:%M:%S" + suffix)


# ----------------------------------------------------------------------------------------------- Excel


def _load_workbook(path: Path) -> Any:
    import warnings

    import openpyxl

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # openpyxl warns about styles it cannot read; not our business
            return openpyxl.load_workbook(path, read_only=True, data_only=True)
    except StudylogError:
        raise
    except Exception as exc:  # zipfile, XML and openpyxl errors alike: the file is not a workbook
        raise InputFileError(str(path), f"not a readable Excel workbook ({short(str(exc) or type(exc).__name__, 120)})") from None


def _pick_sheet(path: Path, book: Any, sheet: str | None) -> Any:
    names = list(book.sheetnames)
    if not names:
        raise InputFileError(str(path), "the workbook has no sheets")
    if sheet is None:
        return book[names[0]]
    if sheet not in names:
        raise InputFileError(str(path), f"no sheet '{short(sheet)}' (sheets: {', '.join(short(n) for n in names)})")
    return book[sheet]


def _excel_rows(source: Source, book: Any) -> Iterator[tuple[int, tuple[Any, ...]]]:
    """(sheet row number, values) for every row that is not entirely empty."""
    sheet = _pick_sheet(source.path, book, source.sheet)
    try:
        for number, values in enumerate(sheet.iter_rows(values_only=True), start=1):
            if any(value is not None and value != "" for value in values):
                yield number, values
    except StudylogError:
        raise
    except Exception as exc:
        raise InputFileError(str(source.path), f"the sheet cannot be read ({short(str(exc) or type(exc).__name__, 120)})") from None


def open_excel(path: Path, size: int, sheet: str | None, batch_rows: int, progress: Progress | None) -> Source:
    book = _load_workbook(path)
    try:
        chosen = _pick_sheet(path, book, sheet)
        source = Source(path=path, format="xlsx", columns=[], size=size, sheet=chosen.title,
                        batch_rows=batch_rows, progress=None)
        rows = _excel_rows(source, book)
        first = next(rows, None)
        if first is None:
            raise InputFileError(str(path), f"sheet '{short(chosen.title)}' is empty")
        line, header = first
        header = _trim_trailing_empty(header)
        source.columns = check_names(path, [_cell_text(value) for value in header], line)
        if next(rows, None) is None:
            raise InputFileError(str(path), "no data rows (the sheet holds a header only)")
    finally:
        book.close()
    source.progress = progress
    return source


def _trim_trailing_empty(values: tuple[Any, ...]) -> tuple[Any, ...]:
    end = len(values)
    while end and (values[end - 1] is None or values[end - 1] == ""):
        end -= 1
    return values[:end]


def excel_batches(source: Source) -> Iterator[pa.RecordBatch]:
    import pyarrow as pa

    book = _load_workbook(source.path)
    width = len(source.columns)
    try:
        rows = _excel_rows(source, book)
        next(rows)  # the header
        last_row = _pick_sheet(source.path, book, source.sheet).max_row or 0
        pending: list[tuple[Any, ...]] = []
        line = 0
        for line, values in rows:
            if len(values) > width and any(v is not None and v != "" for v in values[width:]):
                raise InputFileError(
                    str(source.path), f"row has values beyond the {width} named columns (ragged rows)", line
                )
            pending.append(values[:width] + (None,) * (width - len(values)))
            if len(pending) == source.batch_rows:
                yield _excel_batch(source, pending, pa)
                _report(source, line, last_row)
                pending = []
        if pending:
            yield _excel_batch(source, pending, pa)
        _report(source, last_row, last_row)
    finally:
        book.close()


def _excel_batch(source: Source, rows: list[tuple[Any, ...]], pa: Any) -> pa.RecordBatch:
    # openpyxl hands out Python values cell by cell, so building the columns is a loop over cells; it
    # is bounded by the batch size and is the only way to read a workbook.
    columns = [pa.array(_column_text(list(values)), pa.string()) for values in zip(*rows)]
    return pa.RecordBatch.from_arrays(columns, names=source.columns)


def _report(source: Source, row: int, last_row: int) -> None:
    """Progress in bytes, estimated from the share of the sheet's rows read."""
    if source.progress is not None and last_row:
        source.progress(min(source.size, int(source.size * row / last_row)), source.size)


def _column_text(values: list[Any]) -> list[str | None]:
    import datetime as dt

    # A date-formatted cell arrives as a datetime; the column is written as dates when every one of them
    # falls on midnight, else as datetimes (Excel has no separate date type).
    datetimes = [v for v in values if isinstance(v, dt.datetime)]
    as_dates = bool(datetimes) and all(v.time() == dt.time(0) and v.tzinfo is None for v in datetimes)
    return [_cell_text(v, as_dates) for v in values]


def _cell_text(value: Any, as_dates: bool = False) -> str | None:
    import datetime as dt

    if value is None:
        return None
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if value != value:
            return None
        return repr(int(value)) if value.is_integer() and abs(value) < 2**53 else repr(value)
    if isinstance(value, dt.datetime):
        return value.date().isoformat() if as_dates else value.isoformat()
    if isinstance(value, (dt.date, dt.time)):
        return value.isoformat()
    text = str(value)
    return text if text != "" else None
