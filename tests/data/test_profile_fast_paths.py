"""The profile's shortcuts give exactly what the plain definitions give (not merely close to it)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data import cells, pairs, univariate

RNG_SEED = 20260302


@pytest.mark.parametrize("kind", ["normal", "ties", "rounded", "extremes"])
def test_modified_z_on_sorted_values_equals_the_plain_definition(kind: str) -> None:
    rng = np.random.default_rng(RNG_SEED)
    for n in range(1, 80):
        values = {
            "normal": lambda: rng.normal(size=n),
            "ties": lambda: rng.integers(0, 4, n).astype(float),
            "rounded": lambda: np.round(rng.lognormal(1, 1, n), 1),
            "extremes": lambda: rng.choice([1e-17, 0.1, 0.3, 5.0, 1e17], n),
        }[kind]()
        ordered = np.sort(values)
        for median in (float(np.median(ordered)), float(ordered[n // 2]), float(rng.uniform(-1, 6))):
            assert univariate.modified_z_sorted(ordered, median) == univariate.modified_z(values, median)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(st.none(), st.text(alphabet="ab\x00é 09", max_size=18)), max_size=40),
       st.integers(min_value=0, max_value=40))
def test_distinct_texts_counts_as_arrow_does(values: list[str | None], cut: int) -> None:
    array = pa.array(values, pa.string())
    chunked = pa.chunked_array([array.slice(0, cut), array.slice(cut)], pa.string())
    expected = pc.count_distinct(chunked).as_py()
    assert univariate.distinct_texts(chunked) == expected
    assert univariate.distinct_texts(array) == expected


def test_distinct_texts_of_codes_packed_into_one_number() -> None:
    codes = pa.array([f"V-{i}" for i in range(0, 200_000, 3)] * 2 + ["V-0000000001", "W", None], pa.string())
    assert univariate._packed_keys([w for w in univariate._text_words(codes)]) is not None
    assert univariate.distinct_texts(codes) == pc.count_distinct(codes).as_py()


def _with_missing(values: np.ndarray, rng: np.random.Generator, share: float) -> np.ndarray:
    values = values.astype(float)
    values[rng.random(values.size) < share] = np.nan
    return values


@pytest.mark.parametrize("integer", [False, True])
def test_spearman_from_each_columns_groups_equals_ranking_the_pairs_rows(integer: bool) -> None:
    rng = np.random.default_rng(RNG_SEED)
    n = 5000
    x = _with_missing(rng.integers(0, 40, n), rng, 0.1)
    y = _with_missing(np.round(np.nan_to_num(x) + rng.normal(0, 9, n)), rng, 0.05)
    z = _with_missing(rng.normal(size=n), rng, 0.0)
    bases = [pairs.RankBase.of(v, integer=integer) for v in (x, y)] + [pairs.RankBase.of(z)]
    for i, a in enumerate(bases):
        for b in bases[i + 1:]:
            rows = np.flatnonzero(a.valid & b.valid)
            assert pairs.spearman_pair(a, b) == pairs.spearman(a, b, rows)


@pytest.mark.parametrize("values", [
    np.round(np.random.default_rng(RNG_SEED).normal(50, 12, 3000), 3),  # counted: three decimals
    np.round(np.random.default_rng(RNG_SEED).random(3000), 4),
    np.round(np.random.default_rng(RNG_SEED).normal(0, 1, 3000), 1),  # holds -0.0: sorted
    np.random.default_rng(RNG_SEED).lognormal(0, 1, 3000),  # full precision: sorted
    np.round(np.random.default_rng(RNG_SEED).lognormal(10, 1, 3000), 2),  # too wide to count: packed keys
    np.array([1e300, 0.5, 2.0]),
])
def test_counting_decimals_builds_the_same_rank_base_as_sorting(values: np.ndarray,
                                                                monkeypatch: pytest.MonkeyPatch) -> None:
    values = values.copy()
    values[::17] = np.nan
    counted = pairs.RankBase.of(values)
    monkeypatch.setattr(pairs, "_decimal_scale", lambda present: None)
    ordered = pairs.RankBase.of(values)
    for name in ("valid", "sorted_values", "group_row", "group_counts", "centred", "missing_rows"):
        assert np.array_equal(getattr(counted, name), getattr(ordered, name)), name
    assert np.array_equal(np.signbit(counted.sorted_values), np.signbit(ordered.sorted_values))
    assert (counted.groups, counted.total, counted.total_squares) == (ordered.groups, ordered.total,
                                                                      ordered.total_squares)


@pytest.mark.parametrize("texts", [
    ["2020-01-05", "1600-01-01", "0000-02-29", "9999-12-31", "2000-02-29", None],
    ["2020-01-05", "2023-02-30"],  # strptime rolls it over to 1 March: the cast refuses, strptime decides
    ["2020-01-05", "2020-13-01", "2020-01-00", "1900-02-29"],
    ["2020-01-05", "2020-1-5", "2020-W01-1", "+020-01-05", "2020 01 05", " 2020-01-5"],
    [None, None],
])
def test_iso_dates_read_as_strptime_reads_them(texts: list[str | None]) -> None:
    strings = pa.chunked_array([pa.array(texts, pa.string())])
    expected = pc.cast(pc.strptime(strings, format="%Y-%m-%d", unit="s", error_is_null=True), pa.int64())
    found = cells.parse_dates(strings, None, "date")
    assert np.array_equal(found, cells.to_numpy(pc.cast(expected, pa.float64()), np.nan), equal_nan=True)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(st.none(), st.sampled_from(["a", "b", "", " ", "\u00a0", "NA", "-99", " a"])),
                max_size=40),
       st.lists(st.sampled_from(["NA", "-99", " ", "zz"]), max_size=3))
def test_missing_found_on_the_levels_equals_missing_found_on_the_rows(values: list[str | None],
                                                                      codes: list[str]) -> None:
    strings = pa.chunked_array([pa.array(values, pa.string())])
    plain = cells.find_missing(strings, codes)
    encoded = cells.Encoded.of(strings)
    found, level_codes, level_counts = cells.find_missing_encoded(encoded, codes)
    assert np.array_equal(found.mask, plain.mask)
    assert (found.blank, found.codes) == (plain.blank, plain.codes)
    levels, counts, expected_codes = univariate.level_counts(strings, plain.mask)
    assert np.array_equal(level_codes, expected_codes)
    found_levels, found_counts = univariate.level_counts_encoded(encoded, level_counts)
    assert found_levels == levels and np.array_equal(found_counts, counts)


@pytest.mark.parametrize("text", ["", " ", "\t", "\u00a0", "\u3000", " 1", "1 "])
def test_a_column_that_reads_as_numbers_has_no_blanks(text: str) -> None:
    # find_missing(blank_free=True) rests on Arrow refusing these as numbers
    assert cells.float_values(pa.chunked_array([pa.array(["1.5", text])])) is None


@settings(max_examples=100, deadline=None)
@given(st.lists(st.one_of(st.none(), st.integers(-5, 5)), max_size=30), st.integers(0, 30), st.integers(0, 5))
def test_to_numpy_fills_nulls_across_chunks_and_slices(values: list[int | None], cut: int, skip: int) -> None:
    for kind, fill in ((pa.float64(), np.nan), (pa.int32(), -1), (pa.bool_(), False)):
        array = pa.array([None if v is None else (v > 0 if kind == pa.bool_() else v) for v in values], kind)
        chunked = pa.chunked_array([array.slice(0, cut), array.slice(cut)], kind)
        for arrow in (chunked, array.slice(min(skip, len(array)))):
            expected = [fill if v is None else v for v in arrow.to_pylist()]
            found = cells.to_numpy(arrow, fill)
            assert found.flags.writeable and found.dtype == (bool if kind == pa.bool_() else found.dtype)
            assert np.array_equal(found, np.array(expected, dtype=found.dtype), equal_nan=kind == pa.float64())


def test_distribution_tails_load_without_the_package_and_leave_it_importable() -> None:
    """The compiled functions alone (in a fresh process): the same objects as scipy.special's, and
    scipy.special and scipy.stats import as usual afterwards."""
    import subprocess
    import sys

    code = (
        "import sys\n"
        "from studylog.data import significance\n"
        "tails = significance.tails()\n"
        "assert 'scipy.special' not in sys.modules, 'the whole package was imported'\n"
        "assert 'numpy.testing' not in sys.modules\n"
        "p = significance.chi_square(__import__('numpy').array([[10, 20], [30, 5]]))['p_value']\n"
        "from scipy import special, stats\n"
        "assert special.chdtrc is tails.chdtrc and special.fdtrc is tails.fdtrc\n"
        "assert p == stats.chi2_contingency([[10, 20], [30, 5]], correction=False).pvalue\n"
        "assert stats.shapiro([1.0, 2.0, 4.0, 7.0]).pvalue > 0\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr


@pytest.mark.parametrize("span", [10**9, 2**40, 2**60])
def test_whole_numbers_too_wide_to_count_are_ordered_as_an_argsort_orders_them(
        span: int, monkeypatch: pytest.MonkeyPatch) -> None:
    # beyond 2^53 - 1 the numbers are not all exact in a float64 and an argsort orders them
    values = np.random.default_rng(RNG_SEED).integers(0, span, 5000).astype(np.float64)
    values[::13] = np.nan
    values[5:40] = values[4]  # ties
    packed = pairs.RankBase.of(values, integer=True)
    monkeypatch.setattr(pairs, "_packed_sort", lambda *args: None)
    ordered = pairs.RankBase.of(values, integer=True)
    for name in ("valid", "sorted_values", "group_row", "group_counts", "centred", "missing_rows"):
        assert np.array_equal(getattr(packed, name), getattr(ordered, name)), name
    assert packed.groups == ordered.groups


@pytest.mark.parametrize("ties", [False, True])
def test_pair_ranks_from_the_columns_own_ranks_equal_those_counted_again(ties: bool,
                                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    # many tie groups, few rows dropped for the pair: the ranks come from the column's own less the
    # steps the dropped rows make (RankBase._pair_ranks_sparse); counted again, they must be the same
    from scipy import stats

    rng = np.random.default_rng(RNG_SEED)
    n = 4000
    x = rng.normal(size=n) if not ties else rng.integers(0, 8000, n) / 7  # ties: some 3,000 groups
    x[rng.random(n) < 0.03] = np.nan
    y = rng.normal(size=n) + np.nan_to_num(x)
    y[rng.random(n) < 0.01] = np.nan
    a, b = pairs.RankBase.of(x), pairs.RankBase.of(y)
    dropped = b.missing_rows[a.valid[b.missing_rows]]
    assert a.groups > pairs.SPARSE_GROUPS * dropped.size  # the sparse path is the one taken
    both = a.valid & b.valid
    assert pairs.pair_cases(a, b) == pairs.pair_cases(b, a) == int(np.count_nonzero(both))
    sparse_ranks, sparse_squares = a.pair_ranks(b)
    monkeypatch.setattr(pairs, "SPARSE_GROUPS", n * n)
    dense_ranks, dense_squares = a.pair_ranks(b)
    assert np.array_equal(sparse_ranks, dense_ranks)
    assert sparse_squares == pytest.approx(dense_squares, rel=1e-14)
    assert np.array_equal(sparse_ranks[both], stats.rankdata(x[both]))  # scipy's average ranks
    monkeypatch.undo()
    expected = stats.spearmanr(x[both], y[both]).statistic  # scipy as the reference
    assert pairs.spearman_pair(a, b) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("levels", [1, 3, pairs.INDICATOR_LEVELS, pairs.INDICATOR_LEVELS + 5])
def test_sums_by_level_equal_numpys_sums_over_each_levels_rows(levels: int) -> None:
    # matrix product with the indicators (few levels) or a weighted count (many): numpy's sum of the
    # rows of each level, missing rows (-1) in none
    rng = np.random.default_rng(RNG_SEED + levels)
    codes = rng.integers(-1, levels, 5000)
    values = rng.normal(3.0, 2.0, 5000)
    column = pairs.LevelColumn("g", codes, levels)
    expected = [values[codes == level].sum() for level in range(levels)]
    np.testing.assert_allclose(column.sums_by_level(values), expected, rtol=1e-12, atol=1e-9)
