"""``log``, ``decisions``, ``decision …``, ``plan``, ``note``/``conclude``/``next``, ``timeline``, ``redact``
through the command line: exit codes, stdout, stderr."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from journal_fixtures import add_drop, add_var, git, make_repo


def _json(result):  # type: ignore[no-untyped-def]
    assert result.exit_code == 0, (result.stdout, result.stderr)
    return json.loads(result.stdout)


def _one_error_line(result, message: str, code: int = 2) -> None:  # type: ignore[no-untyped-def]
    assert result.exit_code == code, (result.stdout, result.stderr)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0], result.stderr
    assert "Traceback" not in result.stderr


def test_log_prints_its_id_and_json(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    add_var("income", type="number")
    add_drop({"income": {"count": 90, "missing": 10, "missing_codes": [{"code": "-99", "count": 6}]}})
    plain = cli("log", "Treat -99 as missing", "--kind", "missing", "--var", "income", "--why", "refusals",
                "--assumption", "MAR", "--code", "clean.py:3")
    assert plain.exit_code == 0, plain.stderr
    assert plain.stdout.startswith("decision 1 recorded")
    assert "facts of income" in plain.stdout
    doc = _json(cli("log", "Split 80/20", "--kind", "split", "--seed", "2024", "--proposed",
                    "--evidence", "n=1000", "--alternatives", "5-fold CV", "--json"))
    assert doc["id"] == 2 and doc["status"] == "proposed" and doc["seed"] == 2024
    listed = _json(cli("decisions", "--json"))
    assert [d["id"] for d in listed["decisions"]] == [1, 2]
    assert listed["decisions"][0]["facts"]["income"]["missing_codes"] == [{"code": "-99", "count": 6}]
    assert [d["id"] for d in _json(cli("decisions", "--var", "income", "--json"))["decisions"]] == [1]
    assert [d["id"] for d in _json(cli("decisions", "--kind", "split", "--json"))["decisions"]] == [2]
    assert [d["id"] for d in _json(cli("decisions", "--status", "proposed", "--json"))["decisions"]] == [2]
    table = cli("decisions")
    assert table.exit_code == 0 and "Treat -99" in table.stdout


@pytest.mark.parametrize("args, message", [
    (["log", "x", "--kind", "tidy"], "unknown decision kind 'tidy'"),
    (["log", "x", "--assumption", "random"], "unknown missingness assumption"),
    (["log", "x", "--var", "nope"], "no variable 'nope'"),
    (["log", "x", "--drop", "7"], "no drop 7"),
    (["log", "  "], "must not be empty"),
    (["decision", "show", "9"], "no decision 9"),
    (["decision", "revert", "1"], "--why"),
    (["decisions", "--status", "done"], "unknown status"),
    (["timeline", "--since", "yesterday"], "is not a date"),
    (["redact", "decision", "1"], "--why"),
])
def test_bad_input_is_one_line_exit_2(cli, study: Path, args: list[str], message: str) -> None:  # type: ignore[no-untyped-def]
    cli("log", "a decision")
    _one_error_line(cli(*args), message)


def test_decision_chain_through_the_command_line(cli, study: Path, tmp_path: Path,
                                                  monkeypatch: pytest.MonkeyPatch) -> None:  # type: ignore[no-untyped-def]
    cli("log", "cap income at the 99th percentile", "--kind", "outliers", "--proposed")
    assert cli("decision", "adopt", "1").stdout.strip() == "decision 1 is adopted"
    repo = make_repo(tmp_path / "code")
    monkeypatch.chdir(repo)
    done = _json(cli("decision", "implement", "1", "--code", "clean.py:12", "--json"))
    assert done["status"] == "implemented" and done["git"]["commit"] == git(repo, "rev-parse", "HEAD")
    new = _json(cli("decision", "supersede", "1", "winsorise at the 1st and 99th", "--why", "both tails", "--json"))
    assert new["id"] == 2 and new["supersedes"] == 1 and new["kind"] == "outliers"
    _one_error_line(cli("decision", "supersede", "1", "again", "--why", "x"), "superseded")
    shown = _json(cli("decision", "show", "1", "--json"))
    assert shown["status"] == "superseded" and shown["superseded_by"] == [2]
    human = cli("decision", "show", "2")
    assert "replaces 1 (superseded)" in human.stdout
    reverted = cli("decision", "revert", "2", "--why", "the model is robust to it")
    assert reverted.stdout.strip() == "decision 2 is reverted"


def test_plan_freeze_and_post_hoc(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("log", "before")
    frozen = _json(cli("plan", "freeze", "--note", "SAP v1", "--json"))
    assert frozen["decisions_before"] == 1
    after = _json(cli("log", "after", "--json"))
    assert after["post_hoc"] is True
    assert "post hoc" in cli("log", "later").stdout
    state = _json(cli("plan", "show", "--json"))
    assert (state["pre_specified"], state["post_hoc"], state["note"]) == (1, 2, "SAP v1")
    _one_error_line(cli("plan", "freeze"), "already frozen")


def test_notes_and_timeline(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    add_var("age")
    assert cli("note", "ages heaped at 5-year marks", "--var", "age", "--tag", "eda").stdout.startswith("note 1")
    conclusion = _json(cli("conclude", "older members renew more", "--var", "age", "--json"))
    assert conclusion["kind"] == "conclusion" and conclusion["variables"] == ["age"]
    assert cli("next", "repeat with April's drop").stdout.startswith("next 3")
    events = _json(cli("timeline", "--json"))["events"]
    texts = [e["text"] for e in events if e["entity"] == "entry"]
    assert texts == ["ages heaped at 5-year marks", "older members renew more", "repeat with April's drop"]
    assert all(e["author"] == "tester" for e in events)
    about_age = _json(cli("timeline", "--var", "age", "--json"))["events"]
    assert {e["kind"] for e in about_age if e["entity"] == "entry"} == {"note", "conclusion"}
    assert _json(cli("timeline", "--since", "2999-01-01", "--json"))["events"] == []
    human = cli("timeline")
    assert human.exit_code == 0 and "older members renew more" in human.stdout


def test_redact_through_the_command_line(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("note", "phoned Jane Roe on 0770 900 123")
    result = cli("redact", "note", "1", "--why", "a phone number")
    assert result.exit_code == 0, result.stderr
    assert "redacted text" in result.stdout
    events = _json(cli("timeline", "--json"))["events"]
    assert "Jane" not in json.dumps(events)
    assert [e["action"] for e in events if e["entity"] == "entry"] == ["create", "redact"]
    _one_error_line(cli("redact", "note", "1", "--why", "again"), "no text left")
    cli("log", "exclude Mr Smith's visits", "--why", "Mr Smith asked")
    partial = _json(cli("redact", "decision", "1", "--text", "Mr Smith", "--why", "a name", "--json"))
    assert partial["fields"] == ["text", "why"] and partial["vacuumed"] is True
    shown = _json(cli("decision", "show", "1", "--json"))
    assert shown["text"] == "exclude [redacted]'s visits"
