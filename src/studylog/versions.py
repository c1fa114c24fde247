"""Named versions of the dictionary: freeze the whole dictionary, list versions, compare two of them.

A snapshot is ``{"tables": [...], "variables": [...]}`` in the export shape (no ids, no timestamps), each
table with its active cross-field rules, so that a drop can later be checked against exactly what was
agreed. A version records the id of the last change in force when it was frozen.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from studylog import dictionary, history
from studylog.clock import author, now
from studylog.dictionary_fields import FIELDS, check_name
from studylog.errors import AlreadyExists, NotFound
from studylog.store.models import Change, DictionaryVersion

CURRENT = "current"


def snapshot(session: Session) -> dict[str, Any]:
    """The whole dictionary as it is now."""
    tables = []
    for table in dictionary.tables(session):
        entry = {k: v for k, v in dictionary.table_dict(table).items()
                 if k in ("name", "description", "grain", "key")}
        entry["rules"] = dictionary.rule_entries(session, table)
        tables.append(entry)
    variables = [dictionary.export_entry(v) for v in dictionary.variables(session)]
    return {"tables": tables, "variables": variables}


def get(session: Session, name: str) -> DictionaryVersion:
    found = session.scalars(select(DictionaryVersion).where(DictionaryVersion.name == name)).first()
    if found is None:
        known = ", ".join(v.name for v in versions(session)) or "none yet"
        raise NotFound(f"no dictionary version '{name}' (versions: {known})")
    return found


def versions(session: Session) -> list[DictionaryVersion]:
    return list(session.scalars(select(DictionaryVersion).order_by(DictionaryVersion.id)))


def freeze(session: Session, name: str, *, note: str | None = None) -> DictionaryVersion:
    check_name(name, "version")
    if name == CURRENT:
        raise AlreadyExists(f"'{CURRENT}' stands for the dictionary as it is now; choose another name")
    if session.scalars(select(DictionaryVersion).where(DictionaryVersion.name == name)).first():
        raise AlreadyExists(f"dictionary version '{name}' already exists")
    last_change = session.scalar(select(func.max(Change.id)))
    stamp = now()
    version = DictionaryVersion(
        name=name, note=note.strip() if note and note.strip() else None, change_id=last_change,
        snapshot=snapshot(session), author=author(), created_at=stamp,
    )
    session.add(version)
    session.flush()
    history.record(session, "version", version.id, "create", new={"name": name, "note": version.note,
                   "change_id": last_change}, at=stamp)
    return version


def version_dict(version: DictionaryVersion) -> dict[str, Any]:
    return {
        "id": version.id,
        "name": version.name,
        "note": version.note,
        "change_id": version.change_id,
        "tables": len(version.snapshot.get("tables", [])),
        "variables": len(version.snapshot.get("variables", [])),
        "author": version.author,
        "created_at": version.created_at,
    }


def _keyed(entries: list[dict[str, Any]]) -> dict[tuple[str, str], dict[str, Any]]:
    return {(e["table"], e["name"]): e for e in entries}


def _field_changes(old: dict[str, Any], new: dict[str, Any], fields: tuple[str, ...]) -> list[dict[str, Any]]:
    return [{"field": f, "old": old.get(f), "new": new.get(f)} for f in fields if old.get(f) != new.get(f)]


def diff(session: Session, first: str, second: str | None = None) -> dict[str, Any]:
    """What was added, removed, renamed and changed from version ``first`` to ``second`` (or now).

    A variable whose aliases hold the name of a removed variable of the same table counts as renamed.
    """
    before = get(session, first).snapshot
    to_name = second or CURRENT
    after = snapshot(session) if to_name == CURRENT else get(session, to_name).snapshot
    old_vars, new_vars = _keyed(before.get("variables", [])), _keyed(after.get("variables", []))
    removed_keys = [k for k in old_vars if k not in new_vars]
    added_keys = [k for k in new_vars if k not in old_vars]
    renamed = []
    for key in list(added_keys):
        entry = new_vars[key]
        for old_key in removed_keys:
            if old_key[0] == key[0] and old_key[1] in (entry.get("aliases") or []):
                fields = _field_changes(old_vars[old_key], entry, FIELDS)
                renamed.append({"table": key[0], "old": old_key[1], "new": key[1], "fields": fields})
                added_keys.remove(key)
                removed_keys.remove(old_key)
                break
    changed = []
    for key, old in old_vars.items():
        if key in new_vars:
            fields = _field_changes(old, new_vars[key], FIELDS)
            if fields:
                changed.append({"table": key[0], "name": key[1], "fields": fields})
    old_tables = {t["name"]: t for t in before.get("tables", [])}
    new_tables = {t["name"]: t for t in after.get("tables", [])}
    table_fields = ("description", "grain", "key", "rules")
    return {
        "from": first,
        "to": to_name,
        "added": [{"table": t, "name": n} for t, n in added_keys],
        "removed": [{"table": t, "name": n} for t, n in removed_keys],
        "renamed": renamed,
        "changed": changed,
        "tables": {
            "added": [n for n in new_tables if n not in old_tables],
            "removed": [n for n in old_tables if n not in new_tables],
            "changed": [
                {"name": n, "fields": _field_changes(old_tables[n], new_tables[n], table_fields)}
                for n in old_tables if n in new_tables
                and _field_changes(old_tables[n], new_tables[n], table_fields)
            ],
        },
    }
