"""Values in order, sorted or counted: the numeric summary reads the same from either.

The reference is numpy itself: the summary of ``np.sort`` of the values, each repeated its count
(``np.repeat``), and numpy's own quantile, median and moments of those values."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data import univariate
from studylog.data.ordered import CountedValues, SortedValues

MOMENTS = ("mean", "sd", "skewness", "kurtosis")


def _assert_same_summary(distinct: np.ndarray, counts: np.ndarray, integer: bool) -> None:
    values = np.repeat(distinct, counts)
    sorted_summary = univariate.numeric_summary(values, integer)
    counted_summary = univariate.numeric_summary(CountedValues(distinct, counts), integer)
    for key, expected in sorted_summary.items():
        found = counted_summary[key]
        if key in MOMENTS:
            if expected is None:
                assert found is None, key
            else:
                # weighted sums over the distinct values, not sums over the values: the last bits differ
                assert found == pytest.approx(expected, rel=1e-9, abs=1e-12), key
        elif key == "normality" and expected is not None:
            assert found["test"] == expected["test"] and found["n"] == expected["n"]
            assert found["p_value"] == pytest.approx(expected["p_value"], rel=1e-6, abs=1e-12)
        else:
            # order statistics, counts and the histogram: exactly equal
            assert found == expected, key


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(-50, 50), st.integers(1, 40)), min_size=1, max_size=30,
                unique_by=lambda pair: pair[0]))
def test_a_counted_column_summarises_as_its_sorted_values(pairs: list[tuple[int, int]]) -> None:
    pairs.sort()
    distinct = np.array([value / 4 for value, _ in pairs], dtype=np.float64)
    counts = np.array([count for _, count in pairs], dtype=np.int64)
    _assert_same_summary(distinct, counts, integer=False)
    _assert_same_summary(np.array([float(value) for value, _ in pairs]), counts, integer=True)


@pytest.mark.parametrize("size", [7, 8, 5001, 200_000])
def test_large_and_small_counted_columns_against_numpy(size: int) -> None:
    rng = np.random.default_rng(size)
    values = np.sort(np.round(rng.normal(30, 9, size)))
    distinct, counts = np.unique(values, return_counts=True)
    counted = CountedValues(distinct, counts)
    assert counted.n == size
    # numpy as the reference: quantiles (type 7, its default), median, moments
    probabilities = np.array([0.1, 0.25, 0.5, 0.75, 0.9])
    assert np.array_equal(univariate.quantile_type7(counted, probabilities), np.quantile(values, probabilities))
    summary = univariate.numeric_summary(counted, integer=True)
    assert summary["median"] == np.median(values)
    assert summary["mean"] == pytest.approx(values.mean(), rel=1e-12)
    assert summary["sd"] == pytest.approx(values.std(ddof=1), rel=1e-12)
    mad = float(np.median(np.abs(values - np.median(values))))
    assert summary["mad"] == mad
    assert summary["negative"] == int(np.count_nonzero(values < 0))
    _assert_same_summary(distinct, counts, integer=True)


def test_the_mad_of_a_mostly_constant_counted_column_is_zero_and_leaves_the_count_undefined() -> None:
    # Iglewicz & Hoaglin (1993): with half the values or more at the median, MAD = 0 and M is undefined
    counted = CountedValues(np.array([1.0, 5.0, 9.0]), np.array([2, 10, 3]))
    assert counted.absolute_deviations(5.0, 3.5, 0.6745) == (0.0, None)
    assert SortedValues(counted.materialized()).absolute_deviations(5.0, 3.5, 0.6745) == (0.0, None)


def test_counts_below_a_point_match_a_search_of_the_sorted_values() -> None:
    counted = CountedValues(np.array([-2.0, 0.0, 1.5, 4.0]), np.array([3, 1, 2, 5]))
    plain = SortedValues(counted.materialized())
    points = np.array([-3.0, -2.0, -1.0, 0.0, 1.5, 2.0, 4.0, 9.0])
    for side in ("left", "right"):
        assert np.array_equal(counted.below(points, side), plain.below(points, side))
    assert np.array_equal(counted.at(np.arange(counted.n)), plain.values)
    mean, m2, _m3, _m4 = counted.central_sums()
    assert mean == pytest.approx(plain.values.mean()) and math.isclose(m2, plain.values.var())
