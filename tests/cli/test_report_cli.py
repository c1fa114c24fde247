"""``studylog report``: the command, its options and errors, and one study kept end to end through the CLI."""

from __future__ import annotations

import json
import sys
from html.parser import HTMLParser
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from report_study import SECRET_LEVEL, build_in_store  # noqa: E402


def test_report_to_stdout_and_to_a_file(cli, study: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    build_in_store()
    result = cli("report", "methods")
    assert result.exit_code == 0, result.stderr
    assert result.stdout.startswith("# Clinic readmission study: Methods")
    out = tmp_path / "dictionary.html"
    written = cli("report", "dictionary", "-o", str(out), "--json")
    assert written.exit_code == 0, written.stderr
    summary = json.loads(written.stdout)
    assert summary["format"] == "html" and summary["file"] == str(out)  # the format follows -o
    assert summary["bytes"] == len(out.read_bytes()) and out.read_text().startswith("<!DOCTYPE html>")
    plain = cli("report", "validity", "--format", "html")
    assert plain.exit_code == 0 and "<h2>Threats to validity</h2>" in plain.stdout
    as_json = json.loads(cli("report", "questions", "--json").stdout)
    assert as_json["format"] == "md" and "Is -99 in income a refusal?" in as_json["text"]


def test_report_with_a_user_template_and_min_cell(cli, study: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    build_in_store()
    mine = tmp_path / "flow.md.j2"
    mine.write_text("{% for f in methods.flows %}{{ f.table }}: {{ f.received }} -> {{ f.analysed }}"
                    "{% for s in f.steps %} [{{ s.ref }} -{{ s.removed }}]{% endfor %}{% endfor %}\n",
                    encoding="utf-8")
    result = cli("report", "methods", "--template", str(mine))
    assert result.exit_code == 0, result.stderr
    assert result.stdout.strip().startswith("visits: 1250 -> 1207 [D")
    assert "-<5]" in result.stdout
    wider = cli("report", "methods", "--template", str(mine), "--min-cell", "50")
    assert "-<50]" in wider.stdout and "-40]" not in wider.stdout


def test_report_errors_are_one_line_exit_2(cli, study: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    for args in (["report", "summary"], ["report", "methods", "--format", "pdf"],
                 ["report", "methods", "--min-cell", "0"],
                 ["report", "methods", "--template", str(tmp_path / "none.j2")],
                 ["report", "methods", "-o", str(tmp_path / "no" / "such" / "folder.md")]):
        result = cli(*args)
        assert result.exit_code == 2, (args, result.output)
        assert result.stderr.startswith("error: ") and result.stderr.count("\n") == 1, result.stderr


def test_report_without_a_study_is_exit_2(cli) -> None:  # type: ignore[no-untyped-def]
    result = cli("report", "writeup")
    assert result.exit_code == 2 and "studylog init" in result.stderr


class _Text(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.parts: list[str] = []
        self.tags: list[str] = []

    def handle_starttag(self, tag: str, attrs: list) -> None:  # type: ignore[type-arg]
        self.tags.append(tag)

    def handle_data(self, data: str) -> None:
        self.parts.append(data)


def _ok(result) -> str:  # type: ignore[no-untyped-def]
    assert result.exit_code == 0, (result.stdout, result.stderr)
    return result.stdout


def _id(result) -> int:  # type: ignore[no-untyped-def]
    return int(json.loads(_ok(result))["id"])


def test_a_study_kept_through_the_cli_writes_its_writeup(cli, study: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    # invented data: 30 members, then two deliveries of their visits (the second is analysed)
    members = tmp_path / "members.csv"
    members.write_text("member_id,age,sex\n" + "".join(
        f"M-{i:04d},{20 + i if i != 7 else -99},{'F' if i % 2 else 'M'}\n" for i in range(30)),
        encoding="utf-8")
    def visits(rows: int) -> str:
        return "visit_id,member_id,systolic_bp,diagnosis,readmitted\n" + "".join(
            f"V-{i:04d},M-{i % 30:04d},{110 + i % 40},{SECRET_LEVEL if i % 9 == 0 else 'cardiac'},"
            f"{'yes' if i % 5 == 0 else 'no'}\n" for i in range(rows))
    first, second = tmp_path / "visits-1.csv", tmp_path / "visits-2.csv"
    first.write_text(visits(60), encoding="utf-8")
    second.write_text(visits(80), encoding="utf-8")

    _ok(cli("table", "add", "members", "--grain", "one row per member", "--key", "member_id"))
    _ok(cli("var", "add", "member_id", "--table", "members", "--type", "identifier", "--role", "identifier",
            "--sensitivity", "direct-identifier", "--required", "--unique"))
    _ok(cli("var", "add", "age", "--table", "members", "--type", "integer", "--unit", "years", "--min", "0",
            "--max", "120", "--missing-codes=-99=refused", "--sensitivity", "quasi-identifier"))
    _ok(cli("var", "add", "sex", "--table", "members", "--type", "categorical", "--levels", "F,M"))
    _ok(cli("table", "add", "visits", "--grain", "one row per stay", "--key", "visit_id"))
    _ok(cli("var", "add", "visit_id", "--table", "visits", "--type", "identifier", "--role", "identifier"))
    _ok(cli("var", "add", "member_id", "--table", "visits", "--type", "identifier", "--role", "identifier",
            "--references", "members.member_id", "--sensitivity", "direct-identifier"))
    _ok(cli("var", "add", "systolic_bp", "--table", "visits", "--type", "number", "--unit", "mmHg",
            "--label", "Systolic blood pressure", "--description", "At triage <script>x()</script>"))
    _ok(cli("var", "add", "diagnosis", "--table", "visits", "--type", "categorical",
            "--sensitivity", "sensitive"))
    _ok(cli("var", "add", "readmitted", "--table", "visits", "--type", "boolean", "--role", "target",
            "--true-values", "yes", "--false-values", "no"))
    _ok(cli("var", "freeze", "agreed", "--note", "with the data owner"))
    for args in (["check", str(members), "--table", "members"],
                 ["check", str(first), "--table", "visits", "--label", "first"],
                 ["check", str(second), "--table", "visits", "--label", "second", "--analysis"]):
        result = cli(*args, "--fail-on", "never", "--json")
        assert result.exit_code == 0, result.stderr
    excluded = _id(cli("log", "Exclude stays of members under 21", "--kind", "exclude-cases",
                       "--removed", "3", "--why", "outside the study population", "--json"))
    split = _id(cli("log", "Hold out 25% of members", "--kind", "split", "--seed", "7", "--json"))
    old = _id(cli("log", "Winsorise systolic_bp", "--kind", "outliers", "--var", "visits.systolic_bp",
                  "--json"))
    _ok(cli("plan", "freeze", "--note", "statistical analysis plan v1"))
    new = _id(cli("decision", "supersede", str(old), "Keep systolic_bp as measured",
                  "--why", "the extremes are real", "--json"))
    _ok(cli("ask", "Is the cuff calibrated?", "--var", "visits.systolic_bp", "--to", "clinic lab"))
    _ok(cli("threat", "add", "Triage readings run high", "--kind", "construct",
            "--var", "visits.systolic_bp", "--severity", "high"))
    _ok(cli("conclude", "Readmission rises with pressure", "--var", "visits.systolic_bp"))
    _ok(cli("next", "Repeat on next year's stays"))

    out = tmp_path / "writeup.html"
    _ok(cli("report", "writeup", "-o", str(out)))
    page = _Text()
    page.feed(out.read_text(encoding="utf-8"))
    text = " ".join(" ".join(page.parts).split())
    assert "script" not in page.tags and "At triage <script>x()</script>" in text
    assert "Dictionary version agreed" in text or "version “agreed”" in text
    # the record flow: 80 received in the analysed drop, 3 removed (shown as <5), 77 analysed
    assert f"Removed: Exclude stays of members under 21 [D{excluded}] −<5" in text
    assert "Analysed 77" in text
    assert f"Keep systolic_bp as measured. [D{new}; post hoc]" in text
    assert f"[D{split}]" in text and "Random seed: 7." in text
    appendix = text.split("Appendix: decisions not in force")[1]
    assert f"D{old} Winsorise systolic_bp" in appendix and f"superseded by D{new}" in appendix
    assert "Triage readings run high" in text and "Is the cuff calibrated?" in text
    assert "Readmission rises with pressure" in text and "Repeat on next year's stays" in text
    # what must not leave the study
    assert SECRET_LEVEL not in text and "M-0007" not in text
    assert "min 20" not in text and "max 49" not in text  # the extremes of age (quasi-identifier)
