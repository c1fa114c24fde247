"""Text cells read strictly as their variable's type, a whole column at a time.

What counts as a valid value (decided here, stated in the check's documentation):

- missing: a null cell, a cell that is blank after trimming spaces, or a cell equal (after trimming) to
  one of the variable's missing codes. Missing cells are never type, level or range failures.
- integer: optional sign and digits, optionally followed by a point and zeros only (``12``, ``-3``,
  ``12.0`` as exported by tools that store integers as floats); ``1.5``, ``1e3``, ``0x10`` and numbers of
  more than 18 digits are failures.
- number: decimal notation with an optional exponent (``-0.5``, ``.5``, ``1e-3``); ``NaN``, ``inf`` and
  values too large for a double (``1e309``) are failures: a number must be finite, and a marker for
  "not a number" belongs among the variable's missing codes.
- boolean: the variable's true and false values (exact text, after trimming); without declared values,
  ``true/false``, ``yes/no``, ``1/0``, ``t/f``, ``y/n`` in any case.
- date: the variable's date format (strftime codes, ISO 8601 ``%Y-%m-%d`` by default), written exactly
  as that format writes the date, so ``2024-02-30`` and ``2024-2-3`` are failures.
- datetime: the variable's format, else ISO 8601 ``YYYY-MM-DD[T ]HH:MM[:SS]``; written exactly.
- categorical, ordinal, text, identifier: any text (levels are a separate rule).

Spaces around numbers, dates and booleans are ignored; around level codes they are not (``'male '`` is not
the level ``male``; the level rule says which level it resembles).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from studylog.data.spec import VariableSpec

INTEGER_PATTERN = r"^[+-]?\d{1,18}(\.0*)?$"
NUMBER_PATTERN = r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$"
DEFAULT_DATE_FORMAT = "%Y-%m-%d"
DATETIME_FORMATS = ("%Y-%m-%dT%H:%M:%S", "%Y-%m-%d %H:%M:%S", "%Y-%m-%dT%H:%M", "%Y-%m-%d %H:%M")
DEFAULT_TRUE = ("true", "yes", "1", "t", "y")
DEFAULT_FALSE = ("false", "no", "0", "f", "n")
TYPE_WORDS = {
    "integer": "a valid integer", "number": "a valid finite number", "boolean": "a true or false value",
    "date": "a valid date", "datetime": "a valid date-time",
}


@dataclass(frozen=True)
class Parsed:
    """One column of one batch, read as its type.

    ``values``: the typed Arrow array (float64 for numbers, bool, date32, timestamp[s], or the raw
    strings), null where missing or invalid; ``missing``/``invalid``: boolean Arrow arrays; ``empty``:
    blank cells only (missing codes excluded).
    """

    values: Any
    missing: Any
    empty: Any
    invalid: Any


def missing_masks(strings: Any, spec: VariableSpec | None) -> tuple[Any, Any, Any]:
    """(trimmed strings, missing mask, blank mask) for a string column."""
    import pyarrow as pa
    import pyarrow.compute as pc

    trimmed = pc.utf8_trim_whitespace(strings)
    empty = pc.fill_null(pc.equal(trimmed, ""), True)
    missing = empty
    codes = [c.code.strip() for c in spec.missing_codes] if spec else []
    if codes:
        coded = pc.is_in(trimmed, value_set=pa.array(codes, trimmed.type))
        missing = pc.or_(missing, pc.fill_null(coded, False))
    return trimmed, missing, empty


def parse(strings: Any, spec: VariableSpec) -> Parsed:
    """Read a string column as ``spec.type``."""
    import pyarrow as pa
    import pyarrow.compute as pc

    trimmed, missing, empty = missing_masks(strings, spec)
    present = pc.if_else(missing, pa.scalar(None, trimmed.type), trimmed)
    kind = spec.type
    if kind == "integer":
        values = _integers(present)
    elif kind == "number":
        values = _numbers(present)
    elif kind == "boolean":
        values = _booleans(present, spec)
    elif kind == "date" and (spec.date_format or DEFAULT_DATE_FORMAT) == DEFAULT_DATE_FORMAT:
        values = _whole_cast(present, pa.date32())
        if values is None:
            values = _iso_dates(present)
    elif kind == "date":
        values = _dates(present, (spec.date_format,), date=True)
    elif kind == "datetime":
        formats = (spec.date_format,) if spec.date_format else DATETIME_FORMATS
        values = _dates(present, formats, date=False)
    else:
        values = pc.if_else(missing, pa.scalar(None, strings.type), strings)
        return Parsed(values, missing, empty, pc.and_(missing, pa.scalar(False)))
    invalid = pc.and_(pc.invert(missing), pc.is_null(values))
    return Parsed(values, missing, empty, invalid)


def parse_encoded(encoded: Any, spec: VariableSpec) -> Parsed:
    """``parse`` of a dictionary-encoded column: each distinct value is read once, then spread to its
    rows (a null cell is missing and blank, never invalid), which gives the same ``Parsed``."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    from studylog.data.repeats import spread

    once = parse(encoded.dictionary, spec)
    # a mask that no distinct value sets is the null cells' mask (or all false): no spreading needed,
    # which is the common case for missing, blank and invalid cells
    nulls = pc.is_null(encoded.indices)
    none = nulls if not encoded.indices.null_count else pa.array(np.zeros(len(encoded), dtype=bool))

    def mask(per_value: Any, fill: bool) -> Any:
        if not pc.any(per_value).as_py():
            return nulls if fill else none
        return spread(encoded, per_value, fill)

    return Parsed(
        values=spread(encoded, once.values),
        missing=mask(once.missing, True),
        empty=mask(once.empty, True),
        invalid=mask(once.invalid, False),
    )


def _whole_cast(present: Any, target: Any) -> Any:
    """Arrow's own cast of the whole column, or None when any present cell does not convert.

    Arrow's conversions of text are strict where ours are (a day that does not exist is refused), so a
    column whose every cell converts needs no further reading; a column with a bad cell is read the
    slower way, which finds each bad cell. Clean columns are by far the common case.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    try:
        return pc.cast(present, target)
    except (pa.ArrowInvalid, OverflowError):
        return None


def _integers(present: Any) -> Any:
    """Integers as float64 (see the module's definition), null where missing or invalid."""
    import pyarrow as pa
    import pyarrow.compute as pc

    # Arrow also reads hexadecimal ('0x10') and more than 18 digits, which are not integers here: the
    # cast is of the cells holding only characters an integer has (no 'x'), the others being invalid
    longest = pc.max(pc.binary_length(present)).as_py()
    if longest is None or longest <= 18:
        values = _whole_cast(_without_cells_holding_other_than(present, INTEGER_CHARACTERS), pa.int64())
        if values is not None:
            return pc.cast(values, pa.float64(), safe=False)
    ok = pc.match_substring_regex(present, INTEGER_PATTERN)
    # Arrow's cast refuses a leading '+', which the definition allows
    digits = pc.replace_substring_regex(pc.if_else(ok, present, None), r"^\+|\.0*$", "")
    return pc.cast(pc.cast(digits, pa.int64()), pa.float64(), safe=False)


# the characters of the texts of valid integers and numbers (a cell with any other is invalid)
INTEGER_CHARACTERS = "0123456789+-."
NUMBER_CHARACTERS = "0123456789+-.eE"


def _without_cells_holding_other_than(strings: Any, allowed: str) -> Any:
    """The string array with null in place of every cell that holds a byte not in ``allowed``."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(strings, pa.ChunkedArray):
        strings = strings.combine_chunks()
    _, offsets_buffer, data_buffer = strings.buffers()
    if data_buffer is None:
        return strings
    refused = np.ones(256, dtype=bool)
    refused[np.frombuffer(allowed.encode("ascii"), dtype=np.uint8)] = False
    width = np.dtype(np.int64 if pa.types.is_large_string(strings.type) else np.int32)
    offsets = np.frombuffer(offsets_buffer, dtype=width, count=len(strings) + 1,
                            offset=strings.offset * width.itemsize)
    data = np.frombuffer(data_buffer, dtype=np.uint8)[offsets[0]:offsets[-1]]
    # the few refused bytes, and the cells they fall in
    where = np.flatnonzero(refused[data]) + offsets[0]
    if len(where) == 0:
        return strings
    holding = np.zeros(len(strings), dtype=bool)
    holding[np.searchsorted(offsets, where, side="right") - 1] = True
    return pc.if_else(pa.array(holding), pa.scalar(None, strings.type), strings)


def _numbers(present: Any) -> Any:
    """Finite numbers as float64, null where missing or invalid."""
    import pyarrow as pa
    import pyarrow.compute as pc

    # every text Arrow reads as a float that the pattern refuses ('nan', 'Inf', '+inf') is not finite,
    # so a whole-column cast followed by the finiteness test is the same reading as the pattern's
    values = _whole_cast(present, pa.float64())
    if values is None:
        # cells with a character no number has are invalid whatever else they hold: without them the
        # cast usually succeeds, and the pattern is needed only when it still fails
        values = _whole_cast(_without_cells_holding_other_than(present, NUMBER_CHARACTERS), pa.float64())
    if values is None:
        ok = pc.match_substring_regex(present, NUMBER_PATTERN)
        values = pc.cast(pc.if_else(ok, present, None), pa.float64())
    return pc.if_else(pc.is_finite(values), values, None)


def _booleans(present: Any, spec: VariableSpec) -> Any:
    import pyarrow as pa
    import pyarrow.compute as pc

    if spec.true_values or spec.false_values:
        text = present
        trues = [v.strip() for v in spec.true_values]
        falses = [v.strip() for v in spec.false_values]
    else:
        text = pc.utf8_lower(present)
        trues, falses = list(DEFAULT_TRUE), list(DEFAULT_FALSE)
    is_true = pc.is_in(text, value_set=pa.array(trues, pa.string()))
    is_false = pc.is_in(text, value_set=pa.array(falses, pa.string()))
    known = pc.or_(is_true, is_false)
    return pc.if_else(pc.and_(known, pc.is_valid(text)), is_true, pa.scalar(None, pa.bool_()))


_DAYS_IN_MONTH = (31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31)


def _iso_dates(present: Any) -> Any:
    """ISO 8601 calendar dates ``YYYY-MM-DD`` (years 0001 to 9999), checked field by field with numpy.

    The same answer as parsing with ``%Y-%m-%d`` and requiring an exact round trip, without the cost
    of strptime and strftime on every cell: cells of ten bytes are laid out as a ten-column byte matrix
    straight from Arrow's data buffer, and their digits, dashes and days are checked as numbers.
    """
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    n = len(present)
    ten = pc.fill_null(pc.equal(pc.binary_length(present), 10), False)
    # every cell ten bytes long, none null: cell i starts 10 * i bytes after the first
    text = pc.if_else(ten, present, pa.scalar("0001-01-01", present.type))
    offset_type = np.int64 if pa.types.is_large_string(text.type) else np.int32
    first = int(np.frombuffer(text.buffers()[1], dtype=offset_type, count=1,
                              offset=text.offset * np.dtype(offset_type).itemsize)[0])
    cells = np.frombuffer(text.buffers()[2], dtype=np.uint8)[first: first + 10 * n].reshape(n, 10)
    digits = cells[:, [0, 1, 2, 3, 5, 6, 8, 9]].astype(np.int64) - 48
    shaped = (ten.to_numpy(zero_copy_only=False) & ((digits >= 0) & (digits <= 9)).all(axis=1)
              & (cells[:, 4] == 45) & (cells[:, 7] == 45))
    year = digits[:, 0] * 1000 + digits[:, 1] * 100 + digits[:, 2] * 10 + digits[:, 3]
    month = digits[:, 4] * 10 + digits[:, 5]
    day = digits[:, 6] * 10 + digits[:, 7]
    month_ok = (month >= 1) & (month <= 12)
    safe_month = np.where(month_ok, month, 1)
    safe_year = np.where(shaped, year, 1970)
    leap = (safe_year % 4 == 0) & ((safe_year % 100 != 0) | (safe_year % 400 == 0))
    longest = np.asarray(_DAYS_IN_MONTH)[safe_month - 1] + (leap & (safe_month == 2))
    ok = shaped & (year >= 1) & month_ok & (day >= 1) & (day <= longest)
    months = ((safe_year - 1970) * 12 + safe_month - 1).astype("datetime64[M]")
    days = (months.astype("datetime64[D]") - np.datetime64("1970-01-01", "D")).astype(np.int64) + day - 1
    return pa.array(np.where(ok, days, 0).astype(np.int32), pa.int32(), mask=~ok).cast(pa.date32())


def _dates(present: Any, formats: tuple[str, ...], *, date: bool) -> Any:
    """Parse with each format in turn; a value is valid only when it round-trips exactly.

    Arrow's strptime rolls impossible days over (30 February becomes 1 March), so the parsed value is
    written back with the same format and must equal the text.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    parsed = None
    for fmt in formats:
        attempt = pc.strptime(present, format=fmt, unit="s", error_is_null=True)
        exact = pc.fill_null(pc.equal(pc.strftime(attempt, format=fmt), present), False)
        attempt = pc.if_else(exact, attempt, pa.scalar(None, attempt.type))
        parsed = attempt if parsed is None else pc.coalesce(parsed, attempt)
    if date:
        return pc.cast(parsed, pa.date32())
    return parsed


def bound(value: str | None, spec: VariableSpec) -> Any:
    """A range bound (minimum, maximum, plausible ...) as a Python value comparable with parsed values."""
    import datetime as dt

    if value is None or str(value).strip() == "":
        return None
    text = str(value).strip()
    if spec.type in ("integer", "number"):
        return float(text)
    if spec.type == "date":
        try:
            return dt.date.fromisoformat(text)
        except ValueError:
            return dt.datetime.strptime(text, spec.date_format or DEFAULT_DATE_FORMAT).date()
    if spec.type == "datetime":
        return dt.datetime.fromisoformat(text).replace(tzinfo=None)
    return None
