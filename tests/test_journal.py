"""The journal's core: decisions and their life, the facts and code state they capture, the plan freeze,
notes, the timeline, redaction, and many writers at once."""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from sqlalchemy import func, select

from journal_fixtures import add_drop, add_var, git, make_repo, tx
from studylog import gitstate, journal, notes, redaction
from studylog.errors import InvalidValue, NotFound, UsageError
from studylog.store.models import Change, Decision
from studylog.store.session import dispose_engines, locate

INCOME_PROFILE = {
    "type": "number", "count": 88, "missing": 12,
    "missing_codes": [{"code": "-99", "count": 7}, {"code": "-98", "count": 2}],
    "distinct": 80, "distinct_exact": True, "min": 1200.0, "max": 98000.0, "median": 31000.0,
    "outliers": {"tukey": 4, "tukey_far": 1, "modified_z": 2},
}


def test_a_decision_is_adopted_by_default_with_its_fields(study: Path) -> None:
    add_var("income", type="number")
    with tx() as session:
        d = journal.log_decision(session, "Treat -99 as missing", kind="missing", variables=["income"],
                                 why="the owner said so", assumption="mar", code="src/clean.py:40",
                                 seed=7, removed=0)
    assert d["status"] == "adopted"
    assert d["kind"] == "missing"
    assert d["assumption"] == "MAR"
    assert (d["code_path"], d["code_line"], d["code"]) == ("src/clean.py", 40, "src/clean.py:40")
    assert d["variables"] == ["income"]
    assert d["post_hoc"] is False
    assert d["author"] == "tester"
    with tx() as session:
        created = session.scalars(select(Change).where(Change.entity == "decision")).one()
    assert created.action == "create" and created.new["text"] == "Treat -99 as missing"


@pytest.mark.parametrize("bad", [
    {"kind": "cleanup"}, {"assumption": "MNARX"}, {"removed": -1}, {"code": "x.py:0"},
])
def test_bad_values_are_refused(study: Path, bad: dict) -> None:
    with tx() as session, pytest.raises(InvalidValue):
        journal.log_decision(session, "x", **bad)


def test_unknown_variable_and_drop_are_not_found(study: Path) -> None:
    with tx() as session, pytest.raises(NotFound):
        journal.log_decision(session, "x", variables=["nope"])
    with tx() as session, pytest.raises(NotFound):
        journal.log_decision(session, "x", drop_id=99)


def test_code_location_parsing() -> None:
    assert journal.parse_code("a/b.py") == ("a/b.py", None)
    assert journal.parse_code("a/b.py:12") == ("a/b.py", 12)
    assert journal.parse_code(r"C:\work\b.py:3") == (r"C:\work\b.py", 3)
    assert journal.parse_code("notebook.ipynb:cell") == ("notebook.ipynb:cell", None)


def test_kinds_in_help_match_the_core() -> None:
    from studylog.cli.journal import KIND_HELP, KIND_NAMES

    assert tuple(journal.KINDS) == KIND_NAMES
    for name in KIND_NAMES:
        assert name in KIND_HELP


# ---- facts ----

def test_facts_come_from_the_latest_drop_of_the_variables_table(study: Path) -> None:
    add_var("income", type="number")
    add_var("region", type="categorical")
    add_drop({"income": {**INCOME_PROFILE, "count": 50, "missing": 50}}, label="first")
    latest = add_drop({
        "income": INCOME_PROFILE,
        "region": {"type": "categorical", "count": 100, "missing": 0, "distinct": 3,
                   "levels": [{"value": "north", "count": 60}, {"value": "south", "count": 37},
                              {"value": "east", "count": 3}]},
    }, label="second")
    with tx() as session:
        d = journal.log_decision(session, "impute income", kind="missing", variables=["income", "region"])
    income = d["facts"]["income"]
    assert income["drop"] == latest and income["drop_label"] == "second"
    assert (income["n"], income["missing"], income["rows"]) == (88, 12, 100)
    assert income["missing_share"] == pytest.approx(0.12)
    assert income["missing_codes"] == INCOME_PROFILE["missing_codes"]
    assert income["outliers"] == {"tukey": 4, "tukey_far": 1, "modified_z": 2}
    assert income["median"] == 31000.0
    assert [lv["value"] for lv in d["facts"]["region"]["levels"]] == ["north", "south", "east"]
    # the facts stay with the decision even when later drops differ
    add_drop({"income": {**INCOME_PROFILE, "missing": 0, "count": 100}}, label="third")
    with tx() as session:
        assert journal.show_decision(session, d["id"])["facts"]["income"]["missing"] == 12


def test_facts_of_a_named_drop_of_an_absent_column_and_of_masked_variables(study: Path) -> None:
    add_var("income", type="number")
    add_var("name", type="text", sensitivity="direct-identifier")
    first = add_drop({"income": INCOME_PROFILE, "name": {
        "type": "text", "count": 100, "missing": 0, "distinct": 100,
        "levels": [{"value": "Ada Lovelace", "count": 1}]}})
    add_drop({"name": {"type": "text", "count": 100, "missing": 0, "distinct": 100}})
    with tx() as session:
        named = journal.log_decision(session, "x", variables=["income"], drop_id=first)
        latest = journal.log_decision(session, "y", variables=["income", "name"])
    assert named["facts"]["income"]["drop"] == first and named["facts"]["income"]["n"] == 88
    assert latest["facts"]["income"]["present"] is False
    assert "levels" not in latest["facts"]["name"] and latest["facts"]["name"]["values_masked"] is True
    with tx() as session:
        again = journal.log_decision(session, "z", variables=["name"], drop_id=first)
    assert "Ada" not in repr(again["facts"])


def test_no_facts_before_any_drop(study: Path) -> None:
    add_var("income", type="number")
    with tx() as session:
        assert journal.log_decision(session, "x", variables=["income"])["facts"] == {}


# ---- git ----

def test_git_state_of_the_work_tree(study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    repo = make_repo(tmp_path / "repo")
    head = git(repo, "rev-parse", "HEAD")
    monkeypatch.chdir(repo)
    with tx() as session:
        clean = journal.log_decision(session, "clean tree")
    assert clean["git"] == {"commit": head, "dirty": False}
    (repo / "clean.py").write_text("print('changed')\n")
    with tx() as session:
        dirty = journal.log_decision(session, "dirty tree")
    assert dirty["git"] == {"commit": head, "dirty": True}


def test_git_state_beside_the_store_and_its_own_files_do_not_count(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch, cli) -> None:  # type: ignore[no-untyped-def]
    repo = make_repo(tmp_path / "analysis")
    monkeypatch.setenv("STUDYLOG_STORE", str(repo / "studylog.db"))
    assert cli("init").exit_code == 0
    # the current folder (the fixture's work folder) is not a repository: the store's folder is used
    with tx() as session:
        d = journal.log_decision(session, "x")
    assert d["git"] == {"commit": git(repo, "rev-parse", "HEAD"), "dirty": False}
    assert (repo / "studylog.db").exists()


def test_no_git_state_outside_a_repository(study: Path) -> None:
    assert gitstate.capture(locate().path) is None
    with tx() as session:
        assert journal.log_decision(session, "x")["git"] is None


def test_git_state_before_the_first_commit(tmp_path: Path) -> None:
    repo = tmp_path / "fresh"
    repo.mkdir()
    git(repo, "init", "-q")
    (repo / "a.py").write_text("x = 1\n")
    state = gitstate.capture(None, cwd=repo)
    assert state is not None and state.commit is None and state.dirty is True


# ---- the life of a decision ----

def test_proposed_adopted_implemented_superseded_chain(study: Path, tmp_path: Path,
                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    add_var("age")
    with tx() as session:
        first = journal.log_decision(session, "drop ages below 0", kind="exclude-cases", variables=["age"],
                                     proposed=True, removed=3)
    assert first["status"] == "proposed"
    with tx() as session, pytest.raises(InvalidValue, match="adopt it first"):
        journal.implement(session, first["id"])
    with tx() as session:
        assert journal.adopt(session, first["id"])["status"] == "adopted"
    repo = make_repo(tmp_path / "code")
    monkeypatch.chdir(repo)
    with tx() as session:
        done = journal.implement(session, first["id"], "clean.py:1")
    assert done["status"] == "implemented" and done["code"] == "clean.py:1"
    assert done["git"]["commit"] == git(repo, "rev-parse", "HEAD")
    with tx() as session:
        moved = journal.implement(session, first["id"], "clean.py:9")
    assert moved["status"] == "implemented" and moved["code_line"] == 9
    with tx() as session:
        second = journal.supersede(session, first["id"], "set ages below 0 to missing", why="typos")
    assert second["supersedes"] == first["id"]
    assert second["kind"] == "exclude-cases" and second["variables"] == ["age"]
    with tx() as session:
        old = journal.show_decision(session, first["id"])
        third = journal.supersede(session, second["id"], "impute them", why="too many", kind="missing")
        chain = journal.show_decision(session, third["id"])
    assert old["status"] == "superseded" and old["superseded_by"] == [second["id"]]
    assert [c["id"] for c in chain["replaces"]] == [second["id"], first["id"]]
    assert chain["kind"] == "missing"
    steps = [(c["action"], c["field"]) for c in old["history"]]
    assert steps == [
        ("create", None), ("adopt", "status"),
        ("implement", "code_path"), ("implement", "code_line"), ("implement", "git_commit"),
        ("implement", "git_dirty"), ("implement", "status"),
        ("implement", "code_line"),
        ("supersede", "status"), ("supersede", "superseded_by"),
    ]
    with tx() as session, pytest.raises(InvalidValue):
        journal.supersede(session, first["id"], "again", why="x")
    with tx() as session, pytest.raises(InvalidValue):
        journal.adopt(session, first["id"])


def test_revert_needs_a_reason_and_ends_the_decision(study: Path) -> None:
    with tx() as session:
        d = journal.log_decision(session, "log-transform income", kind="transform")
    with tx() as session, pytest.raises(InvalidValue):
        journal.revert(session, d["id"], None)
    with tx() as session:
        assert journal.revert(session, d["id"], "skew was mild")["status"] == "reverted"
    with tx() as session, pytest.raises(InvalidValue):
        journal.implement(session, d["id"])
    with tx() as session, pytest.raises(InvalidValue):
        journal.revert(session, d["id"], "again")
    with tx() as session:
        change = session.scalars(select(Change).where(Change.action == "revert")).one()
    assert (change.old, change.new, change.why) == ("adopted", "reverted", "skew was mild")


def test_listing_filters(study: Path) -> None:
    add_var("age")
    with tx() as session:
        journal.log_decision(session, "a", kind="outliers", variables=["age"])
        journal.log_decision(session, "b", kind="outliers", proposed=True)
        journal.log_decision(session, "c", kind="split", seed=1)
    with tx() as session:
        assert [d["text"] for d in journal.list_decisions(session, kind="outliers")] == ["a", "b"]
        assert [d["text"] for d in journal.list_decisions(session, variable="age")] == ["a"]
        assert [d["text"] for d in journal.list_decisions(session, status="proposed")] == ["b"]
        with pytest.raises(InvalidValue):
            journal.list_decisions(session, status="done")


def test_post_hoc_after_the_plan_is_frozen(study: Path) -> None:
    with tx() as session:
        before = journal.log_decision(session, "primary outcome is renewal", kind="model")
        proposed = journal.log_decision(session, "maybe", proposed=True)
    with tx() as session:
        frozen = journal.freeze_plan(session, "plan v1 in plan.md")
    assert frozen["decisions_before"] == 2
    with tx() as session:
        after = journal.log_decision(session, "add an interaction", kind="model")
        replaced = journal.supersede(session, before["id"], "outcome is renewal within 30 days", why="x")
        adopted = journal.adopt(session, proposed["id"])
    assert before["post_hoc"] is False
    assert after["post_hoc"] is True and replaced["post_hoc"] is True
    # adopting a choice written down before the freeze keeps it pre-specified
    assert adopted["post_hoc"] is False
    with tx() as session:
        state = journal.plan_state(session)
        with pytest.raises(UsageError, match="already frozen"):
            journal.freeze_plan(session)
    assert state["plan_frozen_at"] == frozen["plan_frozen_at"]
    assert (state["pre_specified"], state["post_hoc"]) == (2, 2)


def test_status_sections(study: Path) -> None:
    from studylog import dictionary

    add_var("age")
    add_var("weight")
    with tx() as session:
        journal.log_decision(session, "proposed one", proposed=True)
        journal.log_decision(session, "about age", variables=["age"])
        done = journal.log_decision(session, "about weight", variables=["weight"])
        journal.implement(session, done["id"])
        dictionary.deprecate(session, "weight", why="not collected any more")
    with tx() as session:
        sections = {s.name: s for s in journal.status_sections(session)}
    assert [i["text"] for i in sections["decisions-proposed"].items] == ["proposed one"]
    assert [i["text"] for i in sections["decisions-unimplemented"].items] == ["about age"]
    deprecated = sections["decisions-deprecated-variables"]
    assert [(i["text"], i["variable"]) for i in deprecated.items] == [("about weight", "weight")]
    assert deprecated.level == "warning"


# ---- notes and the timeline ----

def test_notes_conclusions_next_steps_and_the_timeline(study: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    add_var("age")
    with tx() as session:
        note = notes.add_entry(session, "note", "ages cluster at 65", variables=["age"], tags=["eda", "eda"])
        d = journal.log_decision(session, "cap age at 100", kind="outliers", variables=["age"])
    monkeypatch.setenv("STUDYLOG_AUTHOR", "second analyst")
    from studylog import clock

    clock.author.cache_clear()
    try:
        with tx() as session:
            journal.revert(session, d["id"], "no ages above 100 after all")
            notes.add_entry(session, "conclusion", "renewal falls with age")
            notes.add_entry(session, "next", "repeat with the April drop")
    finally:
        clock.author.cache_clear()
    assert note["tags"] == ["eda"]
    with tx() as session:
        events = notes.timeline(session)
        about_age = notes.timeline(session, variable="age")
        future = notes.timeline(session, since="2999-01-01")
        with pytest.raises(InvalidValue):
            notes.add_entry(session, "memo", "x")
        with pytest.raises(InvalidValue):
            notes.timeline(session, since="last week")
    stamps = [e["at"] for e in events]
    assert stamps == sorted(stamps)
    summary = [(e["entity"], e["action"], e["author"]) for e in events]
    assert summary[0] == ("study", "create", "tester")
    assert ("entry", "create", "tester") in summary
    assert ("decision", "revert", "second analyst") in summary
    assert summary[-1] == ("entry", "create", "second analyst") and events[-1]["kind"] == "next"
    assert {e["entity"] for e in about_age} == {"variable", "entry", "decision"}
    assert "renewal falls with age" not in [e["text"] for e in about_age]
    assert future == []


def test_timeline_includes_checked_drops(study: Path) -> None:
    add_var("age")
    drop = add_drop({"age": {"count": 10, "missing": 0}}, label="April")
    with tx() as session:
        events = notes.timeline(session)
    checks = [e for e in events if e["entity"] == "drop"]
    assert len(checks) == 1 and checks[0]["record"] == drop and checks[0]["author"] == "checker"
    assert "April" in checks[0]["text"]


# ---- redaction ----

SECRET = "Jane Roe, born 1961-04-02, NHS 943 476 5919"


def _store_bytes(path: Path) -> bytes:
    data = path.read_bytes()
    wal = Path(str(path) + "-wal")
    if wal.exists():
        data += wal.read_bytes()
    return data


# SQLite keeps replaced bytes in free page space, on free-list pages and in old WAL frames until the file is
# rebuilt (SQLite documentation: PRAGMA secure_delete, VACUUM, wal_checkpoint(TRUNCATE); from memory), so
# the test reads the bytes of the store and its write-ahead log, not the rows.
@pytest.mark.parametrize("kind", ["decision", "note", "question", "threat"])
def test_redaction_leaves_no_trace_of_the_text(study: Path, kind: str) -> None:
    from studylog import questions, threats

    needle = SECRET.encode()
    with tx() as session:
        if kind == "decision":
            record = journal.log_decision(session, f"exclude {SECRET}", why=f"because {SECRET} asked")
            journal.revert(session, record["id"], f"{SECRET} changed her mind")
        elif kind == "note":
            # long enough to spill onto overflow pages, which a plain update puts on the free list
            record = notes.add_entry(session, "note", "a long call. " * 700 + f"called {SECRET}")
        elif kind == "question":
            record = questions.ask(session, f"Is {SECRET} in the data twice?", to="owner")
            questions.answer(session, record["id"], f"yes, {SECRET} is")
        else:
            record = threats.add(session, f"{SECRET} may be identifiable", kind="internal")
            threats.update(session, record["id"], mitigation=f"drop {SECRET}", why="privacy")
        # unrelated records written after it, so the text sits in the middle of the file
        for i in range(30):
            notes.add_entry(session, "note", f"filler note {i} " + "x" * 200)
    dispose_engines()
    # another process (a notebook) has the store open: the write-ahead log is not folded in and removed
    # when this one closes, so old frames and pages stay unless the redaction deals with them
    other = sqlite3.connect(str(study))
    try:
        other.execute("SELECT count(*) FROM entries").fetchall()
        assert needle in _store_bytes(study)
        result = redaction.redact(locate(), kind, record["id"], "personal data pasted by mistake")
        assert result["vacuumed"] is True and result["checkpointed"] is True
        dispose_engines()
        for piece in (needle, b"Jane Roe", b"943 476 5919"):
            assert piece not in _store_bytes(study)
    finally:
        other.close()
    with tx() as session:
        entity = "entry" if kind == "note" else kind
        mark = session.scalars(select(Change).where(Change.entity == entity, Change.action == "redact")).one()
        events = notes.timeline(session)
    assert mark.why == "personal data pasted by mistake" and mark.author == "tester"
    assert mark.old is None and mark.new is None and "text" in mark.field
    assert any(e["action"] == "redact" for e in events)
    assert all("Jane" not in repr(e) for e in events)


def test_redaction_refusals(study: Path) -> None:
    with tx() as session:
        note = notes.add_entry(session, "note", "x")
    with pytest.raises(InvalidValue):
        redaction.redact(locate(), "note", note["id"], None)
    with pytest.raises(NotFound):
        redaction.redact(locate(), "conclusion", note["id"], "wrong kind")
    with pytest.raises(InvalidValue):
        redaction.redact(locate(), "variable", 1, "not a journal record")
    redaction.redact(locate(), "note", note["id"], "once")
    with pytest.raises(InvalidValue, match="no text left"):
        redaction.redact(locate(), "note", note["id"], "twice")


def test_redacting_one_piece_keeps_the_rest(study: Path) -> None:
    with tx() as session:
        d = journal.log_decision(session, "exclude duplicates", why="Mr Smith said so", evidence="42 repeats")
        journal.revert(session, d["id"], "Mr Smith was wrong")
    result = redaction.redact(locate(), "decision", d["id"], "a name", ["Mr Smith"])
    assert result["fields"] == ["why"]
    with tx() as session:
        after = journal.show_decision(session, d["id"])
    assert (after["text"], after["why"], after["evidence"]) == (
        "exclude duplicates", "[redacted] said so", "42 repeats")
    assert after["history"][0]["new"]["why"] == "[redacted] said so"
    assert after["history"][0]["new"]["text"] == "exclude duplicates"
    assert after["history"][1]["why"] == "[redacted] was wrong"
    with pytest.raises(InvalidValue, match="does not appear"):
        redaction.redact(locate(), "decision", d["id"], "again", ["Mr Smith"])


# ---- many writers ----

WRITER = """
import sys, time
from pathlib import Path
import typer.main
from studylog.cli.app import app
# the command tree is built once; each decision is still one command, one transaction
command = typer.main.get_command(app)
# start together: say ready, wait for the go
barrier = Path(sys.argv[2])
(barrier / f"ready-{sys.argv[1]}").touch()
while not (barrier / "go").exists():
    time.sleep(0.005)
for i in range(200):
    try:
        command.main(["log", f"decision {sys.argv[1]}-{i}", "--kind", "other", "--json"], prog_name="studylog")
    except SystemExit as exc:
        if exc.code not in (0, None):
            sys.exit(f"decision {i} failed with exit {exc.code}")
"""


def test_two_processes_logging_at_once_lose_nothing(study: Path, tmp_path: Path) -> None:
    import time

    env = {**os.environ, "STUDYLOG_STORE": str(study)}
    writers = [subprocess.Popen([sys.executable, "-c", WRITER, name, str(tmp_path)], env=env,
                                stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
               for name in ("a", "b")]
    deadline = time.monotonic() + 120
    while not all((tmp_path / f"ready-{n}").exists() for n in "ab"):
        assert time.monotonic() < deadline and all(w.poll() is None for w in writers), "a writer did not start"
        time.sleep(0.01)
    (tmp_path / "go").touch()
    for writer in writers:
        _out, err = writer.communicate(timeout=240)
        assert writer.returncode == 0, err
    with tx() as session:
        assert session.scalar(select(func.count(Decision.id))) == 400
        texts = set(session.scalars(select(Decision.text)))
        creates = session.scalar(select(func.count(Change.id)).where(Change.entity == "decision"))
    assert texts == {f"decision {w}-{i}" for w in "ab" for i in range(200)}
    assert creates == 400
    # they did run at once: the two writers' decisions interleave
    with tx() as session:
        order = [t.split()[1][0] for t in session.scalars(select(Decision.text).order_by(Decision.id))]
    assert sum(1 for x, y in zip(order, order[1:]) if x != y) > 1


def test_the_history_replays_to_every_journal_record(study: Path, tmp_path: Path) -> None:
    """The doctor's replay of the change history ends at each record's current values (nothing written
    without its change row), through every kind of change the journal makes, redactions included."""
    from studylog import questions, replay, threats

    add_var("age")
    with tx() as session:
        a = journal.log_decision(session, "a", kind="outliers", variables=["age"], proposed=True, why="w")
        journal.adopt(session, a["id"])
        journal.implement(session, a["id"], "x.py:3")
        b = journal.supersede(session, a["id"], "b", why="better")
        journal.revert(session, b["id"], "not needed")
        journal.freeze_plan(session, "plan v1")
        notes.add_entry(session, "note", "seen by Jane Roe", variables=["age"], tags=["t"])
        q = questions.ask(session, "Is -99 a refusal?", variables=["age"], to="owner", priority="high")
        questions.answer(session, q["id"], "yes")
        questions.answer(session, q["id"], "yes, since 2020", by="Dr Rivera")
        w = questions.ask(session, "moot?")
        questions.withdraw(session, w["id"], "moot")
        t = threats.add(session, "selection", kind="internal", decisions=[a["id"]])
        threats.update(session, t["id"], mitigation="weights", status="mitigated", why="done")
    redaction.redact(locate(), "note", 1, "a name", ["Jane Roe"])
    redaction.redact(locate(), "question", q["id"], "whole")
    with tx() as session:
        assert replay.mismatches(session) == []
        assert replay.history_of_missing_records(session) == []
        assert replay.orphaned_links(session) == []
