"""The profile's statistics against numpy and scipy as reference implementations, on seeded data."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from studylog.data import pairs, significance, univariate

RNG_SEED = 20240611


def _with_missing(values: np.ndarray, rng: np.random.Generator, share: float) -> np.ndarray:
    out = values.astype(float).copy()
    out[rng.random(out.size) < share] = np.nan
    return out


@pytest.mark.parametrize("n", [1, 2, 7, 100, 1001])
def test_type_7_quantiles_match_numpy(n: int) -> None:
    rng = np.random.default_rng(RNG_SEED + n)
    values = np.sort(rng.normal(size=n))
    p = np.linspace(0, 1, 41)
    # numpy.quantile, default method "linear" = Hyndman & Fan type 7
    assert np.allclose(univariate.quantile_type7(values, p), np.quantile(values, p), rtol=0, atol=1e-12)


def test_moments_match_scipy_with_bias_correction() -> None:
    rng = np.random.default_rng(RNG_SEED)
    values = rng.gamma(2.0, 3.0, size=997)
    found = univariate.moments(values)
    # scipy.stats.skew/kurtosis with bias=False are G1 and G2; sd with ddof=1
    assert found["mean"] == pytest.approx(np.mean(values), rel=1e-12)
    assert found["sd"] == pytest.approx(np.std(values, ddof=1), rel=1e-12)
    assert found["skewness"] == pytest.approx(stats.skew(values, bias=False), rel=1e-10)
    assert found["kurtosis"] == pytest.approx(stats.kurtosis(values, bias=False), rel=1e-10)


def test_pearson_on_each_pairs_complete_cases_matches_scipy() -> None:
    rng = np.random.default_rng(RNG_SEED)
    n = 3000
    base = rng.normal(size=n)
    raw = [base * 5 + 100, base + rng.normal(size=n), rng.normal(size=n) * 1e-3 + 1e6, -base]
    columns = [_with_missing(c, rng, share) for c, share in zip(raw, (0.05, 0.2, 0.0, 0.5))]
    bases = [pairs.RankBase.of(c) for c in columns]
    r, counts = pairs.pearson_matrix(bases)
    for i in range(len(columns)):
        for j in range(i + 1, len(columns)):
            both = ~np.isnan(columns[i]) & ~np.isnan(columns[j])
            assert counts[i, j] == both.sum()
            # scipy.stats.pearsonr on the pair's complete cases
            expected = stats.pearsonr(columns[i][both], columns[j][both]).statistic
            assert r[i, j] == pytest.approx(expected, abs=1e-9)


def test_spearman_with_ties_and_missing_values_matches_scipy() -> None:
    rng = np.random.default_rng(RNG_SEED)
    n = 2000
    x = rng.integers(0, 12, n).astype(float)  # many ties
    y = np.round(x + rng.normal(0, 3, n), 0)  # ties too
    x = _with_missing(x, rng, 0.1)
    y = _with_missing(y, rng, 0.15)
    both = ~np.isnan(x) & ~np.isnan(y)
    rows = np.flatnonzero(both)
    for integer in (False, True):
        bx, by = pairs.RankBase.of(x, integer=integer), pairs.RankBase.of(y, integer=integer)
        found = pairs.spearman(bx, by, rows)
        # scipy.stats.spearmanr on the complete cases (it ranks them, average ranks for ties)
        expected = stats.spearmanr(x[both], y[both]).statistic
        assert found == pytest.approx(expected, abs=1e-12)
    # ranks on the pair's complete cases differ from ranks taken on each column's own values
    naive = stats.pearsonr(stats.rankdata(x[~np.isnan(x)])[both[~np.isnan(x)]],
                           stats.rankdata(y[~np.isnan(y)])[both[~np.isnan(y)]]).statistic
    assert naive == pytest.approx(expected, abs=1e-3)
    assert naive != pytest.approx(expected, abs=1e-12)


def test_subset_ranks_match_scipy_rankdata() -> None:
    rng = np.random.default_rng(RNG_SEED)
    values = rng.choice([1.5, 2.0, 2.0, 7.0, np.nan, 3.25], size=500)
    base = pairs.RankBase.of(values)
    rows = np.flatnonzero(~np.isnan(values) & (rng.random(500) < 0.6))
    ranks, tie_sum = base.ranks(rows)
    # scipy.stats.rankdata(method="average") on the chosen rows alone
    assert np.allclose(ranks, stats.rankdata(values[rows]))
    _, t = np.unique(values[rows], return_counts=True)
    assert tie_sum == float((t.astype(float) ** 3 - t).sum())


def test_kendall_tau_b_from_a_table_matches_scipy() -> None:
    rng = np.random.default_rng(RNG_SEED)
    a = rng.integers(0, 5, 800)
    b = np.clip(a + rng.integers(-2, 3, 800), 0, 6)
    table = significance.contingency(a, b, 5, 7)
    # scipy.stats.kendalltau, variant "b" (its default), on the raw pairs
    expected = stats.kendalltau(a, b, variant="b").statistic
    assert significance.kendall_tau_b(table) == pytest.approx(expected, abs=1e-12)


def test_chi_square_and_cramers_v_match_scipy() -> None:
    rng = np.random.default_rng(RNG_SEED)
    a = rng.integers(0, 3, 600)
    b = (a + rng.integers(0, 2, 600)) % 4
    table = significance.contingency(a, b, 3, 4)
    found = significance.chi_square(table)
    # scipy.stats.chi2_contingency without Yates' correction
    statistic, p_value, dof, _expected = stats.chi2_contingency(table, correction=False)
    assert found["chi2"] == pytest.approx(statistic, rel=1e-12)
    assert found["p_value"] == pytest.approx(p_value, rel=1e-9, abs=1e-300)
    assert found["df"] == dof
    v, v_corrected = significance.cramers_v(found)
    # scipy.stats.contingency.association, method "cramer" (no correction)
    assert v == pytest.approx(stats.contingency.association(table, method="cramer"), rel=1e-12)
    # Bergsma (2013): phi2~ = max(0, phi2 - (r-1)(c-1)/(n-1)), r~ = r - (r-1)^2/(n-1), ...
    n, r, c = 600, 3, 4
    phi2 = statistic / n
    expected = np.sqrt(max(0.0, phi2 - (r - 1) * (c - 1) / (n - 1))
                       / min(r - (r - 1) ** 2 / (n - 1) - 1, c - (c - 1) ** 2 / (n - 1) - 1))
    assert v_corrected == pytest.approx(expected, rel=1e-12)
    assert 0 <= v_corrected < v


def test_cramers_v_is_null_when_the_table_collapses() -> None:
    # one row left after dropping empty rows: V is undefined (DESIGN.md: null)
    assert significance.cramers_v(significance.chi_square(np.array([[5, 7, 0], [0, 0, 0]]))) == (None, None)


def test_anova_matches_scipy_f_oneway() -> None:
    rng = np.random.default_rng(RNG_SEED)
    groups = rng.integers(0, 4, 400)
    values = rng.normal(size=400) + groups * 0.3
    found = significance.anova(groups, values, 4)
    expected = stats.f_oneway(*(values[groups == g] for g in range(4)))
    assert found["f"] == pytest.approx(expected.statistic, rel=1e-10)
    assert found["p_unadjusted"] == pytest.approx(expected.pvalue, rel=1e-8)
    # eta^2 = SS_between / SS_total, by its definition
    grand = values.mean()
    between = sum((groups == g).sum() * (values[groups == g].mean() - grand) ** 2 for g in range(4))
    assert found["eta_squared"] == pytest.approx(between / ((values - grand) ** 2).sum(), rel=1e-10)


def test_anova_of_sums_matches_scipy_f_oneway() -> None:
    # the same test from each group's size and sum and the sum of squares (values centred first)
    rng = np.random.default_rng(RNG_SEED)
    groups = rng.integers(0, 4, 400)
    values = rng.normal(loc=50.0, size=400) + groups * 0.3
    centred = values - values.mean()
    found = significance.anova_of_sums(np.bincount(groups, minlength=5),
                                       np.bincount(groups, weights=centred, minlength=5), float(centred @ centred))
    expected = stats.f_oneway(*(values[groups == g] for g in range(4)))
    assert found["f"] == pytest.approx(expected.statistic, rel=1e-10)
    assert found["p_unadjusted"] == pytest.approx(expected.pvalue, rel=1e-8)
    assert (found["df_between"], found["df_within"]) == (3, 396)  # the empty fifth group is no group
    assert significance.anova_of_sums(np.array([3, 4]), np.array([0.0, 0.0]), 0.0) is None  # constant


def test_kruskal_wallis_with_ties_matches_scipy() -> None:
    rng = np.random.default_rng(RNG_SEED)
    groups = rng.integers(0, 3, 300)
    values = np.round(rng.normal(size=300) + groups * 0.2, 1)  # ties
    base = pairs.RankBase.of(values)
    rows = np.arange(300)
    ranks, tie_sum = base.ranks(rows)
    found = significance.kruskal_wallis(groups, ranks, 3, tie_sum)
    expected = stats.kruskal(*(values[groups == g] for g in range(3)))
    assert found["h"] == pytest.approx(expected.statistic, rel=1e-10)
    assert found["p_unadjusted"] == pytest.approx(expected.pvalue, rel=1e-8)
    # epsilon^2 = H / ((n^2 - 1) / (n + 1)) (Tomczak & Tomczak 2014)
    assert found["epsilon_squared"] == pytest.approx(expected.statistic / ((300**2 - 1) / 301), rel=1e-12)


def test_dagostino_pearson_matches_scipy_normaltest() -> None:
    rng = np.random.default_rng(RNG_SEED)
    for values in (rng.normal(size=6000), rng.exponential(size=8000), rng.uniform(size=5001)):
        statistic, p_value = significance.dagostino_pearson(values)
        expected = stats.normaltest(values)
        assert statistic == pytest.approx(expected.statistic, rel=1e-9)
        assert p_value == pytest.approx(expected.pvalue, rel=1e-6, abs=1e-300)


def test_normality_uses_shapiro_wilk_up_to_5000_and_dagostino_above() -> None:
    rng = np.random.default_rng(RNG_SEED)
    small = rng.normal(size=200)
    result = univariate.normality(small, 0.0, 0.0)
    assert result["test"] == "shapiro-wilk"
    assert result["p_value"] == pytest.approx(stats.shapiro(small).pvalue, rel=1e-9)
    large = rng.exponential(size=5001)
    found = univariate.moments(large)
    result = univariate.normality(large, found["skewness"], found["kurtosis"])
    assert result["test"] == "dagostino-pearson" and "large n" in result["caution"]
    # from G1 and G2 back to the biased moments: the same K^2 as scipy.stats.normaltest
    assert result["statistic"] == pytest.approx(stats.normaltest(large).statistic, rel=1e-9)
    assert univariate.normality(small[:2], 0.0, 0.0) is None


def test_holm_adjustment_by_hand() -> None:
    # Holm (1979): sort p ascending, multiply the i-th smallest by (m - i + 1), keep the running
    # maximum, cap at 1. By hand for 0.01, 0.04, 0.03, 0.005 (m = 4):
    #   0.005 x 4 = 0.02; 0.01 x 3 = 0.03; 0.03 x 2 = 0.06; 0.04 x 1 = 0.04 -> running max 0.06
    adjusted = significance.holm([0.01, 0.04, 0.03, 0.005, None])
    assert adjusted[:4] == pytest.approx([0.03, 0.06, 0.06, 0.02])
    assert adjusted[4] is None
    assert significance.holm([0.5, 0.6]) == pytest.approx([1.0, 1.0])


def test_histogram_counts_match_numpy() -> None:
    rng = np.random.default_rng(RNG_SEED)
    values = np.sort(rng.normal(size=5000))
    found = univariate.histogram(values, integer=False, iqr=float(np.subtract(*np.quantile(values, [0.75, 0.25]))))
    # numpy.histogram with the same edges (half-open bins, the last one closed)
    counts, _ = np.histogram(values, bins=np.array(found["edges"]))
    assert found["counts"] == counts.tolist()
    assert sum(found["counts"]) == 5000
