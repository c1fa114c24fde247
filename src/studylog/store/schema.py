"""The schema version of a store, and the forward-only upgrade run on open.

Opening a store reads one row (``studylog_meta.schema_version``). Only when it is behind does this module
import the migrations registry, copy the file aside, and run the pending steps in one transaction. A store
written by a newer studylog is refused untouched.
"""

from __future__ import annotations

import sqlite3
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING

from sqlalchemy import inspect, text
from sqlalchemy.engine import Connection, Engine

from studylog.errors import StoreCorrupt, StoreTooNew

if TYPE_CHECKING:
    from studylog.store.session import StoreLocation

# The version this program writes. The migrations registry must end at this number (a test checks it).
SCHEMA_VERSION = 3

_checked: set[str] = set()


def has_meta(connection: Connection) -> bool:
    return inspect(connection).has_table("studylog_meta")


def read_version(connection: Connection) -> int | None:
    """The store's schema version, or None for an empty database."""
    if not has_meta(connection):
        if inspect(connection).get_table_names():
            raise StoreCorrupt("this database has tables but is not a studylog store")
        return None
    row = connection.execute(
        text("SELECT value FROM studylog_meta WHERE key = 'schema_version'")
    ).first()
    if row is None:
        raise StoreCorrupt("the store has no schema version; it is damaged or not a studylog store")
    try:
        return int(row[0])
    except ValueError as exc:
        raise StoreCorrupt(f"the store's schema version {row[0]!r} is not a number") from exc


def ensure_current(engine: Engine, location: StoreLocation) -> None:
    """Refuse a newer store; migrate an older one forward (after a backup copy)."""
    if location.url in _checked:
        return
    with engine.connect() as connection:
        version = read_version(connection)
        connection.rollback()
    if version is None:
        raise StoreCorrupt("the database is empty: it is not a studylog store (run 'studylog init')")
    if version > SCHEMA_VERSION:
        raise StoreTooNew(
            f"this store has schema version {version}, newer than this studylog knows "
            f"({SCHEMA_VERSION}); upgrade studylog to use it; the store was not changed"
        )
    if version < SCHEMA_VERSION:
        migrate(engine, location, backup=True)
    _checked.add(location.url)


def backup_path(path: Path, version: int) -> Path:
    stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    return path.with_name(f"{path.name}.schema-{version}.{stamp}.bak")


def copy_sqlite(source: Path, target: Path) -> None:
    """A consistent copy through SQLite's online backup API (safe while others write)."""
    src = sqlite3.connect(str(source))
    try:
        dst = sqlite3.connect(str(target))
        try:
            src.backup(dst)
        finally:
            dst.close()
    finally:
        src.close()


def migrate(engine: Engine, location: StoreLocation, *, backup: bool) -> list[int]:
    """Run every pending step in one transaction; return the versions applied."""
    from studylog.store.migrations import STEPS

    with engine.connect() as connection:
        version = read_version(connection) or 0
        connection.rollback()
    pending = [step for step in STEPS if step.version > version]
    if not pending:
        return []
    if backup and location.path is not None and version > 0:
        copy_sqlite(location.path, backup_path(location.path, version))
    with engine.execution_options(studylog_write=True).begin() as connection:
        for step in pending:
            step.apply(connection)
        if version == 0:
            connection.execute(
                text("INSERT INTO studylog_meta (key, value) VALUES ('schema_version', :v)"),
                {"v": str(pending[-1].version)},
            )
        else:
            connection.execute(
                text("UPDATE studylog_meta SET value = :v WHERE key = 'schema_version'"),
                {"v": str(pending[-1].version)},
            )
    _checked.add(location.url)
    return [step.version for step in pending]


def forget_checked() -> None:
    """Let the next open check the version again (tests that rewrite a store in place use this)."""
    _checked.clear()
