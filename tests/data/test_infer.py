"""Inference of dictionary entries from text columns, checked against outside data and references."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from studylog.data import key_search
from studylog.data.infer import infer_column, infer_table, strict_parse
from studylog.data.read import read_table


def column(values: list[str | None], name: str = "x"):  # type: ignore[no-untyped-def]
    return infer_column(name, pa.array(values, pa.string()), len(values))


def csv_of(frame: pd.DataFrame, path: Path) -> pa.Table:
    frame.to_csv(path, index=False)
    return read_table(path)


def test_iris_from_scikit_learn(tmp_path: Path) -> None:
    # Source: scikit-learn's bundled copy of Fisher's iris data (sklearn.datasets.load_iris, its
    # DESCR: 150 instances, 4 numeric attributes, 3 classes of 50 instances each).
    from sklearn.datasets import load_iris

    bunch = load_iris(as_frame=True)
    frame = bunch.frame.drop(columns="target")
    frame["species"] = pd.Categorical.from_codes(bunch.target, bunch.target_names)
    proposal = infer_table(csv_of(frame, tmp_path / "iris.csv"))
    assert proposal.rows == 150
    numeric = [c for c in proposal.columns if c.type == "number"]
    assert [c.name for c in numeric] == list(bunch.feature_names)
    species = proposal.column("species")
    assert species is not None and species.type == "categorical"
    assert [level["code"] for level in species.levels] == ["setosa", "versicolor", "virginica"]
    assert species.evidence.distinct == 3 and species.evidence.present == 150
    # observed ranges against the DESCR's summary table (min/max per attribute)
    sepal_length = proposal.column("sepal length (cm)")
    assert sepal_length is not None
    assert (float(sepal_length.minimum), float(sepal_length.maximum)) == (4.3, 7.9)
    petal_width = proposal.column("petal width (cm)")
    assert petal_width is not None
    assert (float(petal_width.minimum), float(petal_width.maximum)) == (0.1, 2.5)
    # reference: pandas says the iris frame repeats a full row, so no column or pair can be a key
    assert frame.duplicated().any()
    assert proposal.key == []


def test_wine_from_scikit_learn(tmp_path: Path) -> None:
    # Source: scikit-learn's bundled UCI wine data (load_wine; DESCR: 178 instances, 13 numeric
    # attributes, class_0 59, class_1 71, class_2 48).
    from sklearn.datasets import load_wine

    bunch = load_wine(as_frame=True)
    frame = bunch.frame.copy()
    frame["target"] = pd.Categorical.from_codes(bunch.target, ["class_0", "class_1", "class_2"])
    # the columns pandas finds to hold whole numbers only (magnesium, proline) are written without ".0"
    whole = {name for name in bunch.feature_names if bool((frame[name] == frame[name].round()).all())}
    assert whole == {"magnesium", "proline"}
    for name in whole:
        frame[name] = frame[name].astype("int64")
    proposal = infer_table(csv_of(frame, tmp_path / "wine.csv"))
    assert proposal.rows == 178
    kinds = {c.name: c.type for c in proposal.columns}
    assert {name for name in bunch.feature_names if kinds[name] == "integer"} == whole
    assert {name for name in bunch.feature_names if kinds[name] == "number"} == set(bunch.feature_names) - whole
    target = proposal.column("target")
    assert target is not None and target.type == "categorical"
    assert [lv["code"] for lv in target.levels] == ["class_0", "class_1", "class_2"]
    # DESCR: class_0 59, class_1 71, class_2 48
    assert target.evidence.examples == ["class_1", "class_0", "class_2"]  # most frequent first


def test_integer_and_sentinel_codes() -> None:
    ages = [str(v) for v in range(18, 78)] + ["-99", "-99", "-98"]
    proposal = column(ages, "age")
    assert proposal.type == "integer"
    assert {c["code"]: c["count"] for c in proposal.missing_codes} == {"-99": 2, "-98": 1}
    assert (proposal.minimum, proposal.maximum) == ("18", "77")


def test_999_stands_apart_only_beyond_the_outer_fence() -> None:
    # 0..9 each 10 times: quartiles 2 and 7 (numpy, linear), spread 5, outer fence 7 + 15 = 22
    base = [str(v % 10) for v in range(100)]
    assert np.percentile([v % 10 for v in range(100)], [25, 75]).tolist() == [2.0, 7.0]
    assert [c["code"] for c in column(base + ["999"]).missing_codes] == ["999"]
    # a percentage column: 99 is an ordinary value there
    percent = [str(v) for v in range(0, 99)] + ["99"]
    assert column(percent).missing_codes == []
    # a column that is negative anyway: -9 is a value, not a code
    temperatures = [str(v) for v in range(-20, 30)] + ["-9"]
    assert column(temperatures).missing_codes == []


def test_missing_words_are_codes_and_do_not_spoil_the_type() -> None:
    values = [f"{v}.5" for v in range(30)] + ["NA", "n/a", "."]
    proposal = column(values)
    assert proposal.type == "number"
    assert sorted(c["code"] for c in proposal.missing_codes) == [".", "NA", "n/a"]
    assert proposal.evidence.share_parsed == 1.0


def test_numbers_strictly() -> None:
    values = [str(v / 4) for v in range(40)] + ["1e309"]  # overflows a double
    proposal = column(values)
    assert proposal.type == "number"
    assert proposal.evidence.not_parsed == ["1e309"]
    assert proposal.evidence.parsed == 40
    assert column(["٣", "٤", "٥"] * 10).type == "categorical"  # Arabic-Indic digits are not numbers
    assert column(["-0", "0", "1"] * 10).type == "integer"


def test_leading_zeros_are_codes() -> None:
    proposal = column([f"{v:05d}" for v in range(200, 260)], "postcode")
    assert proposal.type == "identifier"
    assert proposal.sensitivity == "quasi-identifier"


def test_boolean_keeps_spellings() -> None:
    proposal = column(["Yes", "no", "yes", "No"] * 10)
    assert proposal.type == "boolean"
    assert sorted(proposal.true_values) == ["Yes", "yes"]
    assert sorted(proposal.false_values) == ["No", "no"]


def test_dates_are_parsed_strictly() -> None:
    from datetime import date, timedelta

    days = [(date(2023, 1, 1) + timedelta(days=i)).isoformat() for i in range(60)]
    proposal = column(days + ["2024-02-30"])
    assert proposal.type == "date" and proposal.date_format == "%Y-%m-%d"
    assert proposal.evidence.not_parsed == ["2024-02-30"]
    assert (proposal.minimum, proposal.maximum) == ("2023-01-01", "2023-03-01")
    # the reference for which days exist: Python's datetime.strptime
    from datetime import datetime

    candidates = ["2024-02-29", "2023-02-29", "2024-04-31", "2024-13-01", "2024-1-5", " 2024-01-05", "0000-01-01"]
    fits, _ = strict_parse(pa.array(candidates), "%Y-%m-%d")
    expected = []
    for text in candidates:
        try:
            datetime.strptime(text, "%Y-%m-%d")
            expected.append(text == text.strip())
        except ValueError:
            expected.append(False)
    assert fits.to_pylist() == expected


def test_day_month_order() -> None:
    us = [f"{m}/{d}/2024" for m in range(1, 13) for d in (5, 20)]
    proposal = column(us)
    assert proposal.date_format == "%m/%d/%Y"
    ambiguous = column([f"{d:02d}/{m:02d}/2024" for d in range(1, 13) for m in range(1, 3)])
    assert ambiguous.date_format == "%d/%m/%Y"
    assert any("ambiguous" in note for note in ambiguous.evidence.notes)


def test_datetimes_with_offset_and_fraction() -> None:
    proposal = column([f"2024-03-01T10:{m:02d}:00.25+01:00" for m in range(30)])
    assert proposal.type == "datetime"
    assert proposal.date_format == "%Y-%m-%dT%H:%M:%S.%f%z"


def test_placeholder_dates_are_missing_codes() -> None:
    proposal = column([f"2024-01-{d:02d}" for d in range(1, 29)] + ["9999-12-31", "1900-01-01"])
    assert proposal.type == "date"
    assert sorted(c["code"] for c in proposal.missing_codes) == ["1900-01-01", "9999-12-31"]
    assert proposal.maximum == "2024-01-28"


def test_ordinal_scales() -> None:
    ratings = column([str(1 + v % 5) for v in range(50)], "satisfaction")
    assert ratings.type == "ordinal"
    assert [lv["code"] for lv in ratings.levels] == ["1", "2", "3", "4", "5"]
    wording = column(["Agree", "Strongly disagree", "Neutral", "Strongly agree"] * 5)
    assert wording.type == "ordinal"
    assert [lv["code"] for lv in wording.levels] == ["Strongly disagree", "Neutral", "Agree", "Strongly agree"]
    assert column([str(v % 3) for v in range(30)]).type == "integer"  # 0-2 is not a usual rating scale


def test_categorical_identifier_text() -> None:
    assert column(["north", "south", "east"] * 10).type == "categorical"
    ids = column([f"P{v:04d}" for v in range(30)], "patient")
    assert ids.type == "identifier" and ids.role == "identifier"
    notes = column([f"seen on day {v} with a cough" for v in range(30)])
    assert notes.type == "text"
    emails = column([f"person{v}@example.org" for v in range(30)], "contact")
    assert emails.sensitivity == "direct-identifier"


def test_empty_column() -> None:
    proposal = column([None, "", "  "] * 5)
    assert proposal.type == "text"
    assert proposal.evidence.present == 0 and proposal.evidence.empty == 15


def test_share_threshold_and_small_columns() -> None:
    big = column([str(v) for v in range(99)] + ["abc"])  # 99% parse
    assert big.type == "integer" and big.evidence.not_parsed == ["abc"]
    small = column(["1", "2", "3", "abc"])  # fewer than 20 values: all must parse
    assert small.type != "integer"


def test_key_candidates_single_and_pair() -> None:
    single = pa.table({"n": ["1", "2", "3", "4"], "code": ["a", "b", "c", "d"], "v": ["x", "x", "y", "y"]})
    assert infer_table(single).key == ["code"]  # leftmost would be n; an id-like name is not required
    pair = pa.table({
        "person": ["p1", "p1", "p2", "p2", "p3", "p3"],
        "visit": ["1", "2", "1", "2", "1", "2"],
        "value": ["5.5", "6.5", "5.5", "7.5", "8.5", "5.5"],
    })
    proposal = infer_table(pair)
    assert proposal.key == ["person", "visit"]
    # reference: pandas agrees that the pair is unique and neither column alone is
    frame = pair.to_pandas()
    assert not frame.duplicated(["person", "visit"]).any()
    assert frame.duplicated(["person"]).any() and frame.duplicated(["visit"]).any()
    incomplete = pa.table({"id": ["1", None, "3"], "v": ["a", "b", "a"]})
    assert infer_table(incomplete).key == []


@pytest.mark.parametrize("rows", [200_000])
def test_inference_is_vectorised_enough(rows: int) -> None:
    # a wide-ish frame of many rows must be inferred in a few seconds (no Python loop over rows)
    import time

    rng = np.random.default_rng(7)
    table = pa.table({
        "id": pa.array([f"R{i}" for i in range(rows)]),
        "amount": pa.array(rng.normal(100, 15, rows).round(2).astype(str)),
        "group": pa.array(rng.choice(["a", "b", "c"], rows)),
        "day": pa.array(pd.date_range("2020-01-01", periods=rows, freq="min").strftime("%Y-%m-%d %H:%M")),
    })
    started = time.perf_counter()
    proposal = infer_table(table)
    assert time.perf_counter() - started < 10
    assert [c.type for c in proposal.columns] == ["identifier", "number", "categorical", "datetime"]
    assert proposal.key == ["id"]


def test_a_pair_unique_only_in_the_first_rows_is_no_key(monkeypatch: pytest.MonkeyPatch) -> None:
    from studylog.data import infer

    monkeypatch.setattr(key_search, "PAIR_PREFIX_ROWS", 3)
    table = pa.table({
        "person": ["p1", "p1", "p2", "p2", "p3", "p1"],
        "visit": ["1", "2", "1", "2", "1", "1"],  # (p1, 1) comes back in the last row
    })
    assert infer_table(table).key == []
    assert table.to_pandas().duplicated().sum() == 1  # reference: pandas sees the repeat too


def test_empty_cells_among_the_values_change_neither_counts_nor_order() -> None:
    values = ["  ", "b", None, "a ", "", " b", "c", None, "a", "   ", "d@x.org"] * 3
    without = [v.strip() for v in values if v is not None and v.strip()]
    got, plain = column(values), column(without)
    assert got.evidence.present == plain.evidence.present == len(without)
    assert got.evidence.empty == len(values) - len(without)
    assert (got.type, got.levels, got.evidence.examples) == (plain.type, plain.levels, plain.evidence.examples)
    assert column([None, "", "  "]).evidence.notes == ["no values other than empty cells and missing codes"]
