"""Columns worked out batch by batch while the file is read equal what the profile's own reading of the
whole column gives (``cells``), exactly: numbers, ISO dates and levels."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data import cells
from studylog.data.early import EARLY_COLUMNS, LEVELS, EarlyColumns

RNG_SEED = 20260302
KINDS = ("numbers", "iso_dates", "levels")
NOT_WORKED_OUT = object()


def _batches(values: list[str | None], cuts: list[int]) -> tuple[list[pa.RecordBatch], pa.Table]:
    table = pa.table({"t": pa.array(values, pa.string())})
    bounds = sorted({0, len(values), *(min(c, len(values)) for c in np.cumsum(cuts))})
    batches = [table.slice(a, b - a).to_batches()[0] for a, b in zip(bounds, bounds[1:]) if b > a]
    return batches, pa.Table.from_batches(batches)


def _worked_out(batches: list[pa.RecordBatch], table: pa.Table, parts: float, kind: str) -> object:
    early = EarlyColumns(parts)
    for at in range(0, len(batches), 2):
        early.add(batches[at:at + 2])
    found = early.take(table, {"t": kind})
    return found["t"].value if "t" in found else NOT_WORKED_OUT


TEXTS = ["1", "-0", "2.5", "1e300", "nan", "inf", "x", "  3", "2024-02-29", "2023-02-29", "2024-1-05",
         "a", "A", " a", ""]


@settings(max_examples=300, deadline=None)
@given(st.lists(st.one_of(st.none(), st.sampled_from(TEXTS)), min_size=1, max_size=60),
       st.lists(st.integers(min_value=1, max_value=25), min_size=1, max_size=8),
       st.floats(min_value=0.1, max_value=4.0), st.sampled_from(KINDS))
def test_each_kind_worked_out_batch_by_batch_equals_the_whole_columns(values: list[str | None], cuts: list[int],
                                                                     parts: float, kind: str) -> None:
    batches, table = _batches(values, cuts)
    column = table.column("t")
    found = _worked_out(batches, table, parts, kind)
    if found is NOT_WORKED_OUT:
        # a column is left to the profile's own work only when it is not of that kind throughout
        # (or fits an earlier kind from its first batch on)
        return
    if kind == "numbers":
        expected = cells.float_values(column)
        if expected is None:
            assert found is None
        else:
            assert found.tobytes() == cells.to_numpy(expected, np.nan).tobytes()
    elif kind == "iso_dates":
        parsed = cells.iso_dates(column)
        if column.null_count < len(column):
            assert parsed is not None  # what fits the ISO cast batch by batch fits it whole
        expected = cells.parse_dates(column, None, "date", parsed, iso_tried=True)
        assert np.array_equal(found, expected, equal_nan=True)
    else:
        expected = cells.Encoded.of(column)
        assert found.dictionary.equals(expected.dictionary)
        assert found.indices.dtype == expected.indices.dtype and np.array_equal(found.indices, expected.indices)


def test_a_column_takes_the_first_kind_that_fits_its_first_batch_and_keeps_it() -> None:
    batches, table = _batches(["2024-01-02", None, "2024-02-29", "1", "x", "y"], [3, 3])
    assert _worked_out(batches, table, 1.0, "iso_dates") is NOT_WORKED_OUT  # "1" in the second batch
    batches, table = _batches(["2024-01-02", None, "2024-02-29", "1970-01-02", None, None], [2, 2, 2])
    seconds = _worked_out(batches, table, 1.0, "iso_dates")  # a batch of nulls only fits too
    assert np.array_equal(seconds, [1704153600.0, np.nan, 1709164800.0, 86400.0, np.nan, np.nan], equal_nan=True)
    batches, table = _batches(["1", "2", "x", "y"], [2, 2])
    early = EarlyColumns()
    early.add(batches)
    assert early.take(table, {"t": "numbers"})["t"].value is None  # known: some text is no number
    batches, table = _batches(["b", "a", None, "b", "c"], [2, 3])
    encoded = _worked_out(batches, table, 1.0, "levels")
    assert encoded.dictionary.to_pylist() == ["b", "a", "c"] and encoded.indices.tolist() == [0, 1, -1, 0, 2]


def test_levels_stop_being_counted_past_their_limit() -> None:
    many = [f"v{i}" for i in range(LEVELS + 5)]
    batches, table = _batches(["x", "y"] + many, [2, len(many)])
    assert _worked_out(batches, table, 1.0, "levels") is NOT_WORKED_OUT


def test_work_given_up_with_the_whole_read_is_not_used() -> None:
    table = pa.table({"n": pa.array(["1", "2"], pa.string())})
    early = EarlyColumns()
    early.add(table.to_batches())
    early.give_up()
    early.add(table.to_batches())
    assert early.take(table, {"n": "numbers"}) == {}


def test_columns_worked_out_batch_by_batch_grow_past_the_expected_rows() -> None:
    rng = np.random.default_rng(RNG_SEED)
    numbers = [None if rng.random() < 0.1 else repr(float(v)) for v in rng.normal(size=5000)]
    levels = [None if rng.random() < 0.1 else str(rng.choice(["p", "q", "r"])) for _ in range(5000)]
    table = pa.table({"x": pa.array(numbers, pa.string()), "g": pa.array(levels, pa.string())})
    batches = table.to_batches(max_chunksize=500)
    early = EarlyColumns(1.0)  # ten times fewer rows expected than come
    for at in range(0, len(batches), 3):
        early.add(batches[at:at + 3])
    chunked = pa.Table.from_batches(batches)
    found = early.take(chunked, {"x": "numbers", "g": "levels"})
    expected = cells.to_numpy(cells.float_values(chunked.column("x")), np.nan)
    assert found["x"].value.tobytes() == expected.tobytes()
    assert np.array_equal(found["g"].value.indices, cells.Encoded.of(chunked.column("g")).indices)


def test_nothing_worked_out_early_for_a_wide_table() -> None:
    table = pa.table({f"c{i}": pa.array(["1"], pa.string()) for i in range(EARLY_COLUMNS + 1)})
    early = EarlyColumns()
    early.add(table.to_batches())
    assert early.take(table, {name: "numbers" for name in table.column_names}) == {}


def test_columns_worked_out_by_a_pool_equal_those_worked_out_in_turn() -> None:
    # the batches left at the end of a read are worked on a column per thread: the same result
    from concurrent.futures import ThreadPoolExecutor

    rng = np.random.default_rng(RNG_SEED)
    n = 4000
    columns = {
        "x": pa.array(np.round(rng.normal(size=n), 3).astype(str), pa.string()),
        "day": pa.array([f"2024-03-{1 + i % 28:02d}" for i in range(n)], pa.string()),
        "g": pa.array(rng.choice(["a", "b", None], n).tolist(), pa.string()),
        "t": pa.array([f"w{i}" for i in range(n)], pa.string()),
    }
    table = pa.table(columns)
    batches = table.to_batches(max_chunksize=300)
    table = pa.Table.from_batches(batches)
    kinds = {"x": "numbers", "day": "iso_dates", "g": "levels", "t": "levels"}
    found = []
    with ThreadPoolExecutor(max_workers=3) as pool:
        for mapper in (map, pool.map):
            early = EarlyColumns(len(batches) / 3)
            early.add(batches[:3])
            early.add(batches[3:], mapper)
            found.append(early.take(table, kinds))
    serial, pooled = found
    assert set(serial) == set(pooled) == {"x", "day", "g"}  # "t" has too many distinct texts
    assert serial["x"].value.tobytes() == pooled["x"].value.tobytes()
    assert np.array_equal(serial["day"].value, pooled["day"].value, equal_nan=True)
    assert np.array_equal(serial["g"].value.indices, pooled["g"].value.indices)
    assert np.array_equal(serial["x"].value, cells.to_numpy(cells.float_values(table.column("x")), np.nan))
