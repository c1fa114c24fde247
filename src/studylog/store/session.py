"""Finding the store, opening it, and running one command as one transaction.

The store is found like git finds ``.git``: ``studylog.db`` in the current folder or a parent. ``--store``
or ``STUDYLOG_STORE`` override the search, as a path (a file, or a folder holding ``studylog.db``) or a
SQLAlchemy URL (``postgresql+psycopg://...`` for a team that shares one store).

SQLite connections get WAL, a busy timeout and foreign keys. Transactions that write begin with
``BEGIN IMMEDIATE``: a deferred transaction that later tries to write can fail at once with "database is
locked" when another process committed in between, and the busy timeout does not help it.

SQLAlchemy is imported when a store is opened, not with this module: finding the store is all that
some commands need of it (``profile`` without a study), and the import costs a fifth of a second.
"""

from __future__ import annotations

import os
import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from studylog.errors import (
    NoStudyFound,
    StoreCorrupt,
    StoreError,
    StoreLocked,
    StoreReadOnly,
    StoreTooNew,
    UsageError,
)

if TYPE_CHECKING:
    from sqlalchemy.engine import Engine
    from sqlalchemy.orm import Session

STORE_FILE = "studylog.db"
ENV_STORE = "STUDYLOG_STORE"
BUSY_TIMEOUT_MS = 10_000
# Tests of lock contention lower the wait so that they stay fast; users keep the default.
ENV_BUSY_TIMEOUT = "STUDYLOG_BUSY_TIMEOUT_MS"


def busy_timeout_ms() -> int:
    """How long a command waits for another process's lock: ``STUDYLOG_BUSY_TIMEOUT_MS``, else 10 s."""
    raw = os.environ.get(ENV_BUSY_TIMEOUT, "").strip()
    try:
        value = int(raw) if raw else BUSY_TIMEOUT_MS
    except ValueError:
        value = BUSY_TIMEOUT_MS
    return value if value >= 0 else BUSY_TIMEOUT_MS


@dataclass(frozen=True)
class StoreLocation:
    """Where a store is: a SQLAlchemy URL, and the file path when it is SQLite on disk."""

    url: str
    path: Path | None

    @property
    def is_sqlite(self) -> bool:
        return self.url.startswith("sqlite")


def _from_text(value: str) -> StoreLocation:
    if "://" in value:
        if value.startswith("sqlite:///") and value != "sqlite:///:memory:":
            return StoreLocation(value, Path(value[len("sqlite:///") :]))
        return StoreLocation(value, None)
    path = Path(value).expanduser()
    if path.is_dir() or (not path.suffix and not path.exists()):
        path = path / STORE_FILE
    return StoreLocation(f"sqlite:///{path.resolve()}", path.resolve())


def locate(explicit: str | None = None, start: Path | None = None) -> StoreLocation:
    """The store to use: ``explicit``, else ``STUDYLOG_STORE``, else the nearest ``studylog.db`` upward."""
    if explicit:
        return _from_text(explicit)
    env = os.environ.get(ENV_STORE)
    if env:
        return _from_text(env)
    here = (start or Path.cwd()).resolve()
    for folder in (here, *here.parents):
        candidate = folder / STORE_FILE
        if candidate.is_file():
            return StoreLocation(f"sqlite:///{candidate}", candidate)
    raise NoStudyFound(
        f"no {STORE_FILE} in {here} or any parent folder; run 'studylog init' or pass --store"
    )


def location_for_new(directory: str | None, explicit: str | None = None) -> StoreLocation:
    """Where ``init`` creates a store: DIR, else --store/STUDYLOG_STORE, else the current folder."""
    if directory:
        return _from_text(directory)
    if explicit:
        return _from_text(explicit)
    env = os.environ.get(ENV_STORE)
    if env:
        return _from_text(env)
    return _from_text(str(Path.cwd()))


def _on_connect(dbapi_connection: sqlite3.Connection, _record: object) -> None:
    # Let SQLAlchemy's "begin" event, not the driver, open transactions (SQLAlchemy's documented recipe).
    dbapi_connection.isolation_level = None
    cursor = dbapi_connection.cursor()
    cursor.execute(f"PRAGMA busy_timeout = {busy_timeout_ms()}")
    cursor.execute("PRAGMA foreign_keys = ON")
    try:
        cursor.execute("PRAGMA journal_mode = WAL")
    except sqlite3.OperationalError:
        # a read-only file cannot switch journal mode; reads still work, writes fail with exit 3
        pass
    cursor.execute("PRAGMA synchronous = NORMAL")
    cursor.close()


def _on_begin(connection) -> None:  # type: ignore[no-untyped-def]
    write = connection.get_execution_options().get("studylog_write", False)
    connection.exec_driver_sql("BEGIN IMMEDIATE" if write else "BEGIN")


_engines: dict[str, Engine] = {}


def engine_for(location: StoreLocation) -> Engine:
    """One engine per URL per process."""
    engine = _engines.get(location.url)
    if engine is None:
        from sqlalchemy import create_engine, event

        if location.is_sqlite:
            engine = create_engine(location.url, connect_args={"timeout": busy_timeout_ms() / 1000})
            event.listen(engine, "connect", _on_connect)
            event.listen(engine, "begin", _on_begin)
        else:
            engine = create_engine(location.url)
        _engines[location.url] = engine
    return engine


def dispose_engines() -> None:
    """Close every pooled connection (tests and restore use it to let go of files)."""
    for engine in _engines.values():
        engine.dispose()
    _engines.clear()


def translate(exc: BaseException) -> StoreError | None:
    """Our error for a database failure a user can meet, or None when it is a bug."""
    message = str(getattr(exc, "orig", exc)).lower()
    if "locked" in message or "busy" in message:
        return StoreLocked(
            "the store is locked by another process and stayed locked past "
            f"{busy_timeout_ms() / 1000:g} s; try again when it has finished"
        )
    if "readonly" in message or "read-only" in message:
        return StoreReadOnly("the store is read-only here; check the file's and folder's permissions")
    if "disk is full" in message or "disk full" in message or "no space" in message:
        return StoreReadOnly("the disk is full; nothing was written; free some space and try again")
    if "disk i/o error" in message:
        # what SQLite says when its shared-memory or log file cannot grow on a full or failing disk
        return StoreReadOnly(
            "the store could not be read or written (disk I/O error): the disk may be full or failing; "
            "nothing was written; free some space, then run 'studylog doctor'"
        )
    if "not a database" in message or "malformed" in message or "corrupt" in message:
        return StoreCorrupt(
            "the store is damaged or is not a studylog store; run 'studylog doctor' "
            "or restore a backup"
        )
    if "unable to open" in message:
        return StoreReadOnly(
            "the store cannot be opened: its folder may be read-only or full, or not yours; "
            "check the path, its permissions and the free space"
        )
    return None


@contextmanager
def transaction(location: StoreLocation, *, write: bool) -> Iterator[Session]:
    """One command's unit of work: everything it writes commits together or not at all.

    The schema is checked (and migrated forward, after a backup) before the session is handed out.
    """
    from sqlalchemy.exc import DBAPIError, OperationalError
    from sqlalchemy.orm import Session

    from studylog.store import schema

    engine = engine_for(location)
    if location.is_sqlite and location.path is not None and not location.path.exists():
        raise NoStudyFound(f"no study at {location.path}; run 'studylog init' first")
    try:
        schema.ensure_current(engine, location)
        bind = engine.execution_options(studylog_write=write)
        with Session(bind, expire_on_commit=False, autoflush=True) as session:
            with session.begin():
                yield session
    except (OperationalError, DBAPIError) as exc:
        ours = translate(exc)
        if ours is None:
            raise
        raise ours from exc


def create_store(location: StoreLocation) -> Engine:
    """Make a new, empty store at ``location`` with the current schema. Refuses an existing study."""
    from sqlalchemy import text
    from sqlalchemy.exc import DBAPIError, OperationalError

    from studylog.store import schema

    if location.path is not None:
        if location.path.exists() and location.path.stat().st_size > 0:
            raise UsageError(f"a study already exists at {location.path}")
        location.path.parent.mkdir(parents=True, exist_ok=True)
    engine = engine_for(location)
    try:
        with engine.connect() as connection:
            existing = connection.execute(
                text("SELECT 1 FROM studylog_meta WHERE key = 'schema_version'")
            ) if schema.has_meta(connection) else None
            if existing is not None and existing.first() is not None:
                raise UsageError(f"a study already exists at {location.url}")
        schema.migrate(engine, location, backup=False)
    except (OperationalError, DBAPIError) as exc:
        ours = translate(exc)
        if ours is None:
            raise
        raise ours from exc
    return engine


__all__ = [
    "STORE_FILE",
    "StoreLocation",
    "create_store",
    "dispose_engines",
    "engine_for",
    "locate",
    "location_for_new",
    "transaction",
    "StoreTooNew",
]
