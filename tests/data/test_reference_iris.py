"""The profile of Fisher's iris data against what its bundled description publishes.

Source: scikit-learn's bundled copy (``sklearn.datasets.load_iris``; nothing is downloaded) and the
summary table in its ``DESCR`` text (Fisher, R. A. (1936), Annals of Eugenics 7(2), 179-188). The
description rounds to two decimals (sepal width's mean 3.0573 is printed 3.05 in this version, 3.06 in
some), so means and sds are compared with a tolerance of 0.01, minima and maxima exactly.
"""

from __future__ import annotations

import re

import pyarrow as pa
import pytest
from sklearn import datasets as sklearn_datasets

from studylog.data.profile import profile_table
from studylog.data.spec import VariableSpec

COLUMNS = ["sepal length", "sepal width", "petal length", "petal width"]


def _published() -> dict[str, dict[str, float]]:
    """The DESCR summary rows: 'sepal length:   4.3  7.9   5.84   0.83    0.7826'."""
    text = sklearn_datasets.load_iris().DESCR
    found = {}
    for name in COLUMNS:
        match = re.search(rf"{name}:\s+([\d.]+)\s+([\d.]+)\s+([\d.]+)\s+([\d.]+)", text)
        assert match, f"{name} not in DESCR"
        low, high, mean, sd = (float(g) for g in match.groups())
        found[name] = {"min": low, "max": high, "mean": mean, "sd": sd}
    return found


@pytest.fixture(scope="module")
def iris_profile() -> dict:
    data = sklearn_datasets.load_iris()
    columns = {name: pa.array([repr(float(v)) for v in data.data[:, i]], pa.string())
               for i, name in enumerate(COLUMNS)}
    columns["species"] = pa.array([str(data.target_names[t]) for t in data.target], pa.string())
    specs = {name: VariableSpec(name, "number") for name in COLUMNS}
    specs["species"] = VariableSpec("species", "categorical", role="target")
    return profile_table(pa.table(columns), specs, target="species", by="species")


def test_shape_and_class_counts(iris_profile: dict) -> None:
    # DESCR: "Number of Instances: 150 (50 in each of three classes)", 4 numeric attributes + class
    assert (iris_profile["rows"], iris_profile["columns"]) == (150, 5)
    classes = {c["value"]: c["count"] for c in iris_profile["target"]["classes"]}
    assert classes == {"setosa": 50, "versicolor": 50, "virginica": 50}
    assert iris_profile["target"]["imbalance_ratio"] == 1.0
    assert all(c["share"] == pytest.approx(1 / 3) for c in iris_profile["target"]["classes"])


def test_means_sds_and_ranges_match_the_description(iris_profile: dict) -> None:
    published = _published()
    assert published["sepal width"]["mean"] in (3.05, 3.06)
    variables = {v["name"]: v for v in iris_profile["variables"]}
    for name, expected in published.items():
        found = variables[name]
        assert found["count"] == 150 and found["missing"] == 0
        assert found["min"] == expected["min"] and found["max"] == expected["max"]
        assert found["mean"] == pytest.approx(expected["mean"], abs=0.01)
        assert found["sd"] == pytest.approx(expected["sd"], abs=0.01)


def test_petal_measures_differ_strongly_by_species(iris_profile: dict) -> None:
    # DESCR's "Class Correlation" marks petal length and width "(high!)"; the group comparison agrees
    comparisons = {c["variable"]: c for c in iris_profile["groups"]["comparisons"]}
    for name in ("petal length", "petal width"):
        assert comparisons[name]["anova"]["eta_squared"] > 0.9
        assert comparisons[name]["anova"]["p_holm"] < 1e-10
        assert comparisons[name]["kruskal_wallis"]["p_holm"] < 1e-10
    # petal length and width correlate strongly (r = 0.963, from memory): flagged as a strong pair
    pair = next(p for p in iris_profile["correlations"] if {p["a"], p["b"]} == {"petal length", "petal width"})
    assert pair["pearson"] == pytest.approx(0.963, abs=0.001) and pair["strong"]
    # nearly determined by the target: a leakage suggestion asks when they were measured
    leaking = {item["variable"] for item in iris_profile["leakage"]}
    assert {"petal length", "petal width"} <= leaking
