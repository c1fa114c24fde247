"""Replaying the change history against the records it describes (``studylog doctor`` uses it).

Every change to a record goes through :func:`studylog.history.record`. A change with a ``field`` says
that field went from ``old`` to ``new``; a change without a field whose ``new`` is a mapping (a
``create``) sets each of its keys at once. Replayed in order from the first change, the history must end
at the record's current value for every field it mentions, and each change's ``old`` must be the value
the previous ones left. A mismatch means something wrote to a record without writing its history (a bug,
or a hand edit of the file).

The replay is generic: it knows record kinds only through the entity names and the models' columns, so
a new kind of record is covered as soon as its changes name it. Fields the history does not mention
cannot be checked and are left alone; a redaction replaces text on purpose and ends the check of its
field (the history keeps that a redaction happened, not what was removed).
"""

from __future__ import annotations

from collections import defaultdict
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog.store.models import (
    Base,
    Change,
    DataTable,
    Decision,
    DictionaryVersion,
    Entry,
    Link,
    Question,
    Rule,
    Study,
    Threat,
    Variable,
)

# entity names written in ``changes.entity`` and ``links.source_kind``, and the model of each
ENTITY_MODELS: dict[str, type[Base]] = {
    "study": Study,
    "table": DataTable,
    "variable": Variable,
    "rule": Rule,
    "version": DictionaryVersion,
    "decision": Decision,
    "question": Question,
    "threat": Threat,
    "entry": Entry,
    "note": Entry,
    "conclusion": Entry,
    "next": Entry,
    "next-step": Entry,
}

# actions that replace a field's text on purpose without keeping the old text
UNCHECKABLE_ACTIONS = frozenset({"redact"})

# changes that also stamp fields with their own author, time or reason, without a change row for each
# (a "confirm" is one change for the status, and sets who confirmed and when; an answer sets when; a
# withdrawal keeps its reason). A part that sets a field this way adds it here; the doctor's test that
# runs every writing command fails until it does.
STAMPS: dict[str, dict[str, str]] = {
    "confirm": {"confirmed_by": "author", "confirmed_at": "at"},
    "answer": {"answered_at": "at"},
    "withdraw": {"withdrawn_why": "why"},
}

# the record's own bookkeeping, stamped on every change without a change row of its own
BOOKKEEPING = frozenset({"id", "updated_at"})

_SHOWN_CHARS = 200


def _columns(model: type[Base]) -> set[str]:
    return {column.key for column in model.__table__.columns} - BOOKKEEPING


def _ids(session: Session, model: type[Base]) -> set[int]:
    return set(session.scalars(select(model.id)))  # type: ignore[attr-defined]


def same(a: Any, b: Any) -> bool:
    """Equal as recorded values: numbers by value (1 == 1.0 == "1" for a text column holding a number),
    lists and mappings element by element, everything else exactly."""
    if isinstance(a, bool) or isinstance(b, bool):
        return a is b if isinstance(a, bool) and isinstance(b, bool) else a == b
    if isinstance(a, (int, float)) and isinstance(b, (int, float)):
        return float(a) == float(b)
    if isinstance(a, (int, float)) and isinstance(b, str) or isinstance(a, str) and isinstance(
        b, (int, float)
    ):
        try:
            return float(a) == float(b)
        except ValueError:
            return False
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return len(a) == len(b) and all(same(x, y) for x, y in zip(a, b))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(same(a[k], b[k]) for k in a)
    return a == b


def _shown(value: Any) -> Any:
    text = value if isinstance(value, str) else None
    if text is not None and len(text) > _SHOWN_CHARS:
        return text[:_SHOWN_CHARS] + "…"
    return value


def orphaned_links(session: Session) -> list[dict[str, Any]]:
    """Links whose source record (decision, entry, question, threat) does not exist."""
    ids: dict[str, set[int]] = {}
    orphans: list[dict[str, Any]] = []
    for link in session.scalars(select(Link).order_by(Link.id)):
        model = ENTITY_MODELS.get(link.source_kind)
        if model is None:
            orphans.append({"link": link.id, "source_kind": link.source_kind,
                            "source_id": link.source_id, "reason": "unknown kind of record"})
            continue
        known = ids.get(link.source_kind)
        if known is None:
            known = ids[link.source_kind] = _ids(session, model)
        if link.source_id not in known:
            orphans.append({"link": link.id, "source_kind": link.source_kind,
                            "source_id": link.source_id, "reason": "no such record"})
    return orphans


def history_of_missing_records(session: Session) -> list[dict[str, Any]]:
    """Records that have a history but no longer exist (studylog never deletes a record)."""
    missing: list[dict[str, Any]] = []
    pairs = session.execute(select(Change.entity, Change.entity_id).distinct()).all()
    ids: dict[str, set[int]] = {}
    for entity, entity_id in sorted(pairs):
        model = ENTITY_MODELS.get(entity)
        if model is None:
            continue
        known = ids.get(entity)
        if known is None:
            known = ids[entity] = _ids(session, model)
        if entity_id not in known:
            missing.append({"entity": entity, "id": entity_id})
    return missing


def replay(changes: list[Change], columns: set[str]) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """The field values the history of one record ends at, and the breaks in its chain.

    A break is a change whose ``old`` is not what the changes before it left in that field.
    """
    state: dict[str, Any] = {}
    breaks: list[dict[str, Any]] = []
    stopped: set[str] = set()
    for change in changes:
        if change.field is None:
            if isinstance(change.new, dict):
                for key, value in change.new.items():
                    if key in columns and key not in stopped:
                        state[key] = value
            continue
        if change.action in UNCHECKABLE_ACTIONS:
            # a redaction may name several fields at once ("text,why")
            for name in change.field.split(","):
                stopped.add(name.strip())
                state.pop(name.strip(), None)
            continue
        name = change.field
        if name not in columns or name in stopped:
            continue
        if name in state and not same(state[name], change.old):
            breaks.append({"change": change.id, "field": name,
                           "expected_old": _shown(state[name]), "old": _shown(change.old)})
        state[name] = change.new
        for stamp, source in STAMPS.get(change.action, {}).items():
            if stamp in columns and stamp not in stopped:
                state[stamp] = getattr(change, source)
    return state, breaks


def mismatches(session: Session) -> list[dict[str, Any]]:
    """Every field whose history does not replay to its current value, and every break in a chain."""
    grouped: dict[tuple[str, int], list[Change]] = defaultdict(list)
    for change in session.scalars(select(Change).order_by(Change.id)):
        if change.entity in ENTITY_MODELS:
            grouped[(change.entity, change.entity_id)].append(change)
    found: list[dict[str, Any]] = []
    for (entity, entity_id), changes in sorted(grouped.items()):
        model = ENTITY_MODELS[entity]
        row = session.get(model, entity_id)
        if row is None:
            continue  # reported by history_of_missing_records
        state, breaks = replay(changes, _columns(model))
        for item in breaks:
            found.append({"entity": entity, "id": entity_id, "problem": "broken chain", **item})
        for name, value in sorted(state.items()):
            current = getattr(row, name)
            if not same(current, value):
                found.append({"entity": entity, "id": entity_id, "field": name,
                              "problem": "does not replay",
                              "history": _shown(value), "current": _shown(current)})
    return found
