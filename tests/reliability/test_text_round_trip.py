"""Property: every text that goes in through the command line comes back identical through ``show --json``,
the exports and the dump (hypothesis).

The text of a journal record (decision, question, answer, note) is stored without its leading and
trailing whitespace, by design; reasons (``--why``) and dictionary texts are stored exactly as given (a blank one clears the field). CSV exports neutralise cells a spreadsheet would
run as a formula; read back through ``studylog.safety.restore_cell`` (as the import does) they must give
the text again.
"""

from __future__ import annotations

import csv
import io
import itertools
import json
from pathlib import Path

from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from studylog.safety import restore_cell
from studylog.store import schema
from studylog.store.session import dispose_engines

# any character a terminal argument or a pasted note can hold: no lone surrogates (not text), no NUL
# (a process argument cannot carry one)
TEXT = st.text(st.characters(exclude_categories=("Cs",), exclude_characters="\x00"), min_size=1, max_size=200)
_NAMES = itertools.count(1)
SETTINGS = settings(max_examples=15, deadline=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


def _ok(cli, *args: str):  # type: ignore[no-untyped-def]
    result = cli(*args)
    assert result.exit_code == 0, (args, result.output)
    return result


def _raw(cli, *args: str) -> str:  # type: ignore[no-untyped-def]
    return _ok(cli, *args).stdout_bytes.decode("utf-8")


def _dumped(cli, folder: Path, table: str) -> list[dict]:  # type: ignore[no-untyped-def]
    _ok(cli, "dump", str(folder))
    lines = (folder / f"{table}.jsonl").read_text(encoding="utf-8").split("\n")
    return [json.loads(line) for line in lines if line]


# texts that look like options, formulas, markup or line breaks of every kind
HOSTILE = ["-x", "--help", "=SUM(A1:A9)", "+1", "@cmd", "a\r\nb\rc", "line\u2028sep\x85", "<b>&amp;</b>",
           "'; DROP TABLE variables; --", "\ufeffBOM", "[bold]markup[/bold]", "\\n"]


@SETTINGS
@example(label=HOSTILE[0], description=HOSTILE[1])
@example(label=HOSTILE[2], description=HOSTILE[5])
@example(label=HOSTILE[6], description=HOSTILE[10])
@given(label=TEXT, description=TEXT)
def test_dictionary_texts_come_back_identical(cli, study: Path, tmp_path_factory, label: str,
                                              description: str) -> None:
    # a blank text clears a field (None); any other text is kept exactly
    label_kept, description_kept = (t if t.strip() else None for t in (label, description))
    where = tmp_path_factory.mktemp("dictionary")
    if _ok(cli, "table", "list", "--json").stdout.count('"name"') == 0:
        _ok(cli, "table", "add", "visits")
    name = f"v{next(_NAMES)}"  # hypothesis may run the same example twice: a fresh name each time
    _ok(cli, "var", "add", name, "--type", "text", "--label", label, "--description", description)
    shown = json.loads(_ok(cli, "var", "show", name, "--json").stdout)
    assert (shown["label"], shown["description"]) == (label_kept, description_kept)
    exported = json.loads(_ok(cli, "var", "export", "--format", "json").stdout)
    entry = next(v for v in exported["variables"] if v["name"] == name)
    assert (entry["label"], entry["description"]) == (label_kept, description_kept)
    # CSV, read as a spreadsheet program or the importer would (the bytes: click's runner turns
    # "\r\n" into "\n" in .stdout)
    rows = list(csv.DictReader(io.StringIO(_raw(cli, "var", "export", "--format", "csv"), newline="")))
    row = next(r for r in rows if r["name"] == name)
    assert (restore_cell(row["label"]) or None, restore_cell(row["description"]) or None) == (
        label_kept, description_kept)
    dumped = next(r for r in _dumped(cli, where / "d", "variables") if r["name"] == name)
    assert (dumped["label"], dumped["description"]) == (label_kept, description_kept)


@SETTINGS
@example(text=HOSTILE[0], why=HOSTILE[1])
@example(text=HOSTILE[5], why=HOSTILE[8])
@given(text=TEXT, why=TEXT)
def test_decision_texts_come_back_identical(cli, study: Path, tmp_path_factory, text: str, why: str) -> None:
    if not text.strip() or not why.strip():
        return  # an empty decision is refused (exit 2), tested with the journal
    where = tmp_path_factory.mktemp("decision")
    created = json.loads(_ok(cli, "log", "--why", why, "--json", "--", text).stdout)
    shown = json.loads(_ok(cli, "decision", "show", str(created["id"]), "--json").stdout)
    assert (shown["text"], shown["why"]) == (text.strip(), why)  # a reason is kept exactly
    dumped = next(r for r in _dumped(cli, where / "d", "decisions") if r["id"] == created["id"])
    assert (dumped["text"], dumped["why"]) == (text.strip(), why)
    events = json.loads(_ok(cli, "timeline", "--json").stdout)["events"]
    assert any(e.get("text") == text.strip() for e in events)


@SETTINGS
@example(text=HOSTILE[2], answer=HOSTILE[3])
@example(text=HOSTILE[4], answer=HOSTILE[7])
@given(text=TEXT, answer=TEXT)
def test_question_texts_come_back_identical(cli, study: Path, tmp_path_factory, text: str, answer: str) -> None:
    if not text.strip() or not answer.strip():
        return
    where = tmp_path_factory.mktemp("question")
    asked = json.loads(_ok(cli, "ask", "--to", "data owner", "--json", "--", text).stdout)["id"]
    listed = json.loads(_ok(cli, "questions", "--status", "all", "--json").stdout)["questions"]
    assert next(q for q in listed if q["id"] == asked)["text"] == text.strip()
    packet = _raw(cli, "questions", "export", "--format", "csv")
    row = next(r for r in csv.DictReader(io.StringIO(packet, newline="")) if r["id"] == str(asked))
    assert restore_cell(row["question"]) == text.strip()
    _ok(cli, "answer", "--json", str(asked), "--", answer)
    listed = json.loads(_ok(cli, "questions", "--status", "all", "--json").stdout)["questions"]
    assert next(q for q in listed if q["id"] == asked)["answer"] == answer.strip()
    dumped = next(r for r in _dumped(cli, where / "d", "questions") if r["id"] == asked)
    assert (dumped["text"], dumped["answer"]) == (text.strip(), answer.strip())


@settings(SETTINGS, max_examples=6)
@example(text=HOSTILE[6])
@given(text=TEXT)
def test_a_dump_loaded_elsewhere_gives_back_the_same_texts(cli, study: Path, tmp_path_factory, monkeypatch,
                                                          text: str) -> None:
    if not text.strip():
        return
    where = tmp_path_factory.mktemp("load")
    note = json.loads(_ok(cli, "note", "--json", "--", text).stdout)["id"]
    _ok(cli, "dump", str(where / "a"))
    with monkeypatch.context() as m:
        m.setenv("STUDYLOG_STORE", str(where / "copy.db"))
        _ok(cli, "load", str(where / "a"))
        _ok(cli, "dump", str(where / "b"))
        events = json.loads(_ok(cli, "timeline", "--json").stdout)["events"]
        dispose_engines()
        schema.forget_checked()
    assert (where / "a" / "entries.jsonl").read_bytes() == (where / "b" / "entries.jsonl").read_bytes()
    assert any(e.get("record") == note and e.get("text") == text.strip() for e in events)
