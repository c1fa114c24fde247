"""``studylog draft``: proposals with evidence, --apply into the dictionary, disagreements, --target."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

VISITS = (
    "visit_id,age,renewed,plan,joined,income\n"
    + "".join(
        f"V-{i:04d},{'-99' if i % 17 == 0 else 20 + i % 50},{'yes' if i % 3 else 'no'},"
        f"{('basic', 'plus', 'premium')[i % 3]},2024-{1 + i % 12:02d}-{1 + i % 28:02d},"
        f"{'NA' if i % 11 == 0 else 1000 + i * 12.5}\n"
        for i in range(1, 121)
    )
)


@pytest.fixture
def visits(tmp_path: Path) -> Path:
    path = tmp_path / "visits.csv"
    path.write_text(VISITS, encoding="utf-8")
    return path


def run_json(cli, *args: str) -> dict:  # type: ignore[no-untyped-def]
    result = cli(*args, "--json")
    assert result.exit_code == 0, result.stderr
    return json.loads(result.stdout)


def test_draft_shows_proposals_without_a_study(cli, visits: Path) -> None:  # type: ignore[no-untyped-def]
    result = cli("draft", str(visits))
    assert result.exit_code == 0, result.stderr
    for words in ("visit_id", "identifier", "boolean", "true: yes; false: no", "format %Y-%m-%d",
                  "-99 ×7", "NA ×10", "key: visit_id", "--apply"):
        assert words in result.stdout, words
    document = run_json(cli, "draft", str(visits))
    assert document["table"] == "visits" and document["rows"] == 120 and not document["applied"]
    kinds = {v["name"]: v["type"] for v in document["variables"]}
    assert kinds == {"visit_id": "identifier", "age": "integer", "renewed": "boolean",
                     "plan": "categorical", "joined": "date", "income": "number"}
    age = next(v for v in document["variables"] if v["name"] == "age")
    # -99 stands for 120 // 17 = 7 rows; the other ages run 21..69 (i % 50 over i = 1..120, minus those)
    assert age["missing_codes"] == [{"code": "-99", "count": 7, "why": age["missing_codes"][0]["why"]}]
    assert (age["minimum"], age["maximum"]) == ("20", "69")
    assert age["evidence"]["share_parsed"] == 1.0


def test_apply_writes_drafts_and_the_table(cli, study: Path, visits: Path) -> None:  # type: ignore[no-untyped-def]
    document = run_json(cli, "draft", str(visits), "--apply", "--target", "renewed")
    assert document["applied"] and document["table_created"] and document["id"] >= 1
    assert document["study_target_set"] is True
    table = run_json(cli, "table", "show", "visits")
    assert table["key"] == ["visit_id"]
    age = run_json(cli, "var", "show", "age")
    assert age["status"] == "draft" and age["type"] == "integer"
    assert [c["code"] for c in age["missing_codes"]] == ["-99"]
    assert age["minimum"] is None  # observed extremes are evidence, never limits
    renewed = run_json(cli, "var", "show", "renewed")
    assert renewed["role"] == "target" and renewed["true_values"] == ["yes"]
    joined = run_json(cli, "var", "show", "joined")
    assert joined["date_format"] == "%Y-%m-%d"
    status = run_json(cli, "status")
    assert status["study"]["target"] == "renewed"


def test_apply_again_keeps_confirmed_and_updates_drafts(cli, study: Path, visits: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    run_json(cli, "draft", str(visits), "--apply")
    assert cli("var", "set", "plan", "--label", "Membership plan").exit_code == 0
    assert cli("var", "confirm", "age").exit_code == 0
    assert cli("var", "set", "income", "--type", "text").exit_code == 0
    changed = tmp_path / "visits.csv"
    changed.write_text(VISITS.replace(",yes,", ",maybe,").replace("-99", "-98"), encoding="utf-8")
    document = run_json(cli, "draft", str(changed), "--apply")
    actions = {v["name"]: v["action"] for v in document["variables"]}
    assert actions["age"] == "keep"
    assert actions["income"] == "update"
    disagreements = {(d["variable"], d["field"]) for d in document["disagreements"]}
    assert ("age", "missing_codes") in disagreements
    age = run_json(cli, "var", "show", "age")
    assert [c["code"] for c in age["missing_codes"]] == ["-99"] and age["status"] == "confirmed"
    income = run_json(cli, "var", "show", "income")
    assert income["type"] == "number"
    plan = run_json(cli, "var", "show", "plan")
    assert plan["label"] == "Membership plan"  # the analyst's own fields are never touched
    history = run_json(cli, "var", "history", "income")
    rows = history if isinstance(history, list) else history["changes"]
    assert any(row.get("why") == "proposed by draft from visits.csv" for row in rows)


def test_columns_gone_and_table_key_disagreements(cli, study: Path, visits: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    run_json(cli, "draft", str(visits), "--apply")
    fewer = tmp_path / "fewer" / "visits.csv"
    fewer.parent.mkdir()
    fewer.write_text("\n".join(",".join(line.split(",")[1:]) for line in VISITS.splitlines()) + "\n")
    document = run_json(cli, "draft", str(fewer), "--key", "age,joined")
    found = {(d["variable"], d["field"]): d for d in document["disagreements"]}
    assert found[("visit_id", "column")]["file"] == "absent from the file"
    assert found[(None, "key")]["dictionary"] == ["visit_id"]
    assert "NOT a key" in document["key_evidence"] or "given" in document["key_evidence"]


def test_given_key_is_checked_against_the_file(cli, visits: Path) -> None:  # type: ignore[no-untyped-def]
    document = run_json(cli, "draft", str(visits), "--key", "plan")
    assert document["key"] == ["plan"]
    assert document["key_evidence"].startswith("given; NOT a key of this file: 117 repeated")


def test_nothing_is_written_without_apply(cli, study: Path, visits: Path) -> None:  # type: ignore[no-untyped-def]
    run_json(cli, "draft", str(visits), "--target", "renewed")
    listed = cli("var", "list", "--json")
    assert listed.exit_code != 0 or json.loads(listed.stdout) in ([], {"variables": []})
    assert run_json(cli, "status")["study"]["target"] is None


def test_unknown_columns_and_files_are_exit_2(cli, visits: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    for args in (("--target", "nope"), ("--key", "visit_id,nope")):
        result = cli("draft", str(visits), *args)
        assert result.exit_code == 2
        assert "no column 'nope'" in result.stderr and len(result.stderr.strip().splitlines()) == 1
    missing = cli("draft", str(tmp_path / "absent.csv"))
    assert missing.exit_code == 2 and "no such file" in missing.stderr
    applied_without_study = cli("draft", str(visits), "--apply")
    assert applied_without_study.exit_code == 2 and "init" in applied_without_study.stderr


def test_encoding_and_sheet_options(cli, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    latin = tmp_path / "people.csv"
    latin.write_bytes("town\nKöln\nMünchen\nKöln\n".encode("latin-1"))
    assert cli("draft", str(latin)).exit_code == 2
    document = run_json(cli, "draft", str(latin), "--encoding", "latin-1")
    assert document["variables"][0]["evidence"]["examples"][0] == "Köln"
    import openpyxl

    book = openpyxl.Workbook()
    book.active.append(["x"])
    book.active.append([1])
    other = book.create_sheet("second")
    other.append(["when"])
    other.append(["2024-01-01"])
    path = tmp_path / "book.xlsx"
    book.save(path)
    document = run_json(cli, "draft", str(path), "--sheet", "second")
    assert [v["name"] for v in document["variables"]] == ["when"]


def test_sensitive_examples_are_masked(cli, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    path = tmp_path / "contacts.csv"
    path.write_text("email,n\n" + "".join(f"p{i}@example.org,{i}\n" for i in range(30)))
    document = run_json(cli, "draft", str(path))
    email = document["variables"][0]
    assert email["sensitivity"] == "direct-identifier"
    assert set(email["evidence"]["examples"]) == {"[masked]"}
    assert "example.org" not in cli("draft", str(path)).stdout


def test_progress_bar_only_on_a_terminal(monkeypatch: pytest.MonkeyPatch) -> None:
    import io
    import sys

    from studylog.cli import draft as draft_cli

    with draft_cli.progress_bar("reading") as progress:
        assert progress is None  # the test's stderr is not a terminal

    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    monkeypatch.setattr(sys, "stderr", Terminal())
    with draft_cli.progress_bar("reading") as progress:
        assert progress is not None
        progress(50, 100)
        progress(100, 100)


def test_draft_updates_keep_declared_codes_and_labels(cli, study: Path, visits: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    run_json(cli, "draft", str(visits), "--apply")
    assert cli("var", "set", "age", "--missing-codes", "-99=refused,-98=don't know").exit_code == 0
    assert cli("var", "set", "plan", "--levels", "basic=Basic plan,plus,premium,legacy").exit_code == 0
    grown = tmp_path / "grown" / "visits.csv"
    grown.parent.mkdir()
    grown.write_text(VISITS.replace(",plus,", ",family,"), encoding="utf-8")
    document = run_json(cli, "draft", str(grown), "--apply")
    actions = {v["name"]: v["action"] for v in document["variables"]}
    assert actions["age"] == "same"  # -99 is declared already, -98 stays declared
    assert actions["plan"] == "update"
    age = run_json(cli, "var", "show", "age")
    assert [(c["code"], c["label"]) for c in age["missing_codes"]] == [("-99", "refused"), ("-98", "don't know")]
    plan = run_json(cli, "var", "show", "plan")
    assert [(lv["code"], lv["label"]) for lv in plan["levels"]] == [
        ("basic", "Basic plan"), ("plus", None), ("premium", None), ("legacy", None), ("family", None)]


def test_human_output_fits_100_columns(cli, tmp_path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    from studylog.cli import render

    monkeypatch.setattr(render.console, "width", 100)
    rows = "\n".join(f"R{i:04d},2026-01-{1 + i % 28:02d} {i % 24:02d}:{i % 60:02d},{i % 7}.5" for i in range(60))
    path = tmp_path / "trips.csv"
    path.write_text("trip,started_at,minutes\n" + rows + "\n", encoding="utf-8")
    result = cli("draft", str(path))
    assert result.exit_code == 0, result.output
    assert max(len(line.rstrip()) for line in result.stdout.splitlines()) <= 100
    # the observed range of a date-time reads as written, minutes without the ':00' seconds and 'T'
    assert "2026-01-01 00:00 .." in result.stdout and "T00:00:00" not in result.stdout
    assert "would add 3" in result.stdout
