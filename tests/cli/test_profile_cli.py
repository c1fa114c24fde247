"""``studylog profile`` through the command line: with and without a study, JSON and tables, errors."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

ROWS = [
    "member,age,income,sex,renewed,joined",
    *[
        f"M{i:03d},{20 + (i * 7) % 50},{-99 if i % 17 == 0 else 30000 + (i * 613) % 40000},"
        f"{['male', 'female', 'Male', 'female '][i % 4] if i % 9 else 'female'},"
        f"{'yes' if i % 5 == 0 else 'no'},2024-{1 + i % 12:02d}-{1 + i % 28:02d}"
        for i in range(1, 121)
    ],
]


@pytest.fixture
def members(tmp_path: Path) -> Path:
    path = tmp_path / "members.csv"
    path.write_text("\n".join(ROWS) + "\n", encoding="utf-8")
    return path


def _json(result) -> dict:  # type: ignore[no-untyped-def]
    assert result.exit_code == 0, result.stderr
    return json.loads(result.stdout)


def test_profile_without_a_study_uses_inference(cli, members: Path) -> None:  # type: ignore[no-untyped-def]
    document = _json(cli("profile", str(members), "--target", "renewed", "--json"))
    assert (document["rows"], document["columns"]) == (120, 6)
    assert document["source"]["table"] is None
    variables = {v["name"]: v for v in document["variables"]}
    assert variables["age"]["type"] == "integer"
    # inference proposes -99 as a missing code: counted as missing and suggested for review
    codes = {c["code"]: c for c in variables["income"]["missing_codes"]}
    assert codes["-99"]["count"] == 7 and codes["-99"]["declared"] is False
    assert variables["income"]["min"] >= 30000
    topics = {(s["variable"], s["topic"]) for s in document["suggestions"]}
    assert ("income", "sentinel-code") in topics and ("sex", "case-variant") in topics
    classes = {c["value"]: c["count"] for c in document["target"]["classes"]}
    assert classes == {"yes": 24, "no": 96}
    assert document["target"]["imbalance_ratio"] == 4.0


def test_profile_uses_the_dictionary_of_the_study(cli, study: Path, members: Path) -> None:  # type: ignore[no-untyped-def]
    assert cli("table", "add", "members").exit_code == 0
    added = cli("var", "add", "income", "--type", "number", "--table", "members",
                "--missing-codes", "-99=refused", "--available", "before")
    assert added.exit_code == 0, added.stderr
    added = cli("var", "add", "joined", "--type", "date", "--table", "members", "--available", "after")
    assert added.exit_code == 0, added.stderr
    document = _json(cli("profile", str(members), "--target", "renewed", "--json"))
    assert document["source"]["table"] == "members"
    assert set(document["source"]["from_dictionary"]) == {"income", "joined"}
    income = next(v for v in document["variables"] if v["name"] == "income")
    assert income["type"] == "number"
    assert income["missing_codes"] == [{"code": "-99", "count": 7, "declared": True}]
    leakage = [s for s in document["suggestions"] if s["topic"] == "possible-leakage"]
    assert [s["variable"] for s in leakage] == ["joined"]
    assert "after the index time" in leakage[0]["message"]


def test_human_output_has_sections(cli, members: Path) -> None:  # type: ignore[no-untyped-def]
    result = cli("profile", str(members), "--target", "renewed", "--by", "sex")
    assert result.exit_code == 0, result.stderr
    for title in ("Numeric variables", "Categorical variables", "Dates", "Target renewed", "Groups by sex",
                  "Suggestions"):
        assert title in result.stdout
    assert "studylog ask" in result.stdout


def test_help_states_the_definitions(cli) -> None:  # type: ignore[no-untyped-def]
    result = cli("profile", "--help")
    assert result.exit_code == 0
    text = " ".join(result.stdout.split())
    for phrase in ("type 7", "Tukey's hinges", "0.6745", "MAD = 0", "Holm", "Bergsma", "95/5",
                   "Shapiro-Wilk", "complete cases"):
        assert phrase in text, phrase


@pytest.mark.parametrize("arguments, message", [
    (["--target", "nope"], "--target nope"),
    (["--by", "income"], "--by income"),
    (["--strong", "1.5"], "--strong"),
])
def test_bad_options_exit_2_with_one_line(cli, members: Path, arguments: list[str], message: str) -> None:  # type: ignore[no-untyped-def]
    result = cli("profile", str(members), *arguments, "--json")
    assert result.exit_code == 2, result.stdout
    assert result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0], result.stderr


def test_malformed_file_exits_2_with_one_line(cli, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    empty = tmp_path / "empty.csv"
    empty.write_text("", encoding="utf-8")
    result = cli("profile", str(empty), "--json")
    assert result.exit_code == 2
    assert len(result.stderr.strip().splitlines()) == 1 and "empty.csv" in result.stderr
    assert "Traceback" not in result.stderr


def test_unknown_table_with_a_study_is_exit_2(cli, study: Path, members: Path) -> None:  # type: ignore[no-untyped-def]
    result = cli("profile", str(members), "--table", "visits", "--json")
    assert result.exit_code == 2
    assert "visits" in result.stderr


@pytest.fixture
def narrow(monkeypatch):  # type: ignore[no-untyped-def]
    """The shared console at 100 columns, as on a common terminal."""
    from studylog.cli import render

    monkeypatch.setattr(render.console, "width", 100)


def test_human_output_fits_100_columns(cli, members: Path, narrow) -> None:  # type: ignore[no-untyped-def]
    result = cli("profile", str(members), "--target", "renewed", "--by", "sex")
    assert result.exit_code == 0, result.stderr
    lines = result.stdout.splitlines()
    assert max(len(line.rstrip()) for line in lines) <= 100
    # the numeric profile is split: distribution first, then shape, outliers and normality
    distribution = next(line for line in lines if "median" in line)
    assert "q1" in distribution and "sd" in distribution and "skewness" not in distribution
    shape = next(line for line in lines if "skewness" in line)
    assert "Tukey" in shape and "modified" in shape and "normality" in shape
    assert "Numeric variables: shape and outliers" in result.stdout
    # numbers are never cut across lines: the count of rows appears whole in the row of age
    age = next(line for line in lines if line.startswith("age "))
    assert " 120 " in age
    # a suggestion's command starts a line of its own, so that it can be copied
    assert any(line.strip().startswith("$ studylog ") for line in lines)
