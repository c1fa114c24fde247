"""From columns of text cells to values: which cells are missing, numbers, dates, level codes, and
Arrow arrays as numpy arrays (read from their buffers).

Every column arrives as text (``data/read.py``); the profile reads each one as its type here, and what
does not parse is counted as invalid. Everything is vectorised (pyarrow.compute, numpy).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from studylog.data.spec import VariableSpec

INVALID_EXAMPLES = 5
# a number as text: optional sign, digits with an optional decimal point, optional exponent
NUMBER_PATTERN = r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$"



@dataclass
class Missing:
    """Which cells are missing (null, blank, or a missing code) and how many of each code."""

    mask: np.ndarray  # True where the cell is missing
    blank: int
    codes: list[dict[str, Any]]

    @property
    def count(self) -> int:
        return int(np.count_nonzero(self.mask))


_NUMPY_TYPES = {
    pa.float64(): np.float64, pa.int64(): np.int64, pa.int32(): np.int32, pa.int16(): np.int16,
    pa.int8(): np.int8, pa.uint32(): np.uint32,
}


def to_numpy(array: pa.ChunkedArray | pa.Array, fill: Any) -> np.ndarray:
    """A numeric or boolean Arrow array as a new, writable numpy array, nulls as ``fill``.

    Read from the Arrow buffers directly: pyarrow's own ``to_numpy`` imports pandas, half a second of a
    command's start-up. The values of all chunks are copied once, then the nulls set."""
    if pa.types.is_boolean(array.type):
        return _bools(array, fill)
    dtype = _NUMPY_TYPES[array.type]
    chunks = array.chunks if isinstance(array, pa.ChunkedArray) else [array]
    parts = [chunk_values(chunk, dtype) for chunk in chunks]
    out = np.concatenate(parts) if parts else np.zeros(0, dtype=dtype)
    if array.null_count:
        out[_bools(pc.is_null(array), False)] = fill
    return out


def chunk_values(chunk: pa.Array, dtype: Any) -> np.ndarray:
    """A view of a numeric chunk's values (any value where null)."""
    data = chunk.buffers()[1]
    if data is None:
        return np.zeros(len(chunk), dtype=dtype)
    return np.frombuffer(data, dtype=dtype)[chunk.offset:chunk.offset + len(chunk)]


def _bools(array: pa.ChunkedArray | pa.Array, fill: bool) -> np.ndarray:
    if array.null_count:
        array = pc.fill_null(array, fill)
    if isinstance(array, pa.ChunkedArray):
        if not array.num_chunks:
            return np.zeros(0, dtype=bool)
        array = array.chunk(0) if array.num_chunks == 1 else array.combine_chunks()
    data = array.buffers()[1]
    if data is None:
        return np.zeros(len(array), dtype=bool)
    bits = np.unpackbits(np.frombuffer(data, dtype=np.uint8), count=(array.offset + len(array) + 7) // 8 * 8,
                         bitorder="little")
    return bits[array.offset:array.offset + len(array)].view(bool)


def as_bool(array: pa.ChunkedArray | pa.Array) -> np.ndarray:
    return to_numpy(array, False)


def find_missing(strings: pa.ChunkedArray, codes: Sequence[str], *, blank_free: bool = False) -> Missing:
    """Missing cells: null (empty in the file), whitespace only, or equal to one of ``codes``.
    ``blank_free``: the caller knows that no text is empty or whitespace only (see ``float_values``)."""
    null = as_bool(pc.is_null(strings))
    mask = null.copy()
    blanks = 0
    if not blank_free:
        blank = as_bool(pc.utf8_is_space(strings)) | as_bool(pc.equal(pc.binary_length(strings), 0))
        mask |= blank
        blanks = np.count_nonzero(blank)
    counted = []
    for code in codes:
        hits = as_bool(pc.equal(strings, code))
        counted.append({"code": code, "count": int(np.count_nonzero(hits))})
        mask |= hits
    return Missing(mask=mask, blank=int(np.count_nonzero(null) + blanks), codes=counted)


@dataclass
class Encoded:
    """A column as its distinct texts and each row's index among them (-1 where null)."""

    dictionary: pa.Array
    indices: np.ndarray  # int64

    @classmethod
    def of(cls, strings: pa.ChunkedArray) -> Encoded:
        encoded = pc.dictionary_encode(strings).combine_chunks()
        return cls(encoded.dictionary, to_numpy(encoded.indices, -1).astype(np.int64))


def find_missing_encoded(encoded: Encoded, codes: Sequence[str]) -> tuple[Missing, np.ndarray, np.ndarray]:
    """``find_missing`` of an encoded column: each distinct text is tested once. Also each row's
    level index with -1 where missing (the encoded indices themselves when only nulls are missing),
    and the rows of each level that are not missing."""
    dictionary, indices = encoded.dictionary, encoded.indices
    present = indices >= 0
    per_level = np.bincount(indices[present], minlength=len(dictionary))
    blank = as_bool(pc.utf8_is_space(dictionary)) | as_bool(pc.equal(pc.binary_length(dictionary), 0))
    missing_level = blank.copy()
    counted = []
    for code in codes:
        hits = as_bool(pc.equal(dictionary, code))
        counted.append({"code": code, "count": int(per_level[hits].sum())})
        missing_level |= hits
    blanks = indices.size - int(np.count_nonzero(present)) + int(per_level[blank].sum())
    if not missing_level.any():
        # only the nulls are missing, and their index is -1 already: the indices serve as they are
        return Missing(mask=~present, blank=blanks, codes=counted), indices, per_level
    # a null's index, -1, reads the last entry: missing
    mask = np.append(missing_level, True)[indices]
    present_counts = np.where(missing_level, 0, per_level)
    return Missing(mask=mask, blank=blanks, codes=counted), np.where(mask, -1, indices), present_counts


def _writable_floats(array: pa.ChunkedArray | pa.Array) -> np.ndarray:
    """float64 values with NaN for nulls, in memory of our own (Arrow's buffers are read-only)."""
    return to_numpy(array, np.nan)


def float_values(strings: pa.ChunkedArray) -> pa.ChunkedArray | None:
    """The texts as float64 when every one of them reads as a number, else None. Arrow reads
    neither an empty text nor one of whitespace as a number, so such a column has no blanks."""
    try:
        return pc.cast(strings, pa.float64())
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None


def parse_numbers(strings: pa.ChunkedArray, missing: np.ndarray,
                  floats: pa.ChunkedArray | np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Float values (NaN where missing or not a number) and the mask of present cells that failed.
    ``floats``: ``float_values(strings)`` when the caller has it, or its values as ``to_numpy`` gives
    them with NaN for nulls (then used in place)."""
    if floats is None:
        floats = float_values(strings)
    if isinstance(floats, np.ndarray):
        values = floats
    elif floats is not None:
        values = _writable_floats(floats)
    else:
        # the slow path: some cell is not a number (a code, a typo, spaces); parse what matches
        trimmed = pc.utf8_trim_whitespace(strings)
        number = pc.match_substring_regex(trimmed, NUMBER_PATTERN)
        kept = pc.if_else(number, trimmed, pa.scalar(None, pa.string()))
        values = _writable_floats(pc.cast(kept, pa.float64()))
    values[missing] = np.nan
    invalid = ~missing & ~np.isfinite(values)
    values[invalid] = np.nan
    return values, invalid


def date_format(spec: VariableSpec | None, kind: str) -> str | None:
    """The format dates are read in: the variable's, else ISO for dates (None: any ISO moment)."""
    fmt = spec.date_format if spec is not None and spec.date_format else None
    return "%Y-%m-%d" if fmt is None and kind == "date" else fmt


def parse_dates(strings: pa.ChunkedArray, spec: VariableSpec | None, kind: str,
                parsed: pa.ChunkedArray | None = None, *, iso_tried: bool = False) -> np.ndarray:
    """Seconds since 1970 as float (NaN where missing or not a valid date in the stated format).
    ``parsed``: ``iso_dates(strings)`` when the caller has it (``iso_tried``: it gave None)."""
    fmt = date_format(spec, kind)
    if parsed is None and fmt == "%Y-%m-%d" and not iso_tried:
        parsed = iso_dates(strings)
    if parsed is None and fmt is not None:
        parsed = pc.strptime(strings, format=fmt, unit="s", error_is_null=True)
    elif parsed is None:
        try:
            parsed = pc.cast(strings, pa.timestamp("s"))
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
            parsed = pc.coalesce(
                pc.strptime(strings, format="%Y-%m-%dT%H:%M:%S", unit="s", error_is_null=True),
                pc.strptime(strings, format="%Y-%m-%d %H:%M:%S", unit="s", error_is_null=True),
                pc.strptime(strings, format="%Y-%m-%dT%H:%M", unit="s", error_is_null=True),
                pc.strptime(strings, format="%Y-%m-%d", unit="s", error_is_null=True),
            )
    return _writable_floats(pc.cast(pc.cast(parsed, pa.int64()), pa.float64()))


def iso_dates(strings: pa.ChunkedArray) -> pa.ChunkedArray | None:
    """``strptime`` with ``%Y-%m-%d`` when every text is a valid date of ten characters, by Arrow's
    ISO cast (a third of the time); None otherwise. On such texts the two agree; the cast refuses
    what strptime would roll over (2023-02-30) or not read at all, and then strptime is used. No
    such text is empty or whitespace only."""
    lengths = pc.min_max(pc.binary_length(strings))
    if lengths["min"].as_py() != 10 or lengths["max"].as_py() != 10:
        return None
    try:
        return pc.cast(strings, pa.timestamp("s"))
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
        return None


def invalid_examples(strings: pa.ChunkedArray, invalid: np.ndarray, masked: bool) -> list[str]:
    """A few distinct texts that failed to parse (masked for sensitive variables)."""
    if not invalid.any():
        return []
    positions = np.flatnonzero(invalid)[:1000]
    texts = pc.unique(strings.take(pa.array(positions))).to_pylist()[:INVALID_EXAMPLES]
    return ["[masked]" for _ in texts] if masked else [str(t) for t in texts]
