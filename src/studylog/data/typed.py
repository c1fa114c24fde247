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
        ok = pc.match_substring_regex(present, INTEGER_PATTERN)
        digits = pc.replace_substring_regex(pc.if_else(ok, present, None), r"\.0*$", "")
        values = pc.cast(pc.cast(digits, pa.int64()), pa.float64())
    elif kind == "number":
        ok = pc.match_substring_regex(present, NUMBER_PATTERN)
        values = pc.cast(pc.if_else(ok, present, None), pa.float64())
        finite = pc.is_finite(values)
        values = pc.if_else(finite, values, None)
    elif kind == "boolean":
        values = _booleans(present, spec)
    elif kind == "date" and (spec.date_format or DEFAULT_DATE_FORMAT) == DEFAULT_DATE_FORMAT:
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
    of strptime and strftime on every cell.
    """
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    shaped = pc.fill_null(pc.match_substring_regex(present, r"^\d{4}-\d{2}-\d{2}$"), False)
    text = pc.if_else(shaped, present, pa.scalar("0001-01-01", present.type))

    def field(start: int, stop: int) -> np.ndarray:
        part = pc.utf8_slice_codeunits(text, start, stop)
        return pc.cast(part, pa.int32()).to_numpy(zero_copy_only=False).astype(np.int64)

    year, month, day = field(0, 4), field(5, 7), field(8, 10)
    month_ok = (month >= 1) & (month <= 12)
    safe_month = np.where(month_ok, month, 1)
    leap = (year % 4 == 0) & ((year % 100 != 0) | (year % 400 == 0))
    longest = np.asarray(_DAYS_IN_MONTH)[safe_month - 1] + (leap & (safe_month == 2))
    ok = shaped.to_numpy(zero_copy_only=False) & (year >= 1) & month_ok & (day >= 1) & (day <= longest)
    months = ((year - 1970) * 12 + safe_month - 1).astype("datetime64[M]")
    days = (months.astype("datetime64[D]") - np.datetime64("1970-01-01", "D")).astype(np.int64) + day - 1
    return pa.array(days.astype(np.int32), pa.int32(), mask=~ok).cast(pa.date32())


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
