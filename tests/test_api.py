"""The Python API: public names, a study's daily work from a notebook, DataFrames as data."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

import studylog
from studylog import api
from studylog.errors import UsageError


def test_the_public_names_are_pinned() -> None:
    assert sorted(studylog.__all__) == sorted([
        "CheckReport", "ProfileReport", "Record", "Records", "Study", "StudylogError", "__version__",
        "create_study", "open_study",
    ])
    assert sorted(api.__all__) == sorted([
        "CheckReport", "ProfileReport", "Record", "Records", "Study", "create_study", "open_study",
    ])
    for name in studylog.__all__:
        assert getattr(studylog, name) is not None
    public_methods = sorted(n for n in vars(api.Study) if not n.startswith("_"))
    assert public_methods == sorted([
        "add_table", "add_variable", "answer", "ask", "check", "conclude", "decisions", "log", "next_step",
        "note", "profile", "questions", "report", "set_variable", "status", "threat", "threats",
        "timeline", "variable", "variables",
    ])


def _members() -> pd.DataFrame:
    return pd.DataFrame({
        "member_id": ["M1", "M2", "M3", "M3", "M5", "M6"],
        "age": [34, -2, 51, 51, 999, 40],
        "channel": ["app", "App", "web", "web", "kiosk", "web"],
    })


@pytest.fixture
def notebook_study(tmp_path: Path) -> studylog.Study:
    study = studylog.create_study(tmp_path / "nb", title="Notebook study")
    study.add_table("members", key=["member_id"], grain="one row per member")
    study.add_variable("member_id", "identifier", table="members")
    study.add_variable("age", "integer", table="members", minimum="0", maximum="120", unit="years")
    study.add_variable("channel", "categorical", table="members",
                       levels=[{"code": "app"}, {"code": "web"}, {"code": "kiosk"}])
    return study


def test_a_day_of_work_through_the_api(notebook_study: studylog.Study) -> None:
    study = notebook_study
    assert [v["name"] for v in study.variables()] == ["member_id", "age", "channel"]
    decision = study.log("Treat 999 in age as missing", kind="cleaning", variables=["age"], why="a placeholder")
    assert decision.id == 1 and decision["kind"] == "cleaning"
    question = study.ask("Is 999 a placeholder?", variables=["age"], to="data owner")
    study.answer(question.id, "Yes, the form's default.")
    assert len(study.questions(status="open")) == 0
    assert study.questions(status="all")[0]["answer"] == "Yes, the form's default."
    study.note("Ages look plausible otherwise", variables=["age"], tags=["review"])
    study.threat("Self-reported age", kind="construct", variables=["age"])
    assert study.threats().to_frame()["kind"].tolist() == ["construct"]
    assert "<table>" in study.variables()._repr_html_()
    assert "Treat 999 in age as missing" in study.report("methods", "md")
    assert {s["name"] for s in study.status()["sections"]} >= {"study"}
    assert len(study.timeline()) > 5


def test_a_dataframe_gets_the_same_findings_as_the_same_data_checked_from_the_cli(
    notebook_study: studylog.Study, tmp_path: Path, cli  # type: ignore[no-untyped-def]
) -> None:
    frame = _members()
    from_api = notebook_study.check(frame, table="members", record=False)
    path = tmp_path / "members.csv"
    frame.to_csv(path, index=False)
    store = str(notebook_study.location.path)
    result = cli("--store", store, "check", str(path), "--table", "members", "--no-record", "--json")
    assert result.exit_code == 1, result.stderr
    from_cli = json.loads(result.stdout)
    assert from_api.findings == from_cli["findings"]
    rules = {(f["variable"], f["rule"]) for f in from_api.findings}
    # planted: -2 and 999 out of range, 'App' not a level, M3 repeated (key and the whole row)
    assert ("age", "range") in rules and ("channel", "level") in rules and ("member_id", "key") in rules
    frame_view = from_api.to_frame()
    assert list(frame_view.columns)[:3] == ["variable", "rule", "severity"]
    assert "error(s)" in from_api._repr_html_()


def test_a_recorded_dataframe_check_is_a_drop(notebook_study: studylog.Study) -> None:
    report = notebook_study.check(_members(), table="members", name="members-2026-03.csv")
    assert report.drop_id == 1
    assert report.document["drop"]["file"] == "members-2026-03.csv"
    assert report.errors >= 3


def test_profile_of_a_dataframe(notebook_study: studylog.Study) -> None:
    profile = notebook_study.profile(_members(), table="members")
    assert profile.document["rows"] == 6
    ages = next(v for v in profile.variables if v["name"] == "age")
    assert ages["count"] == 6
    assert set(profile.to_frame()["name"]) == {"member_id", "age", "channel"}


def test_open_study_finds_it_and_rejects_bad_data(notebook_study: studylog.Study) -> None:
    again = studylog.open_study(notebook_study.location.path)
    assert [v["name"] for v in again.variables(table="members")][0] == "member_id"
    with pytest.raises(UsageError):
        again.check(42, table="members")  # type: ignore[arg-type]
