"""The whole store as stable, sorted text files, and back (``studylog dump DIR`` / ``studylog load DIR``).

A dump is meant to live in git beside the analysis: one ``<table>.jsonl`` file per table of the store,
one record per line in id order, keys sorted, binary columns (record digests) as base64, and a
``manifest.json`` with the format and schema version and the number of records of each table. Nothing
in it depends on when or where it was made, so dumping an unchanged store gives the same bytes, and a
diff between two dumps shows exactly the records that changed.

The tables come from ``Base.metadata.sorted_tables`` (parents before children), so a new table is dumped
and loaded without touching this module. A JSON column keeps its value's own key order (the order the
program wrote it in, which is stable for a record), only the record's own keys are sorted.

``load`` fills an empty store from a dump, preserving ids, in one transaction: afterwards its dump is
byte-identical to the one loaded.
"""

from __future__ import annotations

import base64
import json
import os
from pathlib import Path
from typing import Any

from sqlalchemy import LargeBinary, func, select, text
from sqlalchemy.engine import Connection
from sqlalchemy.exc import DBAPIError, IntegrityError, OperationalError
from sqlalchemy.schema import Table

from studylog.errors import InputFileError, UsageError
from studylog.store import schema
from studylog.store.models import Base
from studylog.store.session import StoreLocation, create_store, engine_for, transaction, translate

FORMAT = "studylog-dump"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
META_TABLE = "studylog_meta"
_BATCH = 1000


def _tables() -> list[Table]:
    return list(Base.metadata.sorted_tables)


def _order(table: Table) -> list[Any]:
    return list(table.primary_key.columns) or list(table.columns)


def _binary_columns(table: Table) -> set[str]:
    return {c.name for c in table.columns if isinstance(c.type, LargeBinary)}


def record_line(row: dict[str, Any], binary: set[str]) -> str:
    """One record as one line of JSON: keys sorted, binary as base64, values as the store holds them."""
    parts = []
    for name in sorted(row):
        value = row[name]
        if name in binary and value is not None:
            value = base64.b64encode(bytes(value)).decode("ascii")
        parts.append(f"{json.dumps(name, ensure_ascii=False)}: {json.dumps(value, ensure_ascii=False)}")
    return "{" + ", ".join(parts) + "}"


def _write_atomic(path: Path, lines: Any) -> None:
    partial = path.with_name(f".{path.name}.partial")
    with partial.open("w", encoding="utf-8", newline="\n") as handle:
        for line in lines:
            handle.write(line)
            handle.write("\n")
    os.replace(partial, path)


def _prepare_folder(directory: Path) -> None:
    """A new or empty folder, or one holding an earlier dump (which is replaced file by file)."""
    if directory.exists() and not directory.is_dir():
        raise UsageError(f"{directory} is a file; give a folder for the dump")
    if directory.is_dir():
        entries = [p for p in directory.iterdir() if not p.name.startswith(".")]
        if entries and not (directory / MANIFEST).is_file():
            raise UsageError(
                f"{directory} is not empty and holds no earlier dump; give a new or empty folder"
            )
    directory.mkdir(parents=True, exist_ok=True)


def dump(location: StoreLocation, directory: Path) -> dict[str, Any]:
    """Write the whole store to ``directory`` from one consistent read; return what was written."""
    _prepare_folder(directory)
    counts: dict[str, int] = {}
    with transaction(location, write=False) as session:
        connection = session.connection()
        version = schema.read_version(connection)
        for table in _tables():
            binary = _binary_columns(table)
            result = connection.execute(select(table).order_by(*_order(table)))
            rows = (record_line(dict(row._mapping), binary) for row in result)
            count = 0

            def counted(lines: Any) -> Any:
                nonlocal count
                for line in lines:
                    count += 1
                    yield line

            _write_atomic(directory / f"{table.name}.jsonl", counted(rows))
            counts[table.name] = count
    # earlier dumps' files of tables the store no longer has would mislead a reader of the folder
    known = {f"{t.name}.jsonl" for t in _tables()}
    for stale in directory.glob("*.jsonl"):
        if stale.name not in known:
            stale.unlink()
    manifest = {"format": FORMAT, "format_version": FORMAT_VERSION, "schema_version": version,
                "tables": counts}
    _write_atomic(directory / MANIFEST, [json.dumps(manifest, indent=2, sort_keys=True)])
    return {"directory": str(directory), "schema_version": version, "tables": counts,
            "records": sum(counts.values())}


# ---------------------------------------------------------------------------------------------------
# load


def _read_manifest(directory: Path) -> dict[str, Any]:
    path = directory / MANIFEST
    if not directory.is_dir():
        raise UsageError(f"{directory} is not a folder")
    if not path.is_file():
        raise InputFileError(str(path), "no manifest: this folder holds no studylog dump")
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputFileError(str(path), f"not a valid manifest: {exc}") from exc
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
        raise InputFileError(str(path), "not a studylog dump manifest")
    if manifest.get("format_version") != FORMAT_VERSION:
        raise InputFileError(str(path), f"dump format {manifest.get('format_version')!r} is unknown")
    version = manifest.get("schema_version")
    if version != schema.SCHEMA_VERSION:
        raise InputFileError(
            str(path),
            f"dumped from schema version {version}; this studylog loads schema "
            f"{schema.SCHEMA_VERSION}: load it with the studylog that wrote it, then upgrade that store",
        )
    if not isinstance(manifest.get("tables"), dict):
        raise InputFileError(str(path), "the manifest lists no tables")
    return manifest


def _records(path: Path, table: Table) -> Any:
    """The records of one dump file, decoded to column values (base64 back to bytes)."""
    columns = {c.name for c in table.columns}
    binary = _binary_columns(table)
    if not path.is_file():
        raise InputFileError(str(path), "missing from the dump")
    with path.open("r", encoding="utf-8", newline="\n") as handle:
        # read by "\n" only: a record's text may hold other line separators (U+2028, \x1c, \r ...)
        for number, line in enumerate(handle, start=1):
            line = line.rstrip("\n")
            if not line:
                continue
            try:
                record = json.loads(line)
            except json.JSONDecodeError as exc:
                raise InputFileError(str(path), f"not a JSON record: {exc.msg}", number) from exc
            if not isinstance(record, dict) or set(record) != columns:
                got = sorted(record) if isinstance(record, dict) else type(record).__name__
                raise InputFileError(
                    str(path), f"the record's fields {got} are not the table's {sorted(columns)}",
                    number,
                )
            for name in binary:
                if record[name] is not None:
                    try:
                        record[name] = base64.b64decode(record[name], validate=True)
                    except (ValueError, TypeError) as exc:
                        raise InputFileError(str(path), f"{name} is not base64", number) from exc
            yield record


def _store_is_empty(connection: Connection) -> bool:
    for table in _tables():
        if table.name == META_TABLE:
            continue
        if connection.execute(select(func.count()).select_from(table)).scalar():
            return False
    return True


def load(location: StoreLocation, directory: Path) -> dict[str, Any]:
    """Fill an empty (or not yet existing) store from the dump in ``directory``; ids are preserved."""
    manifest = _read_manifest(directory)
    tables = _tables()
    unknown = sorted(set(manifest["tables"]) - {t.name for t in tables})
    if unknown:
        raise InputFileError(str(directory / MANIFEST), f"tables this studylog does not know: {unknown}")
    fresh = location.path is not None and (not location.path.exists() or location.path.stat().st_size == 0)
    if fresh:
        create_store(location)
        try:
            return _fill(location, directory, manifest, tables)
        except BaseException:
            # a load that fails leaves no half-made store behind
            _remove_store_file(location)
            raise
    engine = engine_for(location)
    try:
        with engine.connect() as connection:
            empty_database = schema.read_version(connection) is None
            connection.rollback()
        if empty_database:
            create_store(location)
    except (OperationalError, DBAPIError) as exc:
        ours = translate(exc)
        if ours is None:
            raise
        raise ours from exc
    return _fill(location, directory, manifest, tables)


def _remove_store_file(location: StoreLocation) -> None:
    from studylog.store.session import dispose_engines

    dispose_engines()
    schema.forget_checked()
    if location.path is None:
        return
    for suffix in ("", "-wal", "-shm"):
        Path(f"{location.path}{suffix}").unlink(missing_ok=True)


def _fill(
    location: StoreLocation, directory: Path, manifest: dict[str, Any], tables: list[Table]
) -> dict[str, Any]:
    """Insert every record of the dump in one transaction, checking counts against the manifest."""
    counts: dict[str, int] = {}
    try:
        with transaction(location, write=True) as session:
            connection = session.connection()
            if not _store_is_empty(connection):
                raise UsageError(
                    "the store is not empty; load fills a new store: give --store a new file"
                )
            if location.is_sqlite:
                # a record may refer to a later one of its own table (supersedes, against): check the
                # references once, at commit, as SQLite's deferred foreign keys do
                connection.exec_driver_sql("PRAGMA defer_foreign_keys = ON")
            for table in tables:
                if table.name == META_TABLE:
                    connection.execute(table.delete())
                count = 0
                batch: list[dict[str, Any]] = []
                for record in _records(directory / f"{table.name}.jsonl", table):
                    batch.append(record)
                    if len(batch) >= _BATCH:
                        connection.execute(table.insert(), batch)
                        count += len(batch)
                        batch = []
                if batch:
                    connection.execute(table.insert(), batch)
                    count += len(batch)
                expected = manifest["tables"].get(table.name, 0)
                if count != expected:
                    raise InputFileError(
                        str(directory / f"{table.name}.jsonl"),
                        f"holds {count} records; the manifest says {expected}",
                    )
                counts[table.name] = count
            if not location.is_sqlite:
                _advance_sequences(connection, tables)
    except IntegrityError as exc:
        raise InputFileError(str(directory), f"the records do not fit together: {exc.orig}") from exc
    return {"directory": str(directory), "store": location.url, "tables": counts,
            "records": sum(counts.values())}


def _advance_sequences(connection: Connection, tables: list[Table]) -> None:
    """On PostgreSQL, ids inserted explicitly leave the id sequences behind; move them past the max."""
    if connection.dialect.name != "postgresql":
        return
    for table in tables:
        key = list(table.primary_key.columns)
        if len(key) == 1 and key[0].autoincrement is not False and key[0].type.python_type is int:
            connection.execute(text(
                f"SELECT setval(pg_get_serial_sequence('{table.name}', '{key[0].name}'), "
                f"COALESCE((SELECT MAX({key[0].name}) FROM {table.name}), 0) + 1, false)"
            ))
