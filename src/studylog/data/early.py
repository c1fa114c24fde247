"""Work on a file's columns a batch at a time while the file is still being read, on the core the
single-threaded parse leaves idle (``profiling.profile_file``).

Each column is read, from its first batch on, as the first of these that fits it: numbers (float64,
NaN where null, as ``cells.float_values`` then ``to_numpy``), ISO dates (seconds as float64, NaN where
null, as ``cells.iso_dates`` then ``parse_dates``), or levels (each row's index among the distinct
texts in the order they first appear, -1 where null, as ``cells.Encoded.of``). A column stops being
worked on at its first batch that does not fit (a text that is no number or date, more than
``LEVELS`` distinct texts), and is then left to the profile's own work. Every cast is per value and
the levels are numbered in order of appearance, so the batches' results joined are exactly the
column's. The results go to one array per column, sized from the first batch's share of the file
(``parts``: the number of batches expected): no memory is held per batch.

What a column was read as is used only where the profile reads it so (``wanted``): a categorical
column whose codes are numbers was read as numbers here, and the profile encodes it itself.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from studylog.data import cells
from studylog.data.spec import LEVEL_TYPES, NUMERIC_TYPES, VariableSpec

# wider tables are left to the columns' own work: their batches hold few rows each, and the calls
# per batch and column would cost more than the casts
EARLY_COLUMNS = 256
# a column with more distinct texts than this is no longer encoded early (free text, identifiers)
LEVELS = 1000


@dataclass
class Early:
    """What a column was read as here (``"numbers"``, ``"iso_dates"`` or ``"levels"``) and the result:
    float64 values, or a ``cells.Encoded`` (numbers: None when some text is no number)."""

    kind: str
    value: Any


def wanted(spec: VariableSpec) -> str | None:
    """How the profile reads a column of this variable, in the terms of ``Early.kind``."""
    if spec.type in NUMERIC_TYPES:
        return "numbers"
    if spec.type in LEVEL_TYPES or spec.type == "boolean":
        return "levels"
    if spec.type in ("date", "datetime") and cells.date_format(spec, spec.type) == "%Y-%m-%d":
        return "iso_dates"
    return None


class _Numbers:
    kind = "numbers"

    def read(self, chunks: Sequence[pa.Array], out: np.ndarray) -> bool:
        floats = cells.float_values(pa.chunked_array(chunks, pa.string()))
        if floats is None:
            return False
        _place(floats, out)
        return True

    def result(self, out: np.ndarray) -> Any:
        return out


class _IsoDates:
    kind = "iso_dates"

    def read(self, chunks: Sequence[pa.Array], out: np.ndarray) -> bool:
        texts = pa.chunked_array(chunks, pa.string())
        if texts.null_count == len(texts):  # only nulls: they fit any column
            out[:] = np.nan
            return True
        moments = cells.iso_dates(texts)
        if moments is None:
            return False
        _place(pc.cast(pc.cast(moments, pa.int64()), pa.float64()), out)
        return True

    def result(self, out: np.ndarray) -> Any:
        return out


class _Levels:
    kind = "levels"

    def __init__(self) -> None:
        self.number: dict[str, int] = {}  # each distinct text's index, in the order they appear

    def read(self, chunks: Sequence[pa.Array], out: np.ndarray) -> bool:
        at = 0
        number = self.number
        for chunk in chunks:
            encoded = pc.dictionary_encode(chunk)
            if len(encoded.dictionary) > LEVELS:
                return False
            position = np.array([number.setdefault(text, len(number)) for text in encoded.dictionary.to_pylist()],
                                dtype=np.int64)
            if len(number) > LEVELS:
                return False
            part = out[at:at + len(chunk)]
            if position.size:
                # a null's index may be anything: clipped here, then set to -1
                np.take(position, cells.chunk_values(encoded.indices, np.int32), out=part, mode="clip")
            if encoded.null_count:
                part[cells.as_bool(pc.is_null(chunk))] = -1
            at += len(chunk)
        return True

    def result(self, out: np.ndarray) -> Any:
        return cells.Encoded(pa.array(list(self.number), pa.string()), out)


def _place(values: pa.ChunkedArray, out: np.ndarray) -> None:
    """float64 values into ``out``, NaN where null (as ``to_numpy``)."""
    if values.null_count:
        values = pc.fill_null(values, np.nan)
    np.concatenate([cells.chunk_values(chunk, np.float64) for chunk in values.chunks], out=out)


_DTYPE = {"numbers": np.float64, "iso_dates": np.float64, "levels": np.int64}


class EarlyColumns:
    """Each column's values worked out batch by batch (see the module docstring)."""

    def __init__(self, parts: float = 1.0) -> None:
        self._expected = max(parts, 1.0)
        self._readers: list[Any] = []
        self._values: list[np.ndarray] = []
        self._rows = 0
        self._lengths: list[int] = []
        self._usable = True
        self._not_numbers: set[int] = set()  # columns found to hold a text that is no number
        self._room = 0  # the rows each column's array is made for (from the first batch)

    def add(self, batches: Sequence[pa.RecordBatch],
            mapper: Callable[..., Iterable[Any]] = map) -> None:
        """The next batches of rows, in order (as many as have come: the fewer the calls, the less
        time in Python). ``mapper`` (e.g. a thread pool's map) works on the columns: the batches
        left when the read has ended are worked on by every core."""
        if not self._usable or not batches:
            return
        rows = sum(batch.num_rows for batch in batches)
        first = not self._lengths
        if first:
            if batches[0].num_columns > EARLY_COLUMNS:
                self.give_up()
                return
            self._room = int(max(batches[0].num_rows, 1) * self._expected * 1.05) + rows + 1024
            self._readers = [None] * batches[0].num_columns
            self._values = [np.empty(0)] * batches[0].num_columns
        start, end = self._rows, self._rows + rows
        list(mapper(lambda position: self._add_column(position, batches, start, end, first),
                    range(len(self._readers))))
        self._rows = end
        self._lengths.extend(batch.num_rows for batch in batches)

    def _add_column(self, position: int, batches: Sequence[pa.RecordBatch], start: int, end: int,
                    first: bool) -> None:
        """One column of ``add``: touches only that column's reader and values."""
        chunks = [batch.column(position) for batch in batches]
        if first:
            self._readers[position] = self._first_fit(position, chunks, end)
            return
        reader = self._readers[position]
        if reader is None:
            return
        values = self._values[position]
        if end > values.size:
            grown = np.empty(max(end, int(values.size * 1.5)), dtype=values.dtype)
            grown[:start] = values[:start]
            self._values[position] = values = grown
        if not reader.read(chunks, values[start:end]):
            if reader.kind == "numbers":
                self._not_numbers.add(position)
            self._readers[position] = None
            self._values[position] = np.empty(0)

    def _first_fit(self, position: int, chunks: list[pa.Array], end: int) -> Any:
        for reader in (_Numbers(), _IsoDates(), _Levels()):
            values = np.empty(self._room, dtype=_DTYPE[reader.kind])
            if reader.read(chunks, values[:end]):
                self._values[position] = values
                return reader
            if reader.kind == "numbers":
                self._not_numbers.add(position)
        return None

    def give_up(self) -> None:
        """The batches so far stand for nothing (see read_table)."""
        self._usable = False
        self._readers, self._values = [], []

    def take(self, table: pa.Table, kinds: Mapping[str, str | None]) -> dict[str, Early]:
        """For the columns of ``table`` (the table read) named in ``kinds``: what each was read as,
        where that is the kind asked for, or numbers None for a column known not to read as numbers
        throughout; only when the batches are the table's chunks. The work is forgotten here."""
        readers, values_of = self._readers, self._values
        self._readers, self._values = [], []
        if not self._usable or len(readers) != table.num_columns or self._lengths != [
                len(chunk) for chunk in table.column(0).chunks]:
            return {}
        position = {name: i for i, name in enumerate(table.column_names)}
        found: dict[str, Early] = {}
        for name, kind in kinds.items():
            reader = readers[position[name]]
            if reader is not None and kind == reader.kind:
                found[name] = Early(kind, reader.result(values_of[position[name]][:self._rows]))
            elif kind == "numbers" and position[name] in self._not_numbers:
                found[name] = Early(kind, None)
        return found
