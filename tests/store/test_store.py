"""The store: locating it, pragmas, the schema and its migrations, one transaction per command."""

from __future__ import annotations

import hashlib
import sqlite3
from pathlib import Path

import pytest
from sqlalchemy import create_engine, inspect, text

from studylog.errors import NoStudyFound, StoreCorrupt
from studylog.store import schema
from studylog.store.migrations import STEPS
from studylog.store.models import Base
from studylog.store.session import (
    StoreLocation,
    create_store,
    dispose_engines,
    engine_for,
    locate,
    transaction,
)


def _loc(path: Path) -> StoreLocation:
    return StoreLocation(f"sqlite:///{path}", path)


def test_locate_walks_up_like_git(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("STUDYLOG_STORE")
    (tmp_path / "studylog.db").write_bytes(b"")
    deep = tmp_path / "a" / "b"
    deep.mkdir(parents=True)
    assert locate(start=deep).path == (tmp_path / "studylog.db").resolve()


def test_locate_prefers_explicit_then_environment(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("STUDYLOG_STORE", str(tmp_path / "env"))
    assert locate().path == (tmp_path / "env" / "studylog.db").resolve()
    assert locate(str(tmp_path / "x.db")).path == (tmp_path / "x.db").resolve()
    url = "postgresql+psycopg://analyst@localhost/study"
    assert locate(url) == StoreLocation(url, None)


def test_locate_without_a_store_says_how_to_make_one(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("STUDYLOG_STORE")
    with pytest.raises(NoStudyFound, match="studylog init"):
        locate(start=tmp_path)


def test_pragmas_on_every_connection(tmp_path: Path) -> None:
    location = _loc(tmp_path / "s.db")
    create_store(location)
    with transaction(location, write=False) as session:
        connection = session.connection()
        assert connection.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        assert connection.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
        assert connection.exec_driver_sql("PRAGMA busy_timeout").scalar() >= 5000


def test_migrated_schema_equals_the_models(tmp_path: Path) -> None:
    location = _loc(tmp_path / "s.db")
    create_store(location)
    inspector = inspect(engine_for(location))
    assert set(inspector.get_table_names()) == set(Base.metadata.tables)
    for name, table in Base.metadata.tables.items():
        found = {c["name"] for c in inspector.get_columns(name)}
        assert found == {c.name for c in table.columns}, name


def test_registry_ends_at_the_current_version_and_says_why() -> None:
    assert [s.version for s in STEPS] == list(range(1, schema.SCHEMA_VERSION + 1))
    assert all(s.why.startswith(f"Step {s.version}:") for s in STEPS)


def _store_at_version_1(path: Path) -> None:
    """A store exactly as the first schema version made it, with one table in it."""
    engine = create_engine(f"sqlite:///{path}")
    with engine.begin() as connection:
        STEPS[0].apply(connection)
        connection.execute(text("INSERT INTO studylog_meta VALUES ('schema_version', '1')"))
        connection.execute(
            text("INSERT INTO study (title, created_at, author) VALUES ('old', 'then', 'me')")
        )
        connection.execute(
            text(
                "INSERT INTO data_tables (name, key, created_at, updated_at, author) "
                "VALUES ('members', '[\"member_id\"]', 'then', 'then', 'me')"
            )
        )
    engine.dispose()


def test_a_first_version_store_migrates_forward_after_a_backup(tmp_path: Path) -> None:
    path = tmp_path / "studylog.db"
    _store_at_version_1(path)
    location = _loc(path)
    with transaction(location, write=False) as session:
        assert session.execute(text("SELECT name FROM data_tables")).scalar() == "members"
        assert session.execute(text("SELECT count(*) FROM decisions")).scalar() == 0
        version = session.execute(
            text("SELECT value FROM studylog_meta WHERE key='schema_version'")
        ).scalar()
    assert version == str(schema.SCHEMA_VERSION)
    backups = list(tmp_path.glob("studylog.db.schema-1.*.bak"))
    assert len(backups) == 1
    with sqlite3.connect(backups[0]) as old:
        assert old.execute("SELECT value FROM studylog_meta").fetchone() == ("1",)
    columns = {c["name"] for c in inspect(engine_for(location)).get_columns("changes")}
    assert "question_id" in columns


def test_a_newer_store_is_refused_unchanged(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    dispose_engines()
    schema.forget_checked()
    connection = sqlite3.connect(study)
    connection.execute("UPDATE studylog_meta SET value = '999' WHERE key = 'schema_version'")
    connection.commit()
    connection.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    connection.close()
    before = hashlib.sha256(study.read_bytes()).hexdigest()
    result = cli("status")
    assert result.exit_code == 3
    assert "newer" in result.stderr and "999" in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1
    dispose_engines()
    assert hashlib.sha256(study.read_bytes()).hexdigest() == before


def test_a_file_that_is_not_a_store_gives_exit_3(cli, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    bogus = tmp_path / "bogus.db"
    bogus.write_bytes(b"this is not sqlite at all" * 100)
    result = cli("--store", str(bogus), "status")
    assert result.exit_code == 3
    assert "damaged" in result.stderr or "not a studylog store" in result.stderr


def test_an_empty_database_is_not_a_store(tmp_path: Path) -> None:
    path = tmp_path / "empty.db"
    sqlite3.connect(path).close()
    with pytest.raises(StoreCorrupt):
        with transaction(_loc(path), write=False):
            pass


def test_one_command_one_transaction(tmp_path: Path) -> None:
    location = _loc(tmp_path / "s.db")
    create_store(location)
    with pytest.raises(RuntimeError):
        with transaction(location, write=True) as session:
            session.execute(
                text("INSERT INTO studylog_meta (key, value) VALUES ('probe', 'x')")
            )
            raise RuntimeError("the command failed half way")
    with transaction(location, write=False) as session:
        assert session.execute(text("SELECT count(*) FROM studylog_meta WHERE key='probe'")).scalar() == 0
