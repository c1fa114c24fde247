"""Hostile import files: ``var import`` and ``questions import`` fed malformed, odd and malicious files.

Every file either is refused as bad input (exit 2, one line on stderr naming the file, no traceback,
the store unchanged) or, where it is merely unusual, gives the correct result with its text stored
exactly. The data-file corpus (``tests/corpus/``) covers the readers and ``draft``; this is the part for
the files people import into the store. The two largest files also run in a child process whose peak
memory is measured.
"""

from __future__ import annotations

import json
import resource
import sqlite3
import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pytest

from studylog.store.models import Base

CSV_HEADER = "table,name,type,label,description,minimum,maximum,levels,pattern\n"


@dataclass(frozen=True)
class Hostile:
    name: str
    content: bytes | Callable[[Path], None]
    # None: merely unusual, must be imported correctly; else a word the one-line error must contain
    error: str | None
    suffix: str = ".csv"


def _csv(*rows: str) -> bytes:
    return (CSV_HEADER + "".join(row + "\n" for row in rows)).encode("utf-8")


def _deep_json(path: Path) -> None:
    path.write_text("[" * 100_000)


def _wide_header(path: Path) -> None:
    path.write_text(",".join(f"c{i}" for i in range(10_000)) + "\nx\n")


def _big_cell(path: Path) -> None:
    path.write_bytes(_csv(f"visits,big,text,Big,{'y' * 1_000_000},,,,"))


def _many_rows(path: Path) -> None:
    path.write_bytes(_csv(*(f"visits,v{i},integer,Item {i},,0,10,," for i in range(500))))


HOSTILE_DICTIONARIES = [
    Hostile("empty", b"", "empty"),
    Hostile("bom-only", b"\xef\xbb\xbf", "empty"),
    Hostile("binary", bytes(range(256)) * 40, ""),
    Hostile("latin-1", _csv("visits,age,integer,\xc2ge,,,,,").replace(b"\xc3\x82", b"\xc2"), "UTF-8"),
    Hostile("nul-in-name", _csv("visits,a\x00b,text,,,,,,"), "control character"),
    Hostile("unterminated-quote", _csv('visits,age,integer,"never closed,,,,,'), ""),
    Hostile("ragged-row", _csv("visits,age,integer,Age,,,,,,extra,cells"), ""),
    Hostile("unknown-column", b"name,type,colour\nage,integer,blue\n", "colour"),
    Hostile("no-name-column", b"type,label\ninteger,Age\n", "name"),
    Hostile("unknown-type", _csv("visits,age,float,,,,,,"), "float"),
    Hostile("min-above-max", _csv("visits,age,integer,,,120,0,,"), ""),
    Hostile("bad-regex", _csv("visits,code,text,,,,,,([a-z"), ""),
    Hostile("levels-on-a-number", _csv('visits,age,number,,,,,"1=low,2=high",'), ""),
    Hostile("not-a-number-range", _csv("visits,age,integer,,,ten,,,"), ""),
    Hostile("nan-range", _csv("visits,age,number,,,,NaN,,"), ""),
    Hostile("same-name-twice-differently", _csv("visits,age,integer,,,,,,", "visits,age,text,,,,,,"), ""),
    Hostile("deep-json", _deep_json, "JSON", ".json"),
    Hostile("json-not-an-object", b"[1, 2, 3]", "", ".json"),
    Hostile("json-entry-not-an-object", json.dumps(
        {"format": "studylog-dictionary", "version": 1, "variables": ["age"]}).encode(), "", ".json"),
    Hostile("json-type-a-number", json.dumps(
        {"format": "studylog-dictionary", "version": 1,
         "variables": [{"table": "visits", "name": "age", "type": 5}]}).encode(), "", ".json"),
    Hostile("ten-thousand-columns", _wide_header, ""),
    # merely unusual: imported, and their text kept exactly
    Hostile("header-only", CSV_HEADER.encode(), None),
    Hostile("formula-and-markup", _csv(
        'visits,note,text,"=HYPERLINK(""http://x"")","<script>alert(1)</script> &amp; [bold]x[/bold]",,,,'),
        None),
    Hostile("sql-looking-names", _csv("visits,select,text,,,,,,", 'visits,"a"";DROP TABLE variables;--",text,,,,,,'),
            None),
    Hostile("crlf-and-cr-lines", _csv("visits,a,text,,,,,,").replace(b"\n", b"\r\n"), None),
    # refused cleanly: the CSV reader's field limit (128 KiB) bounds what a cell may hold
    Hostile("one-megabyte-description", _big_cell, "field limit"),
    Hostile("five-hundred-variables", _many_rows, None),
]


def _questions_packet(*rows: str, header: str = "id,question,answer,answered_by") -> bytes:
    return (header + "\n" + "".join(row + "\n" for row in rows)).encode("utf-8")


HOSTILE_PACKETS = [
    Hostile("empty", b"", "'id' and 'answer'"),
    Hostile("not-a-packet", b"name,age\nAnn,34\n", "'id' and 'answer'"),
    Hostile("binary", bytes(range(256)) * 40, ""),
    Hostile("latin-1", _questions_packet("1,q,caf\xe9,").replace(b"\xc3\xa9", b"\xe9"), "UTF-8"),
    Hostile("id-not-a-number", _questions_packet("one,q,yes,"), "not a question number"),
    Hostile("id-too-large", _questions_packet("99999999999999999999,q,yes,"), "not a question number"),
    Hostile("id-superscript-digit", _questions_packet("\u00b2,q,yes,"), "not a question number"),
    Hostile("id-arabic-indic-digit", _questions_packet("\u0663,q,yes,"), "not a question number"),
    Hostile("unknown-question", _questions_packet("999,q,yes,"), "no question 999"),
    Hostile("answered-two-ways", _questions_packet("1,q,yes,", "1,q,no,"), "answered differently"),
    Hostile("answer-to-withdrawn", _questions_packet("3,q,yes,"), "withdrawn"),
    Hostile("bad-line-after-good-ones", _questions_packet("1,q,yes,", "2,q,no,", "x,q,maybe,"), "line 4"),
    # merely unusual: the answers are recorded exactly
    Hostile("semicolons", _questions_packet("1;q;yes;Dr. Owner", header="id;question;answer;answered_by"),
            None),
    Hostile("formula-and-markup-answer",
            _questions_packet('1,q,"=HYPERLINK(""http://x"") <b>bold</b> [red]x[/red]",'), None),
    Hostile("one-megabyte-answer", _questions_packet(f"2,q,{'z' * 1_000_000},"), "field limit"),
    Hostile("long-answer", _questions_packet(f"2,q,{'z' * 100_000},"), None),
    Hostile("blank-lines-and-bom", b"\xef\xbb\xbf" + _questions_packet("", "1,q,yes,", ",,,"), None),
]


def _write(item: Hostile, folder: Path) -> Path:
    path = folder / f"{item.name}{item.suffix}"
    if callable(item.content):
        item.content(path)
    else:
        path.write_bytes(item.content)
    return path


def _state(store: Path) -> dict[str, list[tuple]]:
    with sqlite3.connect(store) as raw:
        return {t.name: raw.execute(f'SELECT * FROM "{t.name}"').fetchall() for t in Base.metadata.sorted_tables}


def _refused(result, path: Path, word: str) -> None:  # type: ignore[no-untyped-def]
    assert result.exit_code == 2, (result.exit_code, result.output[:500])
    assert result.stderr.startswith(f"error: {path}") and result.stderr.count("\n") == 1, result.stderr[:500]
    assert "Traceback" not in result.output and word.lower() in result.stderr.lower(), result.stderr[:500]


def test_the_hostile_import_files_are_many_and_distinct() -> None:
    names = [f"var:{h.name}" for h in HOSTILE_DICTIONARIES] + [f"q:{h.name}" for h in HOSTILE_PACKETS]
    assert len(names) == len(set(names)) and len(names) >= 40


@pytest.mark.parametrize("item", HOSTILE_DICTIONARIES, ids=lambda h: h.name)
def test_var_import_of_a_hostile_file(cli, study: Path, tmp_path: Path, item: Hostile) -> None:  # type: ignore[no-untyped-def]
    assert cli("table", "add", "visits").exit_code == 0
    path = _write(item, tmp_path)
    before = _state(study)
    result = cli("var", "import", str(path), "--json")
    if item.error is not None:
        _refused(result, path, item.error)
        assert _state(study) == before
        return
    assert result.exit_code == 0, result.output[:500]
    shown = json.loads(cli("var", "list", "--json").stdout)
    if item.name == "formula-and-markup":
        (entry,) = shown
        assert entry["label"] == '=HYPERLINK("http://x")'
        assert entry["description"] == "<script>alert(1)</script> &amp; [bold]x[/bold]"
    elif item.name == "sql-looking-names":
        assert [v["name"] for v in shown] == ["select", 'a";DROP TABLE variables;--']
    elif item.name == "five-hundred-variables":
        assert len(shown) == 500 and json.loads(result.stdout)["added"] == 500
    elif item.name == "crlf-and-cr-lines":
        assert [v["name"] for v in shown] == ["a"]
    else:
        assert shown == []
    assert cli("doctor").exit_code == 0


@pytest.fixture
def three_questions(cli, study: Path) -> Path:  # type: ignore[no-untyped-def]
    for text in ("Is -99 a refusal?", "What unit is income in?", "Who codes the visits?"):
        assert cli("ask", text, "--to", "data owner").exit_code == 0
    assert cli("withdraw", "3", "--why", "found in the manual").exit_code == 0
    return study


@pytest.mark.parametrize("item", HOSTILE_PACKETS, ids=lambda h: h.name)
def test_questions_import_of_a_hostile_file(cli, three_questions: Path, tmp_path: Path,  # type: ignore[no-untyped-def]
                                            item: Hostile) -> None:
    path = _write(item, tmp_path)
    before = _state(three_questions)
    result = cli("questions", "import", str(path), "--json")
    if item.error is not None:
        _refused(result, path, item.error)
        assert _state(three_questions) == before
        return
    assert result.exit_code == 0, result.output[:500]
    answers = {q["id"]: q["answer"] for q in
               json.loads(cli("questions", "--status", "all", "--json").stdout)["questions"]}
    expected = {
        "semicolons": {1: "yes"},
        "formula-and-markup-answer": {1: '=HYPERLINK("http://x") <b>bold</b> [red]x[/red]'},
        "long-answer": {2: "z" * 100_000},
        "blank-lines-and-bom": {1: "yes"},
    }[item.name]
    assert {k: answers[k] for k in expected} == expected
    assert cli("doctor").exit_code == 0


_MEASURE = """
import resource, subprocess, sys
child = subprocess.run([sys.executable, "-m", "studylog", *sys.argv[1:]], capture_output=True, text=True)
print(child.returncode, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)
"""


@pytest.mark.parametrize(("command", "item"), [
    (["var", "import"], next(h for h in HOSTILE_DICTIONARIES if h.name == "ten-thousand-columns")),
    (["var", "import"], next(h for h in HOSTILE_DICTIONARIES if h.name == "one-megabyte-description")),
], ids=["ten-thousand-columns", "one-megabyte-description"])
def test_memory_stays_bounded_on_the_largest_files(cli, study: Path, tmp_path: Path, command: list[str],  # type: ignore[no-untyped-def]
                                                   item: Hostile) -> None:
    assert cli("table", "add", "visits").exit_code == 0
    path = _write(item, tmp_path)
    measured = subprocess.run([sys.executable, "-c", _MEASURE, *command, str(path)],
                              capture_output=True, text=True, timeout=120, check=True)
    code, peak_kib = map(int, measured.stdout.split())
    assert code == (2 if item.error is not None else 0)
    # a file of at most a few megabytes must not take more than a modest multiple of the program itself
    # (common practice: the interpreter with SQLAlchemy and typer loaded takes some 60-90 MiB)
    assert peak_kib < 250 * 1024, peak_kib
    assert resource.getrusage(resource.RUSAGE_SELF).ru_maxrss > 0
