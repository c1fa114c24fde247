"""``studylog dump`` / ``load``: the whole store as sorted text files, and back, byte for byte."""

from __future__ import annotations

import base64
import json
import os
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from store_filler import TRICKY_TEXTS, fill, snapshot, work_through_commands
from studylog import dump as dumping
from studylog.store import schema
from studylog.store.models import Base, Decision, DigestChunk
from studylog.store.session import StoreLocation, dispose_engines, transaction


def _loc(path: Path) -> StoreLocation:
    return StoreLocation(f"sqlite:///{path}", path)


def _files(directory: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(directory.iterdir())}


@pytest.fixture
def filled(study: Path) -> Path:
    fill(_loc(study), rows_per_table=8)
    return study


def test_dump_writes_one_sorted_file_per_table_and_a_manifest(cli, filled: Path, tmp_path: Path) -> None:
    out = tmp_path / "record"
    result = cli("dump", str(out), "--json")
    assert result.exit_code == 0, result.output
    document = json.loads(result.stdout)
    names = {t.name for t in Base.metadata.sorted_tables}
    assert {p.name for p in out.iterdir()} == {f"{n}.jsonl" for n in names} | {"manifest.json"}
    assert set(document["tables"]) == names
    for name in names:
        lines = (out / f"{name}.jsonl").read_text(encoding="utf-8").split("\n")
        assert lines[-1] == ""  # every record ends with a newline, and nothing follows
        records = [json.loads(line) for line in lines[:-1]]
        assert len(records) == document["tables"][name]
        for record in records:
            assert list(record) == sorted(record)
        if "id" in (records[0] if records else {}):
            ids = [r["id"] for r in records]
            assert ids == sorted(ids) and len(set(ids)) == len(ids)
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["schema_version"] == schema.SCHEMA_VERSION
    assert manifest["tables"] == document["tables"]


def test_load_of_a_dump_gives_a_store_whose_dump_is_byte_identical(
    cli, filled: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    first, second = tmp_path / "first", tmp_path / "second"
    assert cli("dump", str(first)).exit_code == 0
    copy = tmp_path / "copy" / "studylog.db"
    monkeypatch.setenv("STUDYLOG_STORE", str(copy))
    result = cli("load", str(first), "--json")
    assert result.exit_code == 0, result.output
    assert json.loads(result.stdout)["records"] == sum(
        json.loads((first / "manifest.json").read_text())["tables"].values()
    )
    assert cli("dump", str(second)).exit_code == 0
    assert _files(first) == _files(second)
    # not only the same text: the same rows, ids, bytes and types
    assert snapshot(_loc(copy)) == snapshot(_loc(filled))
    # the filler's random links and histories do not make sense as records, but the file is sound
    checks = {c["name"]: c["status"] for c in json.loads(cli("doctor", "--json").stdout)["checks"]}
    assert checks["integrity"] == checks["foreign-keys"] == checks["schema"] == "ok"


def test_dump_is_stable_and_carries_no_time_of_its_own(cli, filled: Path, tmp_path: Path) -> None:
    a, b = tmp_path / "a", tmp_path / "b"
    assert cli("dump", str(a)).exit_code == 0
    assert cli("dump", str(b)).exit_code == 0
    assert _files(a) == _files(b)
    # dumping again into the same folder is the git workflow: same bytes again
    assert cli("dump", str(a)).exit_code == 0
    assert _files(a) == _files(b)


def test_binary_digests_are_base64_of_the_stored_bytes(cli, filled: Path, tmp_path: Path) -> None:
    out = tmp_path / "d"
    assert cli("dump", str(out)).exit_code == 0
    with transaction(_loc(filled), write=False) as session:
        stored = {c.id: c.data for c in session.scalars(select(DigestChunk))}
    lines = (out / "digest_chunks.jsonl").read_text().split("\n")[:-1]
    dumped = {r["id"]: base64.b64decode(r["data"]) for r in map(json.loads, lines)}
    assert dumped == stored and any(len(v) > 0 for v in stored.values())


def test_text_with_unicode_line_separators_survives(cli, filled: Path, tmp_path: Path,
                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    # str.splitlines() would break a record at U+2028, \x1c or \x85: the loader must split on \n only
    out = tmp_path / "d"
    assert cli("dump", str(out)).exit_code == 0
    raw = (out / "decisions.jsonl").read_text(encoding="utf-8")
    assert "\u2028" in raw  # ensure_ascii=False keeps the text readable in a diff
    monkeypatch.setenv("STUDYLOG_STORE", str(tmp_path / "n" / "studylog.db"))
    assert cli("load", str(out)).exit_code == 0
    with transaction(_loc(tmp_path / "n" / "studylog.db"), write=False) as session:
        texts = set(session.scalars(select(Decision.text)))
    assert any(TRICKY_TEXTS[4] in t for t in texts)


def test_load_refuses_a_store_that_holds_records(cli, filled: Path, tmp_path: Path) -> None:
    out = tmp_path / "d"
    assert cli("dump", str(out)).exit_code == 0
    before = snapshot(_loc(filled))
    result = cli("load", str(out))
    assert result.exit_code == 2
    assert "not empty" in result.stderr
    assert snapshot(_loc(filled)) == before


def test_a_damaged_dump_is_refused_and_leaves_no_store_behind(
    cli, filled: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    out = tmp_path / "d"
    assert cli("dump", str(out)).exit_code == 0
    target = tmp_path / "n" / "studylog.db"
    monkeypatch.setenv("STUDYLOG_STORE", str(target))
    lines = (out / "variables.jsonl").read_text().split("\n")
    lines[2] = lines[2][:-5]  # a truncated record
    (out / "variables.jsonl").write_text("\n".join(lines))
    result = cli("load", str(out))
    assert result.exit_code == 2
    assert "variables.jsonl, line 3" in result.stderr
    assert "Traceback" not in result.output
    assert not target.exists()


@pytest.mark.parametrize("damage", ["count", "field", "base64", "reference", "manifest", "schema"])
def test_every_kind_of_damaged_dump_is_bad_input(
    cli, filled: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, damage: str
) -> None:
    out = tmp_path / "d"
    assert cli("dump", str(out)).exit_code == 0
    manifest = json.loads((out / "manifest.json").read_text())
    if damage == "count":
        manifest["tables"]["questions"] += 1
    elif damage == "field":
        lines = (out / "threats.jsonl").read_text().split("\n")[:-1]
        record = json.loads(lines[0]) | {"surprise": 1}
        (out / "threats.jsonl").write_text("\n".join([json.dumps(record), *lines[1:]]) + "\n")
    elif damage == "base64":
        lines = (out / "digest_chunks.jsonl").read_text().split("\n")[:-1]
        record = json.loads(lines[1]) | {"data": "not base64!"}
        (out / "digest_chunks.jsonl").write_text("\n".join([lines[0], json.dumps(record), *lines[2:]]) + "\n")
    elif damage == "reference":
        lines = (out / "findings.jsonl").read_text().split("\n")[:-1]
        record = json.loads(lines[0]) | {"drop_id": 10**6}
        (out / "findings.jsonl").write_text("\n".join([json.dumps(record), *lines[1:]]) + "\n")
    elif damage == "manifest":
        (out / "manifest.json").write_text("{not json")
    elif damage == "schema":
        manifest["schema_version"] = schema.SCHEMA_VERSION + 1
    if damage in {"count", "schema"}:
        (out / "manifest.json").write_text(json.dumps(manifest))
    target = tmp_path / "n" / "studylog.db"
    monkeypatch.setenv("STUDYLOG_STORE", str(target))
    result = cli("load", str(out))
    assert result.exit_code == 2, result.output
    assert result.stderr.count("\n") == 1 and "Traceback" not in result.output
    assert not target.exists()


def test_dump_refuses_a_folder_that_holds_something_else(cli, study: Path, tmp_path: Path) -> None:
    out = tmp_path / "elsewhere"
    out.mkdir()
    (out / "analysis.py").write_text("print(1)\n")
    result = cli("dump", str(out))
    assert result.exit_code == 2
    assert (out / "analysis.py").read_text() == "print(1)\n"
    assert not (out / "manifest.json").exists()


def test_dump_into_an_earlier_dump_removes_files_of_tables_that_are_gone(
    cli, study: Path, tmp_path: Path
) -> None:
    out = tmp_path / "d"
    assert cli("dump", str(out)).exit_code == 0
    (out / "retired_table.jsonl").write_text('{"id": 1}\n')
    assert cli("dump", str(out)).exit_code == 0
    assert not (out / "retired_table.jsonl").exists()


def test_ids_continue_after_a_load(cli, filled: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    out = tmp_path / "d"
    assert cli("dump", str(out)).exit_code == 0
    target = tmp_path / "n" / "studylog.db"
    monkeypatch.setenv("STUDYLOG_STORE", str(target))
    assert cli("load", str(out)).exit_code == 0
    with transaction(_loc(target), write=True) as session:
        highest = session.scalar(select(func.max(Decision.id)))
        new = Decision(text="after the load", author="tester", created_at="t", updated_at="t")
        session.add(new)
        session.flush()
        assert new.id == highest + 1


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=st.text(st.characters(exclude_categories=("Cs",)), max_size=300))
def test_any_text_goes_through_dump_and_load_unchanged(text: str, study: Path, tmp_path_factory) -> None:
    where = tmp_path_factory.mktemp("prop")
    location = _loc(study)
    with transaction(location, write=True) as session:
        decision = Decision(text=text, why=text, author="tester", created_at="t", updated_at="t",
                            facts={text: [text]})
        session.add(decision)
        session.flush()
        decision_id = decision.id
    dumping.dump(location, where / "a")
    records = [json.loads(line) for line in
               (where / "a" / "decisions.jsonl").read_text(encoding="utf-8").split("\n") if line]
    dumped = next(r for r in records if r["id"] == decision_id)
    assert dumped["text"] == text and dumped["facts"] == {text: [text]}
    copy = _loc(where / "copy.db")
    dumping.load(copy, where / "a")
    dumping.dump(copy, where / "b")
    assert _files(where / "a") == _files(where / "b")
    dispose_engines()
    os.remove(copy.path)


def test_a_study_worked_through_the_commands_loads_back_byte_identical_and_healthy(
    cli, study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    work_through_commands(cli, tmp_path)
    first, second = tmp_path / "first", tmp_path / "second"
    assert cli("dump", str(first)).exit_code == 0
    counts = json.loads((first / "manifest.json").read_text())["tables"]
    # every kind of record the program writes is in it, drops with their findings, profiles and digests
    assert all(counts[name] > 0 for name in (
        "variables", "changes", "dictionary_versions", "rules", "drops", "findings", "profiles",
        "digest_chunks", "decisions", "entries", "questions", "threats", "links"))
    monkeypatch.setenv("STUDYLOG_STORE", str(tmp_path / "copy" / "studylog.db"))
    assert cli("load", str(first)).exit_code == 0
    assert cli("dump", str(second)).exit_code == 0
    assert _files(first) == _files(second)
    result = cli("doctor", "--json")
    assert result.exit_code == 0, result.stdout
    # and the loaded study works on: the next drop compares with the loaded ones
    drop = tmp_path / "june.csv"
    drop.write_text("visit_id,age,sex_code,income\nV1,36,1,1300\n")
    checked = cli("check", str(drop), "--label", "June", "--fail-on", "never", "--json")
    assert checked.exit_code == 0, checked.output
    assert json.loads(checked.stdout)["drop"]["id"] == counts["drops"] + 1
