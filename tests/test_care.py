"""``studylog doctor``, ``backup`` and ``restore``: finding damage, copying safely, putting back."""

from __future__ import annotations

import json
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
from sqlalchemy import select, text

from store_filler import snapshot, work_through_commands
from studylog import care, dictionary, history
from studylog.store import schema
from studylog.store.models import Decision, Link, Variable
from studylog.store.session import StoreLocation, dispose_engines, transaction


def _loc(path: Path) -> StoreLocation:
    return StoreLocation(f"sqlite:///{path}", path)


def _report(cli) -> tuple[int, dict]:  # type: ignore[no-untyped-def]
    result = cli("doctor", "--json")
    return result.exit_code, json.loads(result.stdout)


def _status(report: dict) -> dict[str, str]:
    return {c["name"]: c["status"] for c in report["checks"]}


def _dictionary(location: StoreLocation) -> None:
    """A small dictionary written through the dictionary's own operations (so with its history)."""
    with transaction(location, write=True) as session:
        dictionary.add_table(session, "visits", key="visit_id")
        dictionary.add_variable(session, "visit_id", {"type": "identifier"})
        dictionary.add_variable(session, "age", {"type": "integer", "minimum": "0", "maximum": "120"})
        dictionary.add_variable(session, "bmi", {"type": "number", "derived_from": ["age"]})
    with transaction(location, write=True) as session:
        dictionary.update_variable(session, "age", {"label": "Age at visit", "max_missing": 0.1})
        dictionary.confirm(session, "age")
        dictionary.update_variable(session, "age", {"unit": "years"}, why="asked the data owner")
        dictionary.rename(session, "age", "age_years", why="clearer")
        dictionary.update_table(session, "visits", {"grain": "one row per visit"}, why="agreed")


# ---------------------------------------------------------------------------------------------------
# doctor


def test_doctor_on_a_healthy_store(cli, study: Path) -> None:
    _dictionary(_loc(study))
    code, report = _report(cli)
    assert code == 0
    assert report["healthy"] is True and report["problems"] == 0
    assert report["schema_version"] == schema.SCHEMA_VERSION
    assert report["journal_mode"] == "wal"
    assert report["size_bytes"] >= study.stat().st_size > 0
    assert set(_status(report)) >= {"integrity", "foreign-keys", "schema", "links", "history", "filesystem"}
    assert set(_status(report).values()) == {"ok"}
    human = cli("doctor")
    assert human.exit_code == 0 and "healthy" in human.stdout


def test_doctor_finds_a_field_changed_without_its_history(cli, study: Path) -> None:
    _dictionary(_loc(study))
    with sqlite3.connect(study) as raw:
        raw.execute("UPDATE variables SET unit = 'months' WHERE name = 'age_years'")
    code, report = _report(cli)
    assert code == 3
    (check,) = [c for c in report["checks"] if c["name"] == "history"]
    assert check["status"] == "problem"
    assert check["problems"] == [{"entity": "variable", "id": 2, "field": "unit",
                                  "problem": "does not replay", "history": "years", "current": "months"}]
    assert check["hint"]
    human = cli("doctor")
    assert human.exit_code == 3
    assert "what to do" in human.stdout and "not healthy" in human.stderr


def test_doctor_finds_a_broken_chain_of_changes(cli, study: Path) -> None:
    location = _loc(study)
    _dictionary(location)
    with transaction(location, write=True) as session:
        variable = session.scalars(select(Variable).where(Variable.name == "bmi")).one()
        # a change whose "old" is not what the history left: an edit in between was lost
        history.record(session, "variable", variable.id, "update", field="label", old="Body mass",
                       new="BMI")
        variable.label = "BMI"
    code, report = _report(cli)
    assert code == 3
    (problem,) = [c for c in report["checks"] if c["name"] == "history"][0]["problems"]
    assert problem["problem"] == "broken chain" and problem["field"] == "label"
    assert problem["expected_old"] is None and problem["old"] == "Body mass"


def test_a_redaction_ends_the_check_of_its_field(cli, study: Path) -> None:
    location = _loc(study)
    with transaction(location, write=True) as session:
        decision = Decision(text="call Ann Smith on 555-0101", author="t", created_at="t", updated_at="t")
        session.add(decision)
        session.flush()
        history.record(session, "decision", decision.id, "create", new={"text": decision.text})
        history.record(session, "decision", decision.id, "redact", field="text", why="personal data")
        decision.text = "[redacted]"
    code, report = _report(cli)
    assert code == 0, report


def test_doctor_finds_orphaned_links_and_history_of_missing_records(cli, study: Path) -> None:
    location = _loc(study)
    with transaction(location, write=True) as session:
        session.add(Link(source_kind="decision", source_id=999, variable_id=None, decision_id=None))
        session.add(Link(source_kind="gadget", source_id=1, variable_id=None, decision_id=None))
        history.record(session, "question", 41, "create", new={"text": "?"})
    code, report = _report(cli)
    assert code == 3
    checks = {c["name"]: c for c in report["checks"]}
    assert [p["reason"] for p in checks["links"]["problems"]] == ["no such record", "unknown kind of record"]
    assert checks["history-records"]["problems"] == [{"entity": "question", "id": 41}]


def test_doctor_finds_a_damaged_file(cli, study: Path) -> None:
    _dictionary(_loc(study))
    dispose_engines()
    page = 4096
    data = bytearray(study.read_bytes())
    assert len(data) > 6 * page
    # scribble over the b-tree pages after the schema page (not the header: that is a different case)
    for start in range(2 * page, len(data), page):
        data[start + 8 : start + 200] = b"\xa5" * 192
    study.write_bytes(bytes(data))
    Path(f"{study}-wal").unlink(missing_ok=True)
    Path(f"{study}-shm").unlink(missing_ok=True)
    code, report = _report(cli)
    assert code == 3
    assert _status(report)["integrity"] == "problem"
    (check,) = [c for c in report["checks"] if c["name"] == "integrity"]
    assert "restore" in check["hint"]


def test_doctor_on_a_file_that_is_not_a_database(cli, study: Path) -> None:
    dispose_engines()
    for suffix in ("-wal", "-shm"):
        Path(f"{study}{suffix}").unlink(missing_ok=True)
    study.write_bytes(b"name,age\nAnn,34\n" * 100)
    code, report = _report(cli)
    assert code == 3
    assert _status(report)["open"] == "problem"
    result = cli("doctor")
    assert result.exit_code == 3 and "Traceback" not in result.output


def test_doctor_on_a_newer_and_an_older_schema(cli, study: Path) -> None:
    with sqlite3.connect(study) as raw:
        raw.execute("UPDATE studylog_meta SET value = ? WHERE key = 'schema_version'",
                    (str(schema.SCHEMA_VERSION + 1),))
    code, report = _report(cli)
    assert code == 3 and _status(report)["schema"] == "problem"
    with sqlite3.connect(study) as raw:
        raw.execute("UPDATE studylog_meta SET value = '1' WHERE key = 'schema_version'")
    code, report = _report(cli)
    # an older store is healthy: the next command upgrades it (after a backup copy)
    assert code == 0 and _status(report)["schema"] == "warning"


def test_doctor_does_not_change_the_store(cli, study: Path) -> None:
    _dictionary(_loc(study))
    with sqlite3.connect(study) as raw:
        raw.execute("UPDATE studylog_meta SET value = '1' WHERE key = 'schema_version'")
    before = snapshot_raw(study)
    assert cli("doctor").exit_code == 0
    assert snapshot_raw(study) == before  # in particular: not migrated


def snapshot_raw(path: Path) -> list[tuple]:
    with sqlite3.connect(path) as raw:
        return list(raw.execute("SELECT key, value FROM studylog_meta ORDER BY key")) + list(
            raw.execute("SELECT * FROM variables ORDER BY id"))


@pytest.mark.parametrize(
    ("fstype", "network"),
    [("nfs4", True), ("cifs", True), ("fuse.sshfs", True), ("9p", True), ("smb3", True),
     ("ext4", False), ("tmpfs", False), ("fuse.other", False)],
)
def test_network_filesystems_are_recognised(tmp_path: Path, fstype: str, network: bool) -> None:
    mounts = tmp_path / "mounts"
    store = tmp_path / "team share" / "studylog.db"
    escaped = str(store.parent).replace(" ", "\\040")
    mounts.write_text(f"/dev/vda / ext4 rw 0 0\nserver:/x {escaped} {fstype} rw 0 0\n"
                      f"server:/y {escaped}-other nfs rw 0 0\n")
    found = care.filesystem_of(store, mounts)
    assert found == {"type": fstype, "mount": str(store.parent), "network": network}


def test_doctor_warns_about_a_network_filesystem_and_says_what_to_do(
    cli, study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    mounts = tmp_path / "mounts"
    mounts.write_text(f"/dev/vda / ext4 rw 0 0\nfiler:/studies {study.parent} nfs4 rw 0 0\n")
    monkeypatch.setattr(care, "MOUNTS_FILE", mounts)
    code, report = _report(cli)
    assert code == 3
    (check,) = [c for c in report["checks"] if c["name"] == "filesystem"]
    assert check["status"] == "problem" and "nfs4" in check["message"]
    assert "local disk" in check["hint"] and "postgresql" in check["hint"]


def test_doctor_without_a_store_is_bad_input(cli, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("STUDYLOG_STORE", str(tmp_path / "nowhere" / "studylog.db"))
    result = cli("doctor")
    assert result.exit_code == 2 and "studylog init" in result.stderr


# ---------------------------------------------------------------------------------------------------
# backup


def test_backup_is_a_complete_single_file_store(cli, study: Path, tmp_path: Path) -> None:
    _dictionary(_loc(study))
    target = tmp_path / "copy.db"
    result = cli("backup", str(target), "--json")
    assert result.exit_code == 0, result.output
    document = json.loads(result.stdout)
    assert document["integrity"] == "ok" and document["schema_version"] == schema.SCHEMA_VERSION
    assert not Path(f"{target}-wal").exists()
    assert snapshot(_loc(target)) == snapshot(_loc(study))


def test_backup_refuses_to_overwrite_without_force(cli, study: Path, tmp_path: Path) -> None:
    target = tmp_path / "copy.db"
    target.write_text("precious")
    result = cli("backup", str(target))
    assert result.exit_code == 2 and "--force" in result.stderr
    assert target.read_text() == "precious"
    assert cli("backup", str(target), "--force").exit_code == 0
    assert care.is_sqlite_file(target)


def test_backup_refuses_the_store_itself_and_missing_folders(cli, study: Path, tmp_path: Path) -> None:
    assert cli("backup", str(study), "--force").exit_code == 2
    assert cli("backup", str(tmp_path / "no" / "such" / "copy.db")).exit_code == 2
    assert cli("doctor").exit_code == 0


_WRITER = """
import sys, time
from studylog.store.session import locate, transaction
from studylog import history
from studylog.store.models import Decision
location = locate()
deadline = time.monotonic() + float(sys.argv[1])
n = 0
while time.monotonic() < deadline:
    with transaction(location, write=True) as session:
        d = Decision(text=f"decision {n}", author="w", created_at="t", updated_at="t")
        session.add(d)
        session.flush()
        history.record(session, "decision", d.id, "create", new={"text": d.text})
    n += 1
print(n)
"""


def test_backup_while_another_process_writes_is_consistent(cli, study: Path, tmp_path: Path) -> None:
    writer = subprocess.Popen([sys.executable, "-c", _WRITER, "2.0"], stdout=subprocess.PIPE, text=True)
    copies = []
    time.sleep(0.5)
    for i in range(4):
        target = tmp_path / f"copy{i}.db"
        result = cli("backup", str(target))
        assert result.exit_code == 0, result.output
        copies.append(target)
        time.sleep(0.2)
    written = int(writer.communicate(timeout=30)[0])
    assert writer.returncode == 0 and written > 0
    seen = []
    for copy in copies:
        with sqlite3.connect(copy) as raw:
            assert raw.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
            decisions = raw.execute("SELECT count(*) FROM decisions").fetchone()[0]
            created = raw.execute(
                "SELECT count(*) FROM changes WHERE entity='decision' AND action='create'").fetchone()[0]
        # each copy is one moment of the store: every decision with its history, none half-written
        assert decisions == created
        seen.append(decisions)
    assert seen == sorted(seen) and seen[-1] <= written
    assert len(set(seen)) > 1  # the copies really were taken while the writer was writing


# ---------------------------------------------------------------------------------------------------
# restore


def test_restore_puts_a_backup_back_and_keeps_the_replaced_store(cli, study: Path, tmp_path: Path) -> None:
    location = _loc(study)
    _dictionary(location)
    saved = tmp_path / "saved.db"
    assert cli("backup", str(saved)).exit_code == 0
    expected = snapshot(_loc(saved))
    with transaction(location, write=True) as session:
        dictionary.add_variable(session, "written_after", {"type": "text"})
    after = snapshot(location)
    refused = cli("restore", str(saved))
    assert refused.exit_code == 2 and "--force" in refused.stderr
    assert snapshot(location) == after
    result = cli("restore", str(saved), "--force", "--json")
    assert result.exit_code == 0, result.output
    document = json.loads(result.stdout)
    assert snapshot(location) == expected
    kept = Path(document["kept"])
    assert kept.parent == study.parent and snapshot(_loc(kept)) == after
    assert cli("doctor").exit_code == 0


def test_restore_while_another_connection_is_open(cli, study: Path, tmp_path: Path) -> None:
    saved = tmp_path / "saved.db"
    assert cli("backup", str(saved)).exit_code == 0
    with transaction(_loc(study), write=True) as session:
        dictionary.add_table(session, "later")
    reader = sqlite3.connect(study)
    try:
        assert reader.execute("SELECT count(*) FROM data_tables").fetchone()[0] == 1
        assert cli("restore", str(saved), "--force").exit_code == 0
        # the other connection sees the restored store, not a file swapped under it
        assert reader.execute("SELECT count(*) FROM data_tables").fetchone()[0] == 0
        assert reader.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    finally:
        reader.close()


def _not_a_store(path: Path) -> None:
    with sqlite3.connect(path) as raw:
        raw.execute("CREATE TABLE people (name TEXT)")


def _newer(path: Path) -> None:
    with sqlite3.connect(path) as raw:
        raw.execute("UPDATE studylog_meta SET value = '99' WHERE key = 'schema_version'")


def _damaged(path: Path) -> None:
    data = bytearray(path.read_bytes())
    for start in range(2 * 4096, len(data), 4096):
        data[start + 8 : start + 200] = b"\x5a" * 192
    path.write_bytes(bytes(data))


@pytest.mark.parametrize(
    ("spoil", "says"),
    [(lambda p: p.write_bytes(b"just text\n"), "not a SQLite database"),
     (_not_a_store, "not a studylog store"),
     (_newer, "newer studylog"),
     (_damaged, "damaged"),
     (lambda p: p.unlink(), "no such file")],
)
def test_restore_checks_the_backup_first(cli, study: Path, tmp_path: Path, spoil, says: str) -> None:
    _dictionary(_loc(study))
    saved = tmp_path / "saved.db"
    if spoil is _not_a_store:
        pass
    else:
        assert cli("backup", str(saved)).exit_code == 0
    spoil(saved)
    before = snapshot(_loc(study))
    result = cli("restore", str(saved), "--force")
    assert result.exit_code == 2, result.output
    assert says in result.stderr and "Traceback" not in result.output
    assert snapshot(_loc(study)) == before
    assert not list(study.parent.glob("*.replaced-*"))


def test_restore_into_a_place_with_no_store_needs_no_force(
    cli, study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    saved = tmp_path / "saved.db"
    assert cli("backup", str(saved)).exit_code == 0
    target = tmp_path / "fresh" / "studylog.db"
    monkeypatch.setenv("STUDYLOG_STORE", str(target))
    assert cli("restore", str(saved)).exit_code == 0
    assert cli("doctor").exit_code == 0
    with transaction(_loc(target), write=False) as session:
        assert session.execute(text("SELECT title FROM study")).scalar() == "Test study"


def test_restore_over_a_damaged_store_keeps_the_damaged_bytes(cli, study: Path, tmp_path: Path) -> None:
    _dictionary(_loc(study))
    saved = tmp_path / "saved.db"
    assert cli("backup", str(saved)).exit_code == 0
    dispose_engines()
    _damaged(study)
    damaged = study.read_bytes()
    assert cli("doctor").exit_code == 3
    result = cli("restore", str(saved), "--force", "--json")
    assert result.exit_code == 0, result.output
    assert Path(json.loads(result.stdout)["kept"]).read_bytes() == damaged
    assert cli("doctor").exit_code == 0
    assert snapshot(_loc(study)) == snapshot(_loc(saved))


def test_doctor_finds_every_history_written_by_the_commands_sound(cli, study: Path, tmp_path: Path) -> None:
    """A study worked through every command that writes: the doctor must raise no false alarm."""
    work_through_commands(cli, tmp_path)
    code, report = _report(cli)
    assert code == 0, [c for c in report["checks"] if c["status"] != "ok"]
    assert report["healthy"] is True


def test_doctor_on_a_database_server_url_runs_what_applies(study: Path) -> None:
    # a store reached by URL only (as a PostgreSQL one is): no file checks, but schema, links, history
    _dictionary(_loc(study))
    report = care.doctor(StoreLocation(f"sqlite:///{study}", None))
    names = {c["name"]: c["status"] for c in report["checks"]}
    assert names == {"file": "ok", "schema": "ok", "links": "ok", "history": "ok"}
    assert report["healthy"] is True and report["size_bytes"] is None
    with sqlite3.connect(study) as raw:
        raw.execute("UPDATE variables SET label = 'edited by hand' WHERE name = 'bmi'")
    report = care.doctor(StoreLocation(f"sqlite:///{study}", None))
    assert report["healthy"] is False and report["problems"] == 1


def test_backup_and_restore_of_a_server_store_point_to_the_servers_tools(cli, tmp_path: Path,
                                                                         monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("STUDYLOG_STORE", "postgresql+psycopg://analyst@db.invalid/study")
    for args in (["backup", str(tmp_path / "b.db")], ["restore", str(tmp_path / "b.db"), "--force"]):
        result = cli(*args)
        assert result.exit_code == 2 and "dump" in result.stderr, result.output
