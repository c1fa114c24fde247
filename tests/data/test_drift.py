"""Drift between stored profiles: PSI against its definition, a hand-computed example, the noise floor,
merged tied edges, known shifts, new and vanished levels."""

from __future__ import annotations

import math

import numpy as np
import pyarrow as pa
import pytest
from scipy.stats import entropy

from studylog.data import drift
from studylog.data.spec import Code, VariableSpec
from studylog.data.summary import ColumnSummary


def profile(values: list[str | None], spec: VariableSpec) -> dict:
    summary = ColumnSummary(spec)
    array = pa.array(values, pa.string())
    for start in range(0, len(array), 65_536):
        summary.update(array.slice(start, 65_536))
    return summary.to_dict()


NUMBER = VariableSpec(name="x", type="number")
INTEGER = VariableSpec(name="age", type="integer", missing_codes=(Code("-99"),))


def test_psi_is_the_symmetrised_kullback_leibler_divergence() -> None:
    # definition (DESIGN.md): PSI(A, E) = KL(A||E) + KL(E||A); scipy.stats.entropy(p, q) is KL(p||q)
    rng = np.random.default_rng(3)
    for _ in range(20):
        e = rng.dirichlet(np.ones(8))
        a = rng.dirichlet(np.ones(8))
        assert drift.psi(e.tolist(), a.tolist()) == pytest.approx(entropy(a, e) + entropy(e, a))
    same = rng.dirichlet(np.ones(5)).tolist()
    assert drift.psi(same, same) == 0.0


def test_psi_hand_computed() -> None:
    # earlier shares 0.2, 0.3, 0.5; later 0.3, 0.3, 0.4 (worked by hand):
    #   (0.3 - 0.2) ln(0.3/0.2) = 0.1 x 0.405465 = 0.0405465
    #   (0.3 - 0.3) ln(1)       = 0
    #   (0.4 - 0.5) ln(0.4/0.5) = -0.1 x -0.223144 = 0.0223144
    #   PSI = 0.0628609
    assert drift.psi([0.2, 0.3, 0.5], [0.3, 0.3, 0.4]) == pytest.approx(0.0628609, abs=1e-7)
    # an empty bin takes the stated constant 0.0001: (0.0001 - 0.1) ln(0.0001 / 0.1) + 0 for the rest
    assert drift.psi([0.1, 0.9], [0.0, 0.9]) == pytest.approx((0.0001 - 0.1) * math.log(0.0001 / 0.1))


def test_noise_floor_on_two_samples_of_one_distribution() -> None:
    # n1 n2 / (n1 + n2) * PSI is asymptotically chi-square with B - 1 degrees of freedom for two samples
    # of one distribution (Yurdakul 2018), so its mean is (B - 1)(1/n1 + 1/n2): the noise floor.
    rng = np.random.default_rng(2024)
    n1, n2, bins = 4_000, 6_000, 10
    values = []
    for _ in range(200):
        earlier, later = rng.normal(size=n1), rng.normal(size=n2)
        edges = np.quantile(earlier, np.arange(1, 10) / 10)
        counts = [np.bincount(np.searchsorted(edges, x, side="left"), minlength=bins) / len(x)
                  for x in (earlier, later)]
        values.append(drift.psi(counts[0].tolist(), counts[1].tolist()))
    floor = drift.noise_floor(bins, n1, n2)
    assert floor == pytest.approx(9 * (1 / 4_000 + 1 / 6_000))
    assert np.mean(values) == pytest.approx(floor, rel=0.15)


def test_tied_deciles_are_merged_on_heaped_data() -> None:
    # ages reported to the nearest 5 years ("heaping"): numpy's deciles repeat, and the bins are the
    # distinct deciles with open end bins
    rng = np.random.default_rng(5)
    ages = (np.round(rng.normal(45, 8, 3_000) / 5) * 5).astype(int)
    earlier = profile([str(a) for a in ages], INTEGER)
    expected = sorted(set(np.quantile(ages, np.arange(1, 10) / 10).tolist()))
    assert len(expected) < 9
    assert drift.decile_edges(earlier) == expected
    later = profile([str(a) for a in ages[::-1]], INTEGER)
    result = drift.variable_drift(earlier, later)
    assert result["bins"] == len(expected) + 1  # no missing values, so no missing bin
    assert result["exact"] is True and result["value"] == pytest.approx(0.0, abs=1e-12)
    # exact shares against numpy: the bin counts of the earlier drop at its own edges
    shares, exact = drift.numeric_shares(earlier, expected)
    reference = np.bincount(np.searchsorted(expected, ages, side="left"), minlength=len(expected) + 1)
    assert exact and shares[:-1] == pytest.approx((reference / len(ages)).tolist())


def test_known_shift_is_shifted_and_no_shift_is_stable() -> None:
    rng = np.random.default_rng(17)
    base = profile([repr(float(v)) for v in rng.normal(50, 10, 20_000)], NUMBER)
    same = profile([repr(float(v)) for v in rng.normal(50, 10, 20_000)], NUMBER)
    moved = profile([repr(float(v)) for v in rng.normal(60, 10, 20_000)], NUMBER)
    stable = drift.variable_drift(base, same)
    shifted = drift.variable_drift(base, moved)
    assert stable["band"] == "stable" and stable["value"] < 0.02
    # a shift of one sd: the symmetrised KL divergence of N(0,1) and N(1,1) is 1; binned at deciles
    # somewhat less (binning can only lose divergence)
    assert shifted["band"] == "shifted" and 0.6 < shifted["value"] <= 1.0
    assert shifted["smd"] == pytest.approx(1.0, abs=0.05)
    assert shifted["n_earlier"] == shifted["n_later"] == 20_000


def test_missing_share_and_codes_and_too_few_rows() -> None:
    earlier = profile(["1", "2", "-99", "", "3"] * 2, INTEGER)
    later = profile(["1", "-99", "-99", "-99", "3"] * 2, INTEGER)
    result = drift.variable_drift(earlier, later)
    assert result["missing_share_earlier"] == 0.4 and result["missing_share_later"] == 0.6
    assert result["missing_share_change"] == pytest.approx(0.2)
    assert result["missing_codes"] == [{"code": "-99", "share_earlier": 0.2, "share_later": 0.6,
                                        "change": 0.4}]
    assert result["band"] == "too few rows"  # noise floor (B - 1)(1/10 + 1/10) >= 0.1


def test_new_and_vanished_levels() -> None:
    spec = VariableSpec(name="plan", type="categorical")
    earlier = profile(["basic"] * 500 + ["plus"] * 400 + ["legacy"] * 100, spec)
    later = profile(["basic"] * 500 + ["plus"] * 300 + ["gold"] * 200, spec)
    result = drift.variable_drift(earlier, later)
    assert result["new_levels"] == ["gold"] and result["vanished_levels"] == ["legacy"]
    # by hand, bins basic, plus, legacy, gold (other and missing are empty in both and dropped):
    # 0 + (0.3-0.4)ln(0.75) + (0.0001-0.1)ln(0.001) + (0.2-0.0001)ln(2000)
    expected = (-0.1 * math.log(0.75) + (0.0001 - 0.1) * math.log(0.0001 / 0.1)
                + (0.2 - 0.0001) * math.log(0.2 / 0.0001))
    assert result["value"] == pytest.approx(expected, abs=1e-6)
    assert result["bins"] == 4 and result["band"] == "shifted"


def test_dates_and_withheld_text_have_no_psi() -> None:
    spec = VariableSpec(name="seen", type="date")
    result = drift.variable_drift(profile(["2024-01-01"] * 3, spec), profile(["2024-02-01"] * 3, spec))
    assert result["value"] is None and result["band"] is None and "note" in result
    comparison = drift.compare_profiles({"a": profile(["1"], NUMBER)}, {"b": profile(["1"], NUMBER)})
    assert comparison["only_earlier"] == ["a"] and comparison["only_later"] == ["b"]
