"""``ask``, ``answer``, ``withdraw``, ``questions``, ``questions export`` and ``questions import`` through the
command line."""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest

from journal_fixtures import add_drop, add_var


def _json(result):  # type: ignore[no-untyped-def]
    assert result.exit_code == 0, (result.stdout, result.stderr)
    return json.loads(result.stdout)


def _one_error_line(result, message: str) -> None:  # type: ignore[no-untyped-def]
    assert result.exit_code == 2, (result.stdout, result.stderr)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0], result.stderr


def test_ask_answer_withdraw_and_list(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    add_var("income", type="number")
    asked = cli("ask", "Is -99 a refusal?", "--var", "income", "--to", "data owner", "--priority", "high")
    assert asked.exit_code == 0 and asked.stdout.startswith("question 1 recorded")
    assert _json(cli("ask", "Which assay?", "--to", "lab", "--json"))["id"] == 2
    cli("ask", "Moot?", "--to", "lab")
    open_ones = _json(cli("questions", "--json"))["questions"]
    assert [q["id"] for q in open_ones] == [1, 2, 3]
    assert [q["id"] for q in _json(cli("questions", "--to", "lab", "--json"))["questions"]] == [2, 3]
    answered = cli("answer", "1", "Yes, a refusal", "--by", "Dr Rivera")
    assert answered.stdout.strip() == "question 1 answered by Dr Rivera"
    assert cli("withdraw", "3", "--why", "moot").stdout.strip() == "question 3 withdrawn"
    assert [q["id"] for q in _json(cli("questions", "--status", "answered", "--json"))["questions"]] == [1]
    assert [q["id"] for q in _json(cli("questions", "--status", "all", "--json"))["questions"]] == [1, 2, 3]
    human = cli("questions")
    assert human.exit_code == 0 and "Which assay?" in human.stdout and "refusal" not in human.stdout
    status = _json(cli("status", "--json"))
    section = next(s for s in status["sections"] if s["name"] == "questions")
    assert [i["id"] for i in section["items"]] == [2]
    _one_error_line(cli("answer", "3", "late"), "withdrawn")
    _one_error_line(cli("withdraw", "2"), "--why")
    _one_error_line(cli("questions", "--status", "closed"), "unknown status")


def test_export_each_format_and_import_answers(cli, study: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    add_var("age", label="Age at visit", missing_codes="-99=refused")
    add_drop({"age": {"count": 96, "missing": 4, "missing_codes": [{"code": "-99", "count": 4}]}})
    cli("ask", "=1+1 is -99 a refusal?", "--var", "age", "--to", "data owner")
    cli("ask", "Which assay?", "--to", "lab")
    markdown = cli("questions", "export", "--to", "data owner")
    assert markdown.exit_code == 0 and markdown.stdout.startswith("# Questions for data owner")
    assert "Which assay?" not in markdown.stdout and "4 missing" not in markdown.stdout
    assert "<5 missing" in markdown.stdout
    html_file = tmp_path / "p.html"
    assert cli("questions", "export", "--format", "html", "-o", str(html_file)).exit_code == 0
    assert "&lt;5" in html_file.read_text() and "Which assay?" in html_file.read_text()
    csv_file = tmp_path / "p.csv"
    doc = _json(cli("questions", "export", "--to", "data owner", "--format", "csv", "-o", str(csv_file), "--json"))
    assert doc["questions"] == 1 and doc["file"] == str(csv_file)
    raw = csv_file.read_bytes()
    assert raw.startswith(b"\xef\xbb\xbf")
    rows = list(csv.DictReader(io.StringIO(raw.decode("utf-8-sig"))))
    assert rows[0]["question"] == "'=1+1 is -99 a refusal?"
    rows[0]["answer"] = "'-99 means refused"
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=list(rows[0]))
    writer.writeheader()
    writer.writerows(rows)
    csv_file.write_text(out.getvalue(), encoding="utf-8-sig")
    imported = _json(cli("questions", "import", str(csv_file), "--json"))
    assert imported["answered"] == [1]
    question = _json(cli("questions", "--status", "answered", "--json"))["questions"][0]
    assert (question["answer"], question["answered_by"]) == ("-99 means refused", "data owner")
    again = cli("questions", "import", str(csv_file))
    assert again.exit_code == 0 and "0 answer(s) recorded" in again.stdout


def test_import_with_an_unknown_id_changes_nothing(cli, study: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    cli("ask", "one?", "--to", "x")
    cli("ask", "two?", "--to", "x")
    path = tmp_path / "a.csv"
    path.write_text("id,question,answer\n1,one?,yes\n2,two?,no\n77,made up,maybe\n")
    before = cli("questions", "--status", "all", "--json").stdout
    result = cli("questions", "import", str(path))
    _one_error_line(result, "line 4: no question 77")
    assert cli("questions", "--status", "all", "--json").stdout == before
    _one_error_line(cli("questions", "import", str(tmp_path / "missing.csv")), "no such file")
    _one_error_line(cli("questions", "export", "--format", "pdf"), "unknown packet format")


@pytest.mark.parametrize("args", [["questions", "export", "--help"], ["questions", "import", "--help"],
                                  ["questions", "--help"]])
def test_help(cli, args: list[str]) -> None:  # type: ignore[no-untyped-def]
    result = cli(*args)
    assert result.exit_code == 0 and "Usage" in result.stdout


def test_an_empty_packet_says_so_on_stderr(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("ask", "one?", "--to", "lab")
    result = cli("questions", "export", "--to", "nobody", "--format", "csv")
    assert result.exit_code == 0
    assert result.stdout.startswith("id,")
    assert len(result.stdout.strip().splitlines()) == 1
    assert "no open questions for nobody" in result.stderr
