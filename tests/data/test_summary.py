"""Stored per-column summaries: exact parts against numpy, sketched quantiles within the stated bound,
and mergeability (summaries of parts merge into the summary of the whole)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data.spec import Code, VariableSpec
from studylog.data import distinct as distinct_module
from studylog.data.numeric_summary import EXACT_LIMIT, decode_sketch, kll_error
from studylog.data.summary import ColumnSummary

NUMBER = VariableSpec(name="x", type="number", missing_codes=(Code("-99", "refused"), Code("-98")))


def summarise(values: list[str | None], spec: VariableSpec = NUMBER, batch: int = 7) -> dict:
    summary = ColumnSummary(spec, spec.type)
    array = pa.array(values, pa.string())
    for start in range(0, max(len(array), 1), batch):
        summary.update(array.slice(start, batch))
    return summary.to_dict()


def test_missing_codes_are_counted_per_code_and_never_as_values() -> None:
    profile = summarise(["1", "-99", " -99 ", "", None, "-98", "3", "abc", "2"])
    assert profile["rows"] == 9
    assert profile["missing"] == 5  # two empty, two -99, one -98
    assert profile["missing_codes"] == [{"code": "-99", "count": 2}, {"code": "-98", "count": 1}]
    assert profile["count"] == 4 and profile["invalid"] == 1
    # numpy is the reference for the statistics of the parsed values 1, 3, 2
    values = np.array([1.0, 3.0, 2.0])
    assert profile["min"] == 1 and profile["max"] == 3
    assert profile["mean"] == pytest.approx(values.mean())
    assert profile["sd"] == pytest.approx(values.std(ddof=1))
    assert profile["median"] == pytest.approx(np.median(values))
    assert profile["quantile_error"] == 0.0 and profile["quantiles_exact"] is True


def test_exact_quantiles_match_numpy_type_7() -> None:
    # Hyndman & Fan (1996) type 7 is numpy's default "linear" method
    rng = np.random.default_rng(7)
    x = rng.gamma(2.0, 3.0, size=5_000)
    profile = summarise([repr(float(v)) for v in x], batch=999)
    expected = np.quantile(x, [0.25, 0.5, 0.75])
    assert [profile["q1"], profile["median"], profile["q3"]] == pytest.approx(expected.tolist())
    assert profile["deciles"] == pytest.approx(np.quantile(x, np.arange(1, 10) / 10).tolist())
    assert sum(profile["histogram"]["counts"]) == 5_000
    assert profile["histogram"]["counts"] == np.histogram(x, bins=np.array(profile["histogram"]["edges"]))[0].tolist()


def test_sketched_quantiles_within_stated_rank_error() -> None:
    # Beyond EXACT_LIMIT values the quantiles come from the KLL sketch; its normalized rank error
    # (Apache DataSketches, k = 200: about 1.33%) bounds |rank(estimate) - p| with 99% confidence.
    rng = np.random.default_rng(11)
    x = rng.lognormal(0.0, 1.0, size=3 * EXACT_LIMIT)
    profile = summarise([repr(float(v)) for v in x], batch=65_536)
    assert profile["quantiles_exact"] is False
    bound = kll_error()
    assert profile["quantile_error"] == pytest.approx(bound) and 0.01 < bound < 0.02
    ordered = np.sort(x)
    for p, estimate in zip(np.arange(1, 10) / 10, profile["deciles"]):
        rank = np.searchsorted(ordered, estimate, side="right") / len(x)
        assert abs(rank - p) <= bound
    # mean and sd stay exact (numpy reference)
    assert profile["mean"] == pytest.approx(x.mean(), rel=1e-12)
    assert profile["sd"] == pytest.approx(x.std(ddof=1), rel=1e-9)
    sketch = decode_sketch(profile["sketch"])
    assert sketch.n == len(x)
    assert sum(profile["histogram"]["counts"]) == pytest.approx(len(x), abs=25)


def test_levels_most_frequent_first_and_withheld_for_identifiers() -> None:
    spec = VariableSpec(name="plan", type="categorical", missing_codes=(Code("unknown"),))
    profile = summarise(["b", "a", "b", "c", "unknown", "", "b", "a"], spec, batch=3)
    assert profile["levels"] == [{"value": "b", "count": 3}, {"value": "a", "count": 2},
                                 {"value": "c", "count": 1}]
    assert profile["distinct"] == 3 and profile["distinct_exact"] is True
    assert profile["missing"] == 2
    secret = VariableSpec(name="email", type="identifier", sensitivity="direct-identifier")
    withheld = summarise(["x@y", "z@w", "x@y"], secret)
    assert withheld["levels"] == [] and withheld["levels_withheld"] is True
    assert withheld["levels_other"] == 3 and withheld["distinct"] == 2


def test_many_levels_keep_exact_counts_of_the_most_frequent() -> None:
    from studylog.data import summary as module

    values = [f"id{i}" for i in range(module.LEVEL_LIMIT + 5_000)] + ["id1"] * 10
    profile = summarise(values, VariableSpec(name="id", type="identifier"), batch=20_000)
    assert profile["levels_exact"] is False
    assert profile["levels"][0] == {"value": "id1", "count": 11}
    assert len(profile["levels"]) == module.LEVELS_STORED
    assert sum(lv["count"] for lv in profile["levels"]) + profile["levels_other"] == len(values)
    # k-minimum-values estimate: relative standard error about 1/sqrt(k - 2) = 1.6%; allow 5 of them
    assert profile["distinct"] == pytest.approx(module.LEVEL_LIMIT + 5_000, rel=0.08)


def test_strict_dates() -> None:
    spec = VariableSpec(name="d", type="date")
    profile = summarise(["2024-02-29", "2023-02-29", "2024-01-05", "", "05/01/2024"], spec)
    assert profile["invalid"] == 2  # 2023 has no 29 February; the last is not ISO 8601
    assert profile["min"] == "2024-01-05" and profile["max"] == "2024-02-29"


cells = st.lists(
    st.one_of(st.none(), st.sampled_from(["", "-99", "-98", "x"]),
              st.integers(-50, 50).map(str), st.floats(-1e3, 1e3, allow_nan=False).map(repr)),
    min_size=0, max_size=60,
)


@settings(max_examples=60, deadline=None)
@given(cells, st.integers(0, 60), st.sampled_from(["number", "categorical"]))
def test_merged_parts_equal_the_whole(values: list[str | None], cut: int, kind: str) -> None:
    spec = VariableSpec(name="x", type=kind, missing_codes=NUMBER.missing_codes)
    whole = ColumnSummary(spec)
    whole.update(pa.array(values, pa.string()))
    left, right = ColumnSummary(spec), ColumnSummary(spec)
    left.update(pa.array(values[:cut], pa.string()))
    right.update(pa.array(values[cut:], pa.string()))
    merged = left.merge(right).to_dict()
    expected = whole.to_dict()
    for key in ("mean", "sd"):
        if expected.get(key) is not None:
            assert merged[key] == pytest.approx(expected[key], rel=1e-9, abs=1e-9)
    strip = {"mean", "sd", "sketch"}
    assert {k: v for k, v in merged.items() if k not in strip} == \
        {k: v for k, v in expected.items() if k not in strip}


CELLS = st.one_of(st.none(), st.sampled_from(
    ["", " ", "1", "12", " 7 ", "1.5", "-4", "1e3", "1e309", "NaN", "-99", " -98", "abc", "Y", "N", "yes",
     "2024-02-29", "2023-02-29", "2024-2-3", "2024-12-31", "2024-01-01T10:00:00", "2024-01-01 10:00",
     "0012", "999999999999999999999"]))


@settings(max_examples=60, deadline=None)
@given(st.lists(CELLS, max_size=40), st.sampled_from(
    ["integer", "number", "date", "datetime", "boolean", "categorical", "identifier", "text"]),
    st.integers(1, 9))
def test_summary_from_the_checks_reading_equals_the_summary_of_the_text(
        values: list[str | None], kind: str, batch: int) -> None:
    # the check hands its own reading of the cells (typed.parse) to the summary; the profile must be
    # the one computed from the raw text (the sketch's bytes aside: KLL compaction is randomised)
    from studylog.data.typed import parse

    spec = VariableSpec(name="x", type=kind, missing_codes=(Code("-99"), Code("-98")))
    direct = ColumnSummary(spec, kind)
    reused = ColumnSummary(spec, kind)
    array = pa.array(values, pa.string())
    for start in range(0, max(len(array), 1), batch):
        part = array.slice(start, batch)
        direct.update(part)
        reused.update(part, parsed=parse(part, spec))
    expected, got = direct.to_dict(), reused.to_dict()
    expected.pop("sketch", None)
    got.pop("sketch", None)
    assert got == expected


def test_distinct_estimate_from_the_checks_digests_equals_the_one_from_the_text(monkeypatch) -> None:
    # past the exact limit the distinct count is a k-minimum-values estimate; the check hands its own
    # cell digests (repeats.text_digests, the same hash) instead of hashing the values again
    from studylog.data import summary as module
    from studylog.data.repeats import text_digests
    from studylog.data.typed import parse

    monkeypatch.setattr(module, "LEVEL_LIMIT", 1_000)
    monkeypatch.setattr(distinct_module, "KMV_K", 256)
    spec = VariableSpec(name="x", type="identifier", missing_codes=(Code("-99"),))
    rng = np.random.default_rng(7)
    values = [f"id-{v}" if v % 50 else "-99" for v in rng.integers(0, 30_000, 20_000)]
    direct, reused = ColumnSummary(spec, "identifier"), ColumnSummary(spec, "identifier")
    array = pa.array(values, pa.string())
    for start in range(0, len(array), 3_000):
        part = array.slice(start, 3_000)
        direct.update(part)
        reused.update(part, parsed=parse(part, spec), digests=lambda part=part: text_digests(part)[0])
    assert reused.to_dict() == direct.to_dict()
    assert direct.to_dict()["levels_exact"] is False
    # the estimate is within a few standard errors (1 / sqrt(k - 2), about 6%) of the true count
    true = len({v for v in values if v != "-99"})
    assert abs(direct.to_dict()["distinct"] - true) / true < 0.25


def test_quantiles_of_many_rows_with_few_distinct_values_are_exact_and_equal_numpy() -> None:
    # More rows than EXACT_LIMIT but few distinct values: the value counts are exact, so are the
    # quantiles, histogram and outlier counts; numpy on the values themselves is the reference
    # (np.quantile's default "linear" method is Hyndman & Fan type 7).
    from studylog.data.numeric_summary import counted_outliers

    rng = np.random.default_rng(5)
    x = np.round(rng.normal(50, 12, size=3 * EXACT_LIMIT))
    profile = summarise([repr(float(v)) for v in x], batch=65_536)
    assert profile["quantiles_exact"] is True and profile["quantile_error"] == 0.0
    probabilities = [0.25, 0.5, 0.75] + [i / 10 for i in range(1, 10)]
    expected = np.quantile(x, probabilities).tolist()
    assert [profile["q1"], profile["median"], profile["q3"]] + profile["deciles"] == expected
    edges = np.array(profile["histogram"]["edges"])
    assert profile["histogram"]["counts"] == np.histogram(x, bins=edges)[0].tolist()
    values, counts = np.unique(x, return_counts=True)
    assert profile["value_counts"] == {"values": [int(v) for v in values], "counts": counts.tolist()}
    # the value counts are listed, so drift needs no sketch
    assert profile["sketch"] is None
    # Tukey's fences on Tukey's hinges, and the modified z-score, computed on the sorted values
    ordered = np.sort(x)
    half = (len(x) + 1) // 2
    low, high = np.median(ordered[:half]), np.median(ordered[len(x) - half:])
    spread = high - low
    median = np.median(x)
    mad = np.median(np.abs(x - median))
    assert profile["outliers"] == {
        "tukey": int(((x < low - 1.5 * spread) | (x > high + 1.5 * spread)).sum()),
        "tukey_far": int(((x < low - 3 * spread) | (x > high + 3 * spread)).sum()),
        "modified_z": int((np.abs(0.6745 * (x - median) / mad) > 3.5).sum()),
    }
    assert counted_outliers(values, counts) == profile["outliers"]


@settings(max_examples=200, deadline=None)
@given(st.lists(st.integers(-20, 20), min_size=1, max_size=80), st.integers(0, 2))
def test_counted_quantiles_equal_numpys_bit_for_bit(values: list[int], scale: int) -> None:
    # the reference is numpy's own np.quantile (linear) on the repeated values
    from studylog.data.numeric_summary import PROBABILITIES, counted_quantiles

    x = np.asarray(values, dtype=float) / 10**scale
    distinct, counts = np.unique(x, return_counts=True)
    assert counted_quantiles(distinct, counts, PROBABILITIES) == np.quantile(x, PROBABILITIES).tolist()


def test_sketch_stored_when_the_value_counts_are_not() -> None:
    # between 1,000 and EXACT_LIMIT distinct values: quantiles exact, value counts not listed, and the
    # sketch (built from the counts) is stored for drift; it holds every value
    rng = np.random.default_rng(9)
    x = np.round(rng.normal(0, 1, size=200_000), 3)
    profile = summarise([repr(float(v)) for v in x], batch=65_536)
    assert profile["quantiles_exact"] is True and profile["value_counts"] is None
    assert profile["median"] == np.quantile(x, 0.5)
    assert decode_sketch(profile["sketch"]).n == len(x)


def test_withheld_columns_count_distinct_values_as_the_level_counts_do(monkeypatch) -> None:
    # a direct identifier's values are never stored: its distinct count comes from the digests alone
    # and must be the one the level counts give (exact, then the same k-minimum-values estimate)
    from studylog.data import summary as module

    monkeypatch.setattr(module, "LEVEL_LIMIT", 2_000)
    monkeypatch.setattr(distinct_module, "KMV_K", 256)
    rng = np.random.default_rng(3)
    for top in (1_500, 40_000):
        values = [f"p{v}@example.org" for v in rng.integers(0, top, 10_000)]
        array = pa.array(values, pa.string())
        counts = module.LevelCounts()
        for start in range(0, len(array), 999):
            counts.update(array.slice(start, 999))
        levels, other, distinct, exact = counts.result()
        secret = VariableSpec(name="email", type="identifier", sensitivity="direct-identifier")
        profile = summarise(values, secret, batch=999)
        assert profile["levels"] == [] and profile["levels_withheld"] is True
        assert profile["levels_other"] == sum(lv["count"] for lv in levels) + other == len(values)
        assert (profile["distinct"], profile["distinct_exact"]) == (distinct, exact)
        assert exact is (top < 2_000)


def test_an_undeclared_columns_summary_from_the_checks_digests_equals_the_one_from_the_text(monkeypatch) -> None:
    # an undeclared column is summarised from its raw text (no variable to read it as); the check hands
    # over its cell digests so that the distinct count does not hash the texts again
    from studylog.data import summary as module
    from studylog.data.repeats import text_digests

    monkeypatch.setattr(module, "LEVEL_LIMIT", 1_000)
    rng = np.random.default_rng(2)
    for top in (500, 5_000):
        values = [f"note {v}" if v % 7 else " " for v in rng.integers(0, top, 6_000)]
        direct, reused = ColumnSummary(None, "text", name="extra"), ColumnSummary(None, "text", name="extra")
        array = pa.array(values, pa.string())
        for start in range(0, len(array), 1_000):
            part = array.slice(start, 1_000)
            direct.update(part)
            reused.update(part, digests=lambda part=part: text_digests(part)[0])
        assert reused.to_dict() == direct.to_dict()
        assert direct.to_dict()["distinct_exact"] is (top < 1_000)
