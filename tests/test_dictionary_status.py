"""The dictionary's sections of ``studylog status``."""

from __future__ import annotations

import json
from pathlib import Path


def _sections(cli) -> dict[str, dict]:  # type: ignore[no-untyped-def]
    result = cli("status", "--json")
    assert result.exit_code == 0, result.stderr
    return {s["name"]: s for s in json.loads(result.stdout)["sections"]}


def test_empty_study_says_what_to_do(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    sections = _sections(cli)
    assert sections["tables"]["summary"] == "none yet"
    assert sections["variables"]["level"] == "todo"


def test_counts_gaps_and_stale_derivations(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "height", "--type", "number", "--unit", "cm", "--source", "measured",
        "--description", "standing height")
    cli("var", "add", "weight", "--type", "number", "--source", "measured")
    cli("var", "add", "bmi", "--type", "number", "--unit", "kg/m2", "--source", "derived", "--description",
        "body mass index", "--derived-from", "height,weight", "--derivation", "weight / (height/100)^2")
    cli("var", "add", "arm", "--type", "categorical", "--levels", "a,b", "--role", "group", "--status",
        "confirmed", "--description", "trial arm", "--source", "administrative")
    sections = _sections(cli)
    counts = {i["by"]: i["counts"] for i in sections["variables"]["items"]}
    assert counts == {"status": {"draft": 3, "confirmed": 1}, "role": {"input": 3, "group": 1},
                      "type": {"number": 3, "categorical": 1}}
    assert sections["dictionary-gaps"]["items"] == [{"variable": "data.weight", "missing": "description, unit"}]
    assert sections["derived"]["level"] == "ok"
    cli("var", "set", "weight", "--unit", "lb")
    derived = _sections(cli)["derived"]
    assert derived["level"] == "warning"
    assert [(i["variable"], i["input"]) for i in derived["items"]] == [("data.bmi", "weight")]
    cli("var", "set", "bmi", "--derivation", "703 * weight / height^2")
    assert _sections(cli)["derived"]["items"] == []
    human = cli("status")
    assert "Dictionary gaps" in human.stdout


def test_unknown_inputs_are_reported(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "score", "--type", "number", "--derived-from", "item1")
    items = _sections(cli)["derived"]["items"]
    assert items == [{"variable": "data.score", "input": "item1", "problem": "the input is not in the dictionary"}]


def test_target_and_index_time(cli, tmp_path: Path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setenv("STUDYLOG_STORE", str(tmp_path / "t" / "studylog.db"))
    cli("init", "--target", "renewed", "--index-time", "renewal date")
    cli("var", "add", "tenure", "--type", "integer", "--unit", "months", "--available", "before")
    cli("var", "add", "complaints_after", "--type", "integer", "--available", "after")
    cli("var", "add", "plan", "--type", "categorical")
    target = _sections(cli)["target"]
    assert target["level"] == "warning"
    problems = [i["problem"] for i in target["items"]]
    assert "the study's target 'renewed' is not in the dictionary" in problems
    assert any("leak" in p and i.get("variable") == "complaints_after"
               for p, i in zip(problems, target["items"]))
    assert any(i.get("variables") == ["plan"] for i in target["items"])
    cli("var", "add", "renewed", "--type", "boolean", "--role", "target")
    cli("var", "set", "complaints_after", "--role", "excluded")
    cli("var", "set", "plan", "--available", "at")
    target = _sections(cli)["target"]
    assert target["items"] == [] and target["level"] == "ok"
    assert target["summary"] == "target: renewed; role target: renewed; index time: renewal date"
