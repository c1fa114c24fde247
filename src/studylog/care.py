"""Care of the store: ``doctor`` (is it healthy, and what to do if not), ``backup`` and ``restore``.

The doctor never goes through :func:`studylog.store.session.transaction`: that path migrates an older
store forward and refuses a damaged one, and the doctor must look at exactly what is on disk, damaged or
not, without changing it. It opens its own connection, runs SQLite's own checks first, and only looks at
the records (links, history) when the file and the schema are sound enough to be read.

Backups use SQLite's online backup API (``sqlite3.Connection.backup``): it copies a consistent snapshot
page by page while other processes keep writing, which a plain file copy of a WAL database does not.
A restore writes the backup into the live store through the same API, so that other processes that have
the store open see one atomic change instead of a file swapped under their feet.
"""

from __future__ import annotations

import os
import shutil
import sqlite3
from contextlib import closing
from dataclasses import asdict, dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from studylog.errors import (
    AlreadyExists,
    InputFileError,
    NoStudyFound,
    StoreCorrupt,
    StoreError,
    UsageError,
)
from studylog.store import schema
from studylog.store.session import StoreLocation, dispose_engines, translate

SQLITE_HEADER = b"SQLite format 3\x00"

# Filesystems on which SQLite's WAL (shared memory between processes) is not safe: network and
# user-space remote filesystems. SQLite's documentation: "WAL does not work over a network filesystem".
NETWORK_FILESYSTEMS = frozenset({
    "nfs", "nfs4", "cifs", "smb", "smb2", "smb3", "smbfs", "sshfs", "fuse.sshfs", "9p", "afs",
    "ceph", "fuse.ceph", "glusterfs", "fuse.glusterfs", "lustre", "gpfs", "ncpfs", "coda",
    "davfs", "fuse.davfs2", "fuse.s3fs", "fuse.rclone", "fuse.gcsfuse", "beegfs", "ocfs2", "gfs2",
})

MOUNTS_FILE = Path("/proc/mounts")

RESTORE_HINT = (
    "restore the latest backup with 'studylog restore FILE --force' (the damaged file is kept beside "
    "it); 'studylog dump DIR' may still save the records that can be read"
)

MOVE_HINT = (
    "move studylog.db to a local disk (and share it by 'studylog backup' or 'studylog dump'), "
    "or give the team a database server: --store postgresql+psycopg://..."
)


@dataclass
class Check:
    """One thing the doctor looked at. ``status`` is ok, warning (works, but look) or problem."""

    name: str
    status: str
    message: str
    hint: str = ""
    problems: list[Any] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


# ---------------------------------------------------------------------------------------------------
# where the file lives


def _unescape_mount(text: str) -> str:
    # /proc/mounts writes space, tab, newline and backslash as octal escapes (\040 ...)
    out, i = [], 0
    while i < len(text):
        if text[i] == "\\" and i + 3 < len(text) and text[i + 1 : i + 4].isdigit():
            out.append(chr(int(text[i + 1 : i + 4], 8)))
            i += 4
        else:
            out.append(text[i])
            i += 1
    return "".join(out)


def filesystem_of(path: Path, mounts_file: Path | None = None) -> dict[str, Any]:
    """The mount that holds ``path`` (longest matching mount point) and whether it is a network one."""
    mounts_file = mounts_file or MOUNTS_FILE
    try:
        lines = mounts_file.read_text(encoding="utf-8", errors="replace").splitlines()
    except OSError:
        return {"type": None, "mount": None, "network": False}
    target = os.path.realpath(path)
    best: tuple[str, str] | None = None
    for line in lines:
        parts = line.split()
        if len(parts) < 3:
            continue
        mount, fstype = _unescape_mount(parts[1]), parts[2]
        inside = target == mount or target.startswith(mount.rstrip("/") + "/")
        if inside and (best is None or len(mount) >= len(best[0])):
            best = (mount, fstype)
    if best is None:
        return {"type": None, "mount": None, "network": False}
    mount, fstype = best
    network = fstype in NETWORK_FILESYSTEMS or fstype.split(".")[-1] in NETWORK_FILESYSTEMS
    return {"type": fstype, "mount": mount, "network": network}


# ---------------------------------------------------------------------------------------------------
# opening a file as SQLite without changing it


def is_sqlite_file(path: Path) -> bool:
    try:
        with path.open("rb") as handle:
            return handle.read(16) == SQLITE_HEADER
    except OSError:
        return False


def _open_raw(path: Path) -> sqlite3.Connection:
    """A connection that never creates the file; read-only when the file or its folder cannot be written."""
    last: Exception | None = None
    # immutable last: on a read-only or full disk SQLite cannot make the WAL's shared-memory file, and
    # there nobody can be writing, so reading the file as it stands is exact
    for mode in ("rw", "ro", "ro&immutable=1"):
        try:
            connection = sqlite3.connect(f"file:{path}?mode={mode}", uri=True, timeout=5)
            connection.execute("SELECT count(*) FROM sqlite_master").fetchone()
            return connection
        except sqlite3.DatabaseError as exc:
            if "malformed" in str(exc) or "not a database" in str(exc):
                raise StoreCorrupt(f"SQLite cannot read the file: {exc}") from exc
            last = exc
    raise StoreError(f"the store at {path} cannot be opened: {last}")


def _store_version(connection: sqlite3.Connection) -> int | None:
    names = {row[0] for row in connection.execute("SELECT name FROM sqlite_master WHERE type='table'")}
    if "studylog_meta" not in names:
        return None
    row = connection.execute("SELECT value FROM studylog_meta WHERE key = 'schema_version'").fetchone()
    if row is None:
        return None
    try:
        return int(row[0])
    except (TypeError, ValueError):
        return None


# ---------------------------------------------------------------------------------------------------
# doctor


def _sqlite_file_checks(path: Path, report: dict[str, Any]) -> tuple[list[Check], bool]:
    """Checks of the file itself; returns them and whether the records can be read safely."""
    checks: list[Check] = []
    size = path.stat().st_size
    wal = path.with_name(path.name + "-wal")
    report["size_bytes"] = size + (wal.stat().st_size if wal.exists() else 0)
    fs = filesystem_of(path)
    report["filesystem"] = fs
    if fs["network"]:
        checks.append(Check(
            "filesystem", "problem",
            f"the store is on a network filesystem ({fs['type']} at {fs['mount']}), where SQLite's "
            "write-ahead log is unsafe: two machines writing at once can corrupt it",
            MOVE_HINT,
        ))
    else:
        checks.append(Check("filesystem", "ok", f"local filesystem ({fs['type'] or 'unknown'})"))
    if not is_sqlite_file(path):
        checks.append(Check(
            "open", "problem", "the file is not a SQLite database",
            "restore a backup with 'studylog restore FILE --force', or point --store at the right file",
        ))
        return checks, False
    try:
        connection = _open_raw(path)
    except StoreCorrupt as exc:
        checks.append(Check("integrity", "problem", exc.message, RESTORE_HINT))
        return checks, False
    except StoreError as exc:
        checks.append(Check("open", "problem", exc.message, "check the path and its permissions"))
        return checks, False
    with closing(connection):
        try:
            mode = connection.execute("PRAGMA journal_mode").fetchone()[0]
            report["journal_mode"] = mode
            integrity = [row[0] for row in connection.execute("PRAGMA integrity_check")]
            foreign = [list(row) for row in connection.execute("PRAGMA foreign_key_check")]
            version = _store_version(connection)
            tables = {r[0] for r in connection.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        except sqlite3.DatabaseError as exc:
            checks.append(Check("integrity", "problem", f"SQLite cannot read the file: {exc}",
                                RESTORE_HINT))
            return checks, False
    if mode != "wal":
        checks.append(Check(
            "journal", "warning", f"journal mode is {mode}, not wal",
            "it switches to wal the next time studylog writes; nothing to do unless this persists",
        ))
    else:
        checks.append(Check("journal", "ok", "write-ahead log (wal)"))
    if integrity == ["ok"]:
        checks.append(Check("integrity", "ok", "SQLite integrity check passed"))
    else:
        checks.append(Check(
            "integrity", "problem", f"SQLite integrity check found {len(integrity)} problem(s)",
            RESTORE_HINT, integrity[:20],
        ))
    if foreign:
        checks.append(Check(
            "foreign-keys", "problem", f"{len(foreign)} row(s) refer to records that do not exist",
            "restore a backup, or report it: studylog never writes such rows",
            [{"table": f[0], "rowid": f[1], "refers_to": f[2]} for f in foreign[:20]],
        ))
    else:
        checks.append(Check("foreign-keys", "ok", "every reference points at an existing record"))
    schema_ok = _version_check(version, report, checks)
    # an older store lacks the newer tables until it is upgraded; only the current schema must have all
    current = schema_ok and version == schema.SCHEMA_VERSION
    missing = sorted(_expected_tables() - tables) if current else []
    if missing:
        checks.append(Check(
            "tables", "problem", f"tables missing from the store: {', '.join(missing)}",
            "restore a backup; the store was changed by something other than studylog",
        ))
    readable = integrity == ["ok"] and current and not missing
    return checks, readable


def _expected_tables() -> set[str]:
    from studylog.store.models import Base

    return set(Base.metadata.tables)


def _version_check(version: int | None, report: dict[str, Any], checks: list[Check]) -> bool:
    report["schema_version"] = version
    if version is None:
        checks.append(Check(
            "schema", "problem", "no schema version: this is not a studylog store (or it is damaged)",
            "point --store at a studylog.db, or restore a backup",
        ))
        return False
    if version > schema.SCHEMA_VERSION:
        checks.append(Check(
            "schema", "problem",
            f"schema version {version} is newer than this studylog knows ({schema.SCHEMA_VERSION})",
            "upgrade studylog; the store is left untouched",
        ))
        return False
    if version < schema.SCHEMA_VERSION:
        checks.append(Check(
            "schema", "warning",
            f"schema version {version}; this studylog writes {schema.SCHEMA_VERSION}",
            "the next command that opens the store upgrades it, after a backup copy",
        ))
        return True
    checks.append(Check("schema", "ok", f"schema version {version}"))
    return True


def _record_checks(engine: Any) -> list[Check]:
    from sqlalchemy.orm import Session

    from studylog import replay

    checks: list[Check] = []
    with Session(engine) as session:
        orphans = replay.orphaned_links(session)
        if orphans:
            checks.append(Check(
                "links", "problem", f"{len(orphans)} link(s) from records that do not exist",
                "restore a backup; studylog links only records it has written",
                orphans[:20],
            ))
        else:
            checks.append(Check("links", "ok", "every link starts at an existing record"))
        lost = replay.history_of_missing_records(session)
        if lost:
            checks.append(Check(
                "history-records", "problem", f"history of {len(lost)} record(s) that do not exist",
                "restore a backup; records are never deleted by studylog",
                lost[:20],
            ))
        mismatches = replay.mismatches(session)
        if mismatches:
            checks.append(Check(
                "history", "problem",
                f"{len(mismatches)} field(s) whose history does not replay to their current value",
                "the record was changed without its history (a hand edit of the file, or a bug); compare "
                "its history ('var history', the timeline) with its current value, "
                "and restore a backup if the change was not yours",
                mismatches[:20],
            ))
        else:
            checks.append(Check("history", "ok", "every record's history replays to its current value"))
    return checks


def doctor(location: StoreLocation) -> dict[str, Any]:
    """The health report of a store. ``healthy`` is False when any check found a problem."""
    report: dict[str, Any] = {
        "store": location.url,
        "schema_version": None,
        "program_schema_version": schema.SCHEMA_VERSION,
        "size_bytes": None,
        "journal_mode": None,
        "filesystem": None,
    }
    checks: list[Check]
    if location.is_sqlite and location.path is not None:
        if not location.path.exists():
            raise NoStudyFound(f"no study at {location.path}; run 'studylog init' first")
        checks, readable = _sqlite_file_checks(location.path, report)
        if readable:
            from sqlalchemy import create_engine
            from sqlalchemy.pool import NullPool

            path = location.path
            engine = create_engine(
                "sqlite://", creator=lambda: _open_raw(path), poolclass=NullPool
            )
            try:
                checks.extend(_record_checks(engine))
            finally:
                engine.dispose()
    else:
        checks = _server_checks(location, report)
    report["checks"] = [c.to_dict() for c in checks]
    report["problems"] = sum(c.status == "problem" for c in checks)
    report["warnings"] = sum(c.status == "warning" for c in checks)
    report["healthy"] = report["problems"] == 0
    return report


def _server_checks(location: StoreLocation, report: dict[str, Any]) -> list[Check]:
    """What applies to a database server: the schema, the links and the history (no file checks)."""
    from sqlalchemy import create_engine
    from sqlalchemy.exc import DBAPIError, OperationalError

    checks: list[Check] = [Check(
        "file", "ok", "a database server: integrity, journal and filesystem are the server's to keep",
    )]
    engine = create_engine(location.url)
    try:
        with engine.connect() as connection:
            version = schema.read_version(connection)
        if _version_check(version, report, checks) and version == schema.SCHEMA_VERSION:
            checks.extend(_record_checks(engine))
    except (OperationalError, DBAPIError) as exc:
        ours = translate(exc)
        if ours is None:
            raise
        raise ours from exc
    finally:
        engine.dispose()
    return checks


# ---------------------------------------------------------------------------------------------------
# backup and restore


def _sqlite_path(location: StoreLocation, what: str) -> Path:
    if not location.is_sqlite or location.path is None:
        raise UsageError(
            f"{what} works on a SQLite store file; for a database server use the server's own "
            "backup tools, or 'studylog dump DIR' for a text copy"
        )
    return location.path


def _stamp() -> str:
    return datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%S.%fZ")


def _copy(source: sqlite3.Connection, target: Path) -> None:
    """Copy a consistent snapshot of ``source`` into a new single-file database at ``target``."""
    with closing(sqlite3.connect(str(target))) as destination:
        source.backup(destination)
        # a backup is one self-contained file: no -wal beside it to forget when it is copied away
        destination.execute("PRAGMA journal_mode = DELETE")


def backup(location: StoreLocation, target: Path, *, force: bool = False) -> dict[str, Any]:
    """A consistent copy of the store in ``target``, taken while others may be writing."""
    path = _sqlite_path(location, "backup")
    if not path.exists():
        raise NoStudyFound(f"no study at {path}; nothing to back up")
    target = target.expanduser()
    if target.resolve() == path.resolve():
        raise UsageError("the backup file cannot be the store itself")
    if target.is_dir():
        raise UsageError(f"{target} is a folder; give the name of the backup file")
    if target.exists() and not force:
        raise AlreadyExists(f"{target} already exists; pass --force to replace it")
    if not target.parent.is_dir():
        raise UsageError(f"the folder {target.parent} does not exist")
    partial = target.with_name(f".{target.name}.{os.getpid()}.partial")
    try:
        with closing(_open_raw(path)) as source:
            source.execute("PRAGMA busy_timeout = 10000")
            _copy(source, partial)
        facts = _inspect_backup(partial)
        os.replace(partial, target)
    except sqlite3.Error as exc:
        ours = translate(exc)
        if ours is None:
            raise StoreError(f"the backup failed: {exc}") from exc
        raise ours from exc
    except OSError as exc:
        raise StoreError(f"the backup could not be written to {target}: {exc.strerror}") from exc
    finally:
        partial.unlink(missing_ok=True)
    return {"file": str(target), "size_bytes": target.stat().st_size, **facts}


def _inspect_backup(file: Path) -> dict[str, Any]:
    """Check that ``file`` is a sound studylog store; return its schema version and record counts."""
    name = str(file)
    if not file.is_file():
        raise InputFileError(name, "no such file")
    if not is_sqlite_file(file):
        raise InputFileError(name, "not a SQLite database, so not a studylog backup")
    try:
        with closing(sqlite3.connect(f"file:{file}?mode=ro", uri=True)) as connection:
            integrity = [row[0] for row in connection.execute("PRAGMA integrity_check")]
            if integrity != ["ok"]:
                raise InputFileError(name, f"damaged: SQLite integrity check says {integrity[0]}")
            version = _store_version(connection)
            if version is None:
                raise InputFileError(name, "not a studylog store (no schema version)")
            if version > schema.SCHEMA_VERSION:
                raise InputFileError(
                    name,
                    f"written by a newer studylog (schema {version}, this one knows "
                    f"{schema.SCHEMA_VERSION}); upgrade studylog to restore it",
                )
            studies = connection.execute("SELECT count(*) FROM study").fetchone()[0]
            if studies < 1:
                raise InputFileError(name, "holds no study record")
    except sqlite3.DatabaseError as exc:
        raise InputFileError(name, f"damaged: SQLite cannot read it ({exc})") from exc
    return {"schema_version": version, "integrity": "ok"}


def _keep_current(path: Path, kept: Path) -> bool:
    """Keep a copy of the store about to be replaced; False when SQLite cannot read it (damaged).

    A readable store is copied through the backup API (consistent even while others write); a damaged
    one byte for byte, with its write-ahead log, so that nothing in it is lost to a later rescue.
    """
    try:
        with closing(_open_raw(path)) as current:
            current.execute("PRAGMA busy_timeout = 10000")
            _copy(current, kept)
        return True
    except (StoreCorrupt, sqlite3.DatabaseError):
        kept.unlink(missing_ok=True)
        shutil.copyfile(path, kept)
        wal = path.with_name(path.name + "-wal")
        if wal.exists():
            shutil.copyfile(wal, kept.with_name(kept.name + "-wal"))
        return False


def _restore_through_locks(backup_db: sqlite3.Connection, path: Path) -> None:
    """Copy a backup over the live store inside one SQLite write transaction (others keep their
    connections and see the old store or the new one). The backup is staged as a WAL-mode copy first,
    so that the pages landing in the live store's write-ahead log agree with the file they belong to."""
    staged = path.with_name(f".{path.name}.{os.getpid()}.restoring")
    try:
        _copy(backup_db, staged)
        with closing(sqlite3.connect(str(staged))) as source:
            source.execute("PRAGMA journal_mode = WAL")
            with closing(sqlite3.connect(str(path), timeout=10)) as live:
                live.execute("PRAGMA journal_mode = WAL")
                source.backup(live)
    finally:
        for side in ("", "-wal", "-shm"):
            staged.with_name(staged.name + side).unlink(missing_ok=True)


def _restore_by_rename_when_alone(backup_db: sqlite3.Connection, path: Path) -> bool:
    """Put a backup in place of the store by renaming a complete new file over it, when no other
    connection has the store open; False (nothing done) when one has.

    Leaving WAL mode needs the store to itself, and folds the write-ahead log into the file, so the old
    file is whole on its own before the rename: a kill at any moment leaves the old store or the new
    one. (A kill in the middle of copying through the backup API could leave a malformed store; that
    copy is kept only for a store that other processes hold open, which a rename would not reach.)
    """
    try:
        with closing(sqlite3.connect(str(path), timeout=1)) as live:
            mode = live.execute("PRAGMA journal_mode = DELETE").fetchone()[0]
    except sqlite3.OperationalError:
        return False
    if str(mode).lower() != "delete":
        return False
    _swap_in(backup_db, path)
    return True


def _swap_in(backup_db: sqlite3.Connection, path: Path) -> None:
    """Put a backup in place of a store SQLite cannot read: a new file, renamed over the old one."""
    partial = path.with_name(f".{path.name}.{os.getpid()}.restoring")
    try:
        _copy(backup_db, partial)
        for side in ("-wal", "-shm"):
            path.with_name(path.name + side).unlink(missing_ok=True)
        os.replace(partial, path)
    finally:
        partial.unlink(missing_ok=True)
    with closing(sqlite3.connect(str(path))) as live:
        live.execute("PRAGMA journal_mode = WAL")


def restore(location: StoreLocation, source_file: Path, *, force: bool = False) -> dict[str, Any]:
    """Replace the store's content by a checked backup; the replaced store is kept beside it."""
    path = _sqlite_path(location, "restore")
    source_file = source_file.expanduser()
    facts = _inspect_backup(source_file)
    if source_file.resolve() == path.resolve():
        raise UsageError("the backup file is the store itself")
    exists = path.exists() and path.stat().st_size > 0
    if exists and not force:
        raise UsageError(
            f"a store already exists at {path}; restoring replaces all of it: pass --force "
            "(a copy of the current store is kept beside it)"
        )
    kept: Path | None = None
    readable = True
    dispose_engines()
    try:
        if exists:
            kept = path.with_name(f"{path.name}.replaced-{_stamp()}.bak")
            readable = _keep_current(path, kept)
        else:
            path.parent.mkdir(parents=True, exist_ok=True)
        with closing(sqlite3.connect(f"file:{source_file}?mode=ro", uri=True)) as backup_db:
            if not readable:
                _swap_in(backup_db, path)
            elif not _restore_by_rename_when_alone(backup_db, path):
                _restore_through_locks(backup_db, path)
    except sqlite3.Error as exc:
        ours = translate(exc)
        if ours is None:
            raise StoreError(f"the restore failed: {exc}; the store was not changed") from exc
        raise ours from exc
    finally:
        dispose_engines()
        schema.forget_checked()
    return {
        "store": str(path),
        "restored_from": str(source_file),
        "kept": str(kept) if kept else None,
        **facts,
    }
