"""The profile's definitions against published worked examples and hand derivations."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pytest

from studylog.data import univariate
from studylog.data.profile import profile_table
from studylog.data.spec import VariableSpec

# Anscombe, F. J. (1973). Graphs in Statistical Analysis. The American Statistician 27(1), 17-21,
# Table 1: the four data sets, typed in from the published table.
ANSCOMBE_X123 = [10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5]
ANSCOMBE = {
    "I": (ANSCOMBE_X123, [8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68]),
    "II": (ANSCOMBE_X123, [9.14, 8.14, 8.74, 8.77, 9.26, 8.10, 6.13, 3.10, 9.13, 7.26, 4.74]),
    "III": (ANSCOMBE_X123, [7.46, 6.77, 12.74, 7.11, 7.81, 8.84, 6.08, 5.39, 8.15, 6.42, 5.73]),
    "IV": ([8, 8, 8, 8, 8, 8, 8, 19, 8, 8, 8], [6.58, 5.76, 7.71, 8.84, 8.47, 7.04, 5.25, 12.50, 5.56, 7.91, 6.89]),
}


def _text_table(columns: dict[str, list[object]]) -> pa.Table:
    return pa.table({name: pa.array([None if v is None else str(v) for v in values], pa.string())
                     for name, values in columns.items()})


@pytest.mark.parametrize("name", list(ANSCOMBE))
def test_anscombe_quartet_summary_statistics(name: str) -> None:
    x, y = ANSCOMBE[name]
    table = _text_table({"x": x, "y": y})
    specs = {"x": VariableSpec("x", "number"), "y": VariableSpec("y", "number")}
    document = profile_table(table, specs)
    by_name = {v["name"]: v for v in document["variables"]}
    # Anscombe (1973): mean of x = 9.0, variance of x = 11.0 (sample variance, n - 1)
    assert by_name["x"]["mean"] == pytest.approx(9.0, abs=1e-12)
    assert by_name["x"]["sd"] ** 2 == pytest.approx(11.0, abs=1e-9)
    # Anscombe (1973): mean of y = 7.50 (to two decimals), correlation 0.816 (the four sets give
    # 0.8164 to 0.8165, so "0.816" is good to about one unit in the third decimal)
    assert by_name["y"]["mean"] == pytest.approx(7.50, abs=0.005)
    (pair,) = document["correlations"]
    assert pair["n"] == 11
    assert pair["pearson"] == pytest.approx(0.816, abs=0.001)
    # Anscombe (1973): the regression line y = 3.00 + 0.500 x, i.e. slope r * sd_y / sd_x = 0.500
    slope = pair["pearson"] * by_name["y"]["sd"] / by_name["x"]["sd"]
    assert slope == pytest.approx(0.500, abs=0.0005)


# NIST/SEMATECH e-Handbook of Statistical Methods, section 7.2.5.2 "Percentiles": 12 resistivity
# measurements. The first ten are also printed in section 2.6.1.1 (the gauge study database, run 1,
# wafer 138); the last two and the worked 90th percentile, 95.1981, are from memory of 7.2.5.2.
NIST_RESISTIVITY = [95.1772, 95.1567, 95.1937, 95.1959, 95.1442, 95.0610, 95.1591, 95.1195, 95.1065,
                    95.0925, 95.1990, 95.1682]


def test_nist_handbook_percentile_by_its_p_n_plus_1_definition() -> None:
    ordered = np.sort(np.array(NIST_RESISTIVITY))
    # e-Handbook 7.2.5.2: p(N + 1) = 0.9 x 13 = 11.7, so Y(11) + 0.7 (Y(12) - Y(11)) = 95.1981
    assert univariate.quantile_type6(ordered, 0.90) == pytest.approx(95.1981, abs=5e-5)
    # the handbook's end rules: k = 0 gives Y(1), k = N gives Y(N)
    assert univariate.quantile_type6(ordered, 0.01) == ordered[0]
    assert univariate.quantile_type6(ordered, 0.99) == ordered[-1]


def test_nist_values_under_our_type_7_definition_match_numpy() -> None:
    ordered = np.sort(np.array(NIST_RESISTIVITY))
    probabilities = np.array([0.0, 0.1, 0.25, 0.5, 0.75, 0.9, 1.0])
    # numpy's default (method="linear") is Hyndman & Fan type 7
    expected = np.quantile(ordered, probabilities)
    assert np.allclose(univariate.quantile_type7(ordered, probabilities), expected, rtol=0, atol=1e-12)
    # type 7 and the handbook's type 6 are different definitions: they differ here at the 90th
    assert univariate.quantile_type7(ordered, 0.9) != pytest.approx(95.1981, abs=5e-5)


def test_tukey_hinges_and_fences_derived_by_hand() -> None:
    # Tukey (1977), Exploratory Data Analysis, ch. 2: depth of the median (n + 1) / 2, depth of the
    # hinges (floor(depth of median) + 1) / 2. By hand for the ten values below:
    #   sorted: 1 2 4 5 7 8 9 11 25 60; n = 10; median depth 5.5 -> median (7 + 8) / 2 = 7.5
    #   hinge depth (5 + 1) / 2 = 3 -> lower hinge = 3rd smallest = 4, upper hinge = 3rd largest = 11
    #   hinge spread 11 - 4 = 7; inner fences 4 - 10.5 = -6.5 and 11 + 10.5 = 21.5
    #   outer fences 4 - 21 = -17 and 11 + 21 = 32
    #   beyond the inner fences: 25 and 60 (2); beyond the outer: 60 (1)
    # Type-7 quartiles differ: q1 = 4 + 0.25 (5 - 4) = 4.25, q3 = 9 + 0.75 (11 - 9) = 10.5.
    values = np.array([1, 2, 4, 5, 7, 8, 9, 11, 25, 60], dtype=float)
    assert univariate.tukey_hinges(values) == (4.0, 11.0)
    fences = univariate.tukey_fences(values)
    assert fences["inner_fences"] == [-6.5, 21.5]
    assert fences["outer_fences"] == [-17.0, 32.0]
    assert (fences["tukey"], fences["tukey_far"]) == (2, 1)
    summary = univariate.numeric_summary(values, integer=True)
    assert (summary["q1"], summary["median"], summary["q3"]) == (4.25, 7.5, 10.5)
    assert summary["outliers"]["tukey"] == 2 and summary["outliers"]["tukey_far"] == 1


def test_tukey_hinges_for_odd_n_include_the_median_in_both_halves() -> None:
    # Tukey (1977): for 1..5 (n = 5) the hinges are 2 and 4; for 1..9, 3 and 7 (by hand: depth 3)
    assert univariate.tukey_hinges(np.arange(1.0, 6.0)) == (2.0, 4.0)
    assert univariate.tukey_hinges(np.arange(1.0, 10.0)) == (3.0, 7.0)
    # n = 8: hinge depth 2.5, lower hinge (2 + 3) / 2 (by hand)
    assert univariate.tukey_hinges(np.arange(1.0, 9.0)) == (2.5, 6.5)


def test_modified_z_score_against_its_formula() -> None:
    # Iglewicz & Hoaglin (1993): M_i = 0.6745 (x_i - median) / MAD, outlier when |M_i| > 3.5
    values = np.array([1.0, 2.0, 3.0, 4.0, 9.0, 100.0, 2.5])
    median = float(np.median(values))
    mad = float(np.median(np.abs(values - median)))
    expected = int((np.abs(0.6745 * (values - median) / mad) > 3.5).sum())
    found_mad, count = univariate.modified_z(values, median)
    assert found_mad == mad
    # by hand: median 3, MAD 1; M = 4.05 for 9 and 65.4 for 100 (flagged), -1.35 for 1 (not)
    assert count == expected == 2


def test_modified_z_score_with_mad_zero_is_undefined_not_a_division() -> None:
    # More than half the values equal the median: MAD = 0 and M is undefined (our stated case: null)
    values = np.array([5.0, 5.0, 5.0, 5.0, 9.0])
    with np.errstate(all="raise"):
        mad, count = univariate.modified_z(values, 5.0)
    assert mad == 0.0 and count is None
    summary = univariate.numeric_summary(np.sort(values), integer=True)
    assert summary["outliers"]["modified_z"] is None
    assert "MAD is 0" in summary["outliers"]["modified_z_note"]


def test_near_zero_variance_rule_of_kuhn_and_johnson() -> None:
    # Kuhn & Johnson (2013), 3.5: frequency ratio > 95/5 = 19 and fewer than 10% distinct values
    rare = np.array([990, 10])  # ratio 99, 2 distinct of 1000 values (0.2%)
    result = univariate.near_zero_variance(rare, 1000)
    assert result["near_zero_variance"] is True
    assert result["frequency_ratio"] == 99.0
    assert (result["minority_count"], result["minority_share"]) == (10, 0.01)
    even = np.array([600, 400])  # ratio 1.5: not near-zero
    assert univariate.near_zero_variance(even, 1000)["near_zero_variance"] is False
    # many distinct values: ratio 30 but 20% distinct -> not near-zero (both conditions needed)
    spread = np.concatenate(([300], np.full(19, 10), np.ones(11)))  # 31 distinct of 500 values
    assert univariate.near_zero_variance(spread[:31].astype(int), 30)["near_zero_variance"] is False
