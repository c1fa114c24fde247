"""profile_table: the contract's document, missing codes, levels, dates, target, pairs, suggestions."""

from __future__ import annotations

import json

import numpy as np
import pyarrow as pa
import pytest

from studylog.data.profile import profile_table
from studylog.data.spec import Code, VariableSpec
from studylog.errors import UsageError


def _table(columns: dict[str, list[object]]) -> pa.Table:
    return pa.table({name: pa.array([None if v is None else str(v) for v in values], pa.string())
                     for name, values in columns.items()})


@pytest.fixture(scope="module")
def invented() -> tuple[pa.Table, dict[str, VariableSpec]]:
    """Invented demo data: 400 rows with planted features (codes, variants, a rare class, a redundant pair)."""
    rng = np.random.default_rng(7)
    n = 400
    income = np.round(rng.normal(50_000, 8_000, n)).astype(int).astype(object)
    income[:6] = -99
    income[6:9] = None
    income[9] = 900_000  # far beyond the outer fence
    score = rng.normal(10, 2, n)
    sex = rng.choice(["male", "female"], n).astype(object)
    sex[:5] = "Male"
    sex[5:8] = "female "
    churned = np.where(rng.random(n) < 0.1, "yes", "no").astype(object)
    days = (np.datetime64("2024-01-01") + rng.integers(0, 90, n)).astype(str).astype(object)
    columns = {
        "income": income.tolist(), "score": np.round(score, 3).tolist(),
        "score_twice": np.round(score * 2 + rng.normal(0, 0.01, n), 3).tolist(),
        "sex": sex.tolist(), "churned": churned.tolist(), "visit": days.tolist(),
        "flag": ["1"] * (n - 3) + ["0"] * 3,
        "cancel_reason": [("moved" if c == "yes" else "none") for c in churned],
    }
    specs = {
        "income": VariableSpec("income", "integer", missing_codes=(Code("-99", "refused"),), minimum="0"),
        "score": VariableSpec("score", "number"), "score_twice": VariableSpec("score_twice", "number"),
        "sex": VariableSpec("sex", "categorical"), "churned": VariableSpec("churned", "categorical"),
        "visit": VariableSpec("visit", "date"), "flag": VariableSpec("flag", "boolean"),
        "cancel_reason": VariableSpec("cancel_reason", "categorical"),
    }
    return _table(columns), specs


@pytest.fixture(scope="module")
def document(invented: tuple[pa.Table, dict[str, VariableSpec]]) -> dict:
    table, specs = invented
    return profile_table(table, specs, target="churned", by="sex")


def test_document_has_the_contract_keys_and_is_strict_json(document: dict) -> None:
    for key in ("rows", "columns", "variables", "target", "correlations", "associations", "suggestions"):
        assert key in document
    json.dumps(document, allow_nan=False)  # NaN is never emitted
    numeric = next(v for v in document["variables"] if v["name"] == "score")
    for key in ("name", "type", "count", "missing", "distinct", "min", "q1", "median", "q3", "max", "mean",
                "sd", "skewness", "outliers", "missing_codes", "near_zero_variance"):
        assert key in numeric
    assert set(numeric["outliers"]) >= {"tukey", "tukey_far", "modified_z"}
    assert numeric["outliers"]["tukey_far"] <= numeric["outliers"]["tukey"]


def test_missing_codes_are_missing_not_values(document: dict) -> None:
    income = next(v for v in document["variables"] if v["name"] == "income")
    assert income["missing_codes"] == [{"code": "-99", "count": 6, "declared": True}]
    assert income["missing"] == 9 and income["count"] == 391
    assert income["min"] > 0  # -99 never enters the statistics
    assert income["outliers"]["tukey_far"] == 1
    topics = {(s["variable"], s["topic"]) for s in document["suggestions"]}
    assert ("income", "missing-data") in topics and ("income", "outlier") in topics
    # a declared code is not suggested as a sentinel
    assert ("income", "sentinel-code") not in topics


def test_case_variants_and_near_zero_variance(document: dict) -> None:
    sex = next(v for v in document["variables"] if v["name"] == "sex")
    assert sorted(map(sorted, sex["variants"])) == [["Male", "male"], ["female", "female "]]
    flag = next(v for v in document["variables"] if v["name"] == "flag")
    assert flag["near_zero_variance"] is True
    assert (flag["minority_count"], flag["minority_share"]) == (3, 3 / 400)
    topics = [s["topic"] for s in document["suggestions"] if s["variable"] in ("sex", "flag")]
    assert topics.count("case-variant") == 2 and "near-zero-variance" in topics


def test_dates_range_granularity_and_gaps(document: dict) -> None:
    visit = next(v for v in document["variables"] if v["name"] == "visit")
    assert visit["granularity"] == "day"
    assert visit["min"] >= "2024-01-01" and visit["max"] <= "2024-03-30"
    gaps = visit["gaps"]
    assert gaps["periods"] - gaps["periods_without_data"] == visit["distinct"]


def test_target_classes_imbalance_and_leakage(document: dict) -> None:
    target = document["target"]
    counts = {c["value"]: c["count"] for c in target["classes"]}
    assert target["imbalance_ratio"] == pytest.approx(counts["no"] / counts["yes"])
    assert sum(c["share"] for c in target["classes"]) == pytest.approx(1.0)
    assert {"variable": "cancel_reason", "topic": "possible-leakage"}.items() <= next(
        s for s in document["suggestions"] if s["topic"] == "possible-leakage").items()
    assert any(s["topic"] == "class-imbalance" for s in document["suggestions"])


def test_strong_pair_names_the_one_to_consider(document: dict) -> None:
    pair = next(p for p in document["correlations"] if {p["a"], p["b"]} == {"score", "score_twice"})
    assert pair["strong"] and pair["pearson"] > 0.99
    # equal missing values: the tie-break is the larger mean absolute correlation with other inputs
    assert pair["consider"] in ("score", "score_twice")
    redundant = [s for s in document["suggestions"] if s["topic"] == "redundant-pair"]
    assert len(redundant) == 1 and redundant[0]["command"].startswith("studylog log ")


def test_suggestions_never_say_delete(document: dict) -> None:
    assert document["suggestions"]
    for item in document["suggestions"]:
        text = (item["message"] + " " + item["command"]).lower()
        assert "delete" not in text and "drop " not in text
        assert item["command"].startswith(("studylog log ", "studylog ask "))


def test_group_comparisons_are_holm_adjusted(document: dict) -> None:
    groups = document["groups"]
    assert groups["by"] == "sex"
    for entry in groups["comparisons"]:
        assert entry["anova"]["p_holm"] >= entry["anova"]["p_unadjusted"]
        assert entry["kruskal_wallis"]["p_holm"] >= entry["kruskal_wallis"]["p_unadjusted"]


def test_pairs_need_ten_complete_cases() -> None:
    table = _table({"a": list(range(12)), "b": [1, 2, 3, 4, 5, 6, 7, 8, 9, None, None, None]})
    specs = {"a": VariableSpec("a", "integer"), "b": VariableSpec("b", "integer")}
    (pair,) = profile_table(table, specs)["correlations"]
    assert pair["n"] == 9 and pair["pearson"] is None and pair["spearman"] is None


def test_invalid_values_are_counted_not_parsed() -> None:
    table = _table({"x": ["1", "2", "two", "3.5", " 4 ", None]})
    document = profile_table(table, {"x": VariableSpec("x", "integer")})
    (x,) = document["variables"]
    assert x["invalid"] == 2 and x["missing"] == 1
    assert x["count"] == 5 and x["max"] == 4.0  # spaces around numbers are ignored
    assert "two" in x["invalid_examples"]


def test_imbalance_ratio_is_null_with_one_class() -> None:
    table = _table({"y": ["a"] * 20})
    document = profile_table(table, {"y": VariableSpec("y", "categorical")}, target="y")
    assert document["target"]["imbalance_ratio"] is None


def test_kendall_tau_b_for_ordinal_pairs_and_cramers_v_counts_missing() -> None:
    rng = np.random.default_rng(3)
    a = rng.integers(1, 6, 300)
    b = np.clip(a + rng.integers(-1, 2, 300), 1, 5).astype(object)
    b[:10] = None
    table = _table({"a": a.tolist(), "b": b.tolist()})
    specs = {"a": VariableSpec("a", "ordinal"), "b": VariableSpec("b", "ordinal")}
    (pair,) = profile_table(table, specs)["associations"]
    assert pair["n"] == 290 and pair["missing_excluded"] == 10
    assert pair["kendall_tau_b"] > 0.5
    assert 0 <= pair["cramers_v_corrected"] <= pair["cramers_v"] <= 1


def test_unknown_target_is_a_usage_error() -> None:
    with pytest.raises(UsageError, match="--target"):
        profile_table(_table({"x": ["1"]}), {"x": VariableSpec("x", "integer")}, target="nope")


def test_arrow_to_numpy_keeps_offsets_and_fills_nulls() -> None:
    from studylog.data.cells import to_numpy

    floats = pa.chunked_array([pa.array([1.5, None, 3.0]), pa.array([None, 5.0, 6.0, 7.0]).slice(1, 2)])
    assert to_numpy(floats, np.nan).tolist()[:1] == [1.5]
    assert np.array_equal(to_numpy(floats, np.nan), np.array([1.5, np.nan, 3.0, 5.0, 6.0]), equal_nan=True)
    flags = pa.array([True, None, False, True, True, False, True, False, True, None]).slice(3, 6)
    assert to_numpy(flags, False).tolist() == [True, True, False, True, False, True]
    codes = pa.array([7, None, 9], pa.int32())
    assert to_numpy(codes, -1).tolist() == [7, -1, 9]


@pytest.mark.parametrize("stray_quote", [False, True])
def test_columns_worked_out_while_the_file_is_read_change_nothing(tmp_path, monkeypatch: pytest.MonkeyPatch,
                                                                  stray_quote: bool) -> None:
    from studylog import profiling
    from studylog.data import early as early_work
    from studylog.data import read_whole

    monkeypatch.setattr(read_whole, "WHOLE_BLOCK", 1 << 10)  # many batches
    rng = np.random.default_rng(7)
    rows = [f"{i},{rng.normal():.3f},{'' if i % 13 == 0 else rng.integers(0, 9)},g{i % 3},"
            f"{'' if i % 17 == 0 else f'2024-03-{1 + i % 28:02d}'},{'' if i % 11 == 0 else 'ab'[i % 2]}"
            for i in range(3000)]
    rows[2500] = "2500,1.5,x,g1,2024-02-30,b"  # a text that is no number, a day that does not exist
    if stray_quote:
        rows[5] = '5,1.5,x"y,g2,2024-01-01,a'  # an odd number of quotes: the whole-file read is given up
    path = tmp_path / "x.csv"
    path.write_text("id,x,n,g,day,flag\n" + "\n".join(rows) + "\n")
    early = profiling.profile_file(path, target="g")
    monkeypatch.setattr(early_work.EarlyColumns, "add", lambda self, batches, mapper=map: None)
    assert json.dumps(early, sort_keys=True) == json.dumps(profiling.profile_file(path, target="g"), sort_keys=True)


def test_leakage_eta_squared_on_the_pairs_complete_cases() -> None:
    # eta^2 of a numeric input by a class target, both with missing cells, against scipy's one-way
    # ANOVA on the rows where both are present (eta^2 = F df_b / (F df_b + df_w), by its definition)
    from scipy import stats

    rng = np.random.default_rng(7)
    n = 3000
    classes = rng.choice(["no", "yes", "maybe"], n)
    shift = {"no": 0.0, "yes": 8.0, "maybe": 16.0}
    values = np.array([shift[c] for c in classes]) + rng.normal(50.0, 1.0, n)
    value_text = np.round(values, 3).astype(str).astype(object)
    value_text[rng.choice(n, 90, replace=False)] = None
    class_text = classes.astype(object)
    class_text[rng.choice(n, 70, replace=False)] = None
    table = pa.table({"dose": pa.array(value_text, pa.string()), "outcome": pa.array(class_text, pa.string())})
    specs = {"dose": VariableSpec(name="dose", type="number"),
             "outcome": VariableSpec(name="outcome", type="categorical")}
    found = profile_table(table, specs, target="outcome")
    both = (value_text != None) & (class_text != None)  # noqa: E711 - elementwise on an object array
    kept = np.array([float(v) for v in value_text[both]])
    groups = class_text[both]
    result = stats.f_oneway(*(kept[groups == c] for c in ("no", "yes", "maybe")))
    df_between, df_within = 2, int(both.sum()) - 3
    expected = result.statistic * df_between / (result.statistic * df_between + df_within)
    entry = next(item for item in found["leakage"] if item["variable"] == "dose")
    assert entry["measure"] == "eta_squared"
    assert entry["value"] == pytest.approx(expected, rel=1e-9)
