"""Notes, conclusions and next steps, and the timeline of everything the study recorded.

The timeline reads the change history (every record's creation and every change to it, with its author)
and the records themselves (their current text, so a redacted text never reappears), plus the data drops
checked, in the order they happened.
"""

from __future__ import annotations

from datetime import datetime, timezone
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog import history
from studylog.clock import author, now
from studylog.errors import InvalidValue
from studylog.journal import (
    find_variable,
    find_variables,
    ids_linked_to_variable,
    link,
    linked_variables,
    require_text,
)
from studylog.store.models import (
    Change,
    DataTable,
    Decision,
    DictionaryVersion,
    Drop,
    Entry,
    Question,
    Rule,
    Study,
    Threat,
    Variable,
)

ENTRY_KINDS: dict[str, str] = {
    "note": "an observation made while working",
    "conclusion": "an inference for the conclusions of the write-up",
    "next": "a next step or a question for further study",
}
JOURNAL_ENTITIES: dict[str, type] = {
    "decision": Decision, "question": Question, "threat": Threat, "entry": Entry,
}


def entry_dicts(session: Session, entries: list[Entry]) -> list[dict[str, Any]]:
    names = linked_variables(session, "entry", [e.id for e in entries])
    return [
        {"id": e.id, "kind": e.kind, "text": e.text, "tags": list(e.tags or []),
         "variables": names.get(e.id, []), "author": e.author, "created_at": e.created_at}
        for e in entries
    ]


def add_entry(session: Session, kind: str, text: str, *, variables: list[str] | None = None,
              tags: list[str] | None = None) -> dict[str, Any]:
    """Record a note, a conclusion or a next step."""
    if kind not in ENTRY_KINDS:
        raise InvalidValue(f"unknown entry kind {kind!r}; one of: {', '.join(ENTRY_KINDS)}")
    text = require_text(text, f"the {kind}'s text")
    linked = find_variables(session, variables)
    clean_tags: list[str] = []
    for tag in tags or []:
        if tag.strip() and tag.strip() not in clean_tags:
            clean_tags.append(tag.strip())
    stamp = now()
    entry = Entry(kind=kind, text=text, tags=clean_tags, author=author(), created_at=stamp)
    session.add(entry)
    session.flush()
    link(session, "entry", entry.id, variables=linked)
    result = entry_dicts(session, [entry])[0]
    history.record(session, "entry", entry.id, "create", new=result, at=stamp)
    return result


def list_entries(session: Session, kind: str | None = None) -> list[dict[str, Any]]:
    query = select(Entry)
    if kind:
        query = query.where(Entry.kind == kind)
    return entry_dicts(session, list(session.scalars(query.order_by(Entry.id))))


def parse_since(since: str | None) -> str | None:
    """A date or date-time as the sortable UTC text the store's timestamps use."""
    if since is None:
        return None
    text = since.strip()
    try:
        moment = datetime.fromisoformat(text)
    except ValueError as exc:
        raise InvalidValue(f"--since {since!r} is not a date (YYYY-MM-DD) or an ISO 8601 date-time") from exc
    if len(text) == 10:
        return moment.date().isoformat()
    if moment.tzinfo is not None:
        moment = moment.astimezone(timezone.utc)
    return moment.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _labels(session: Session, changes: list[Change]) -> dict[tuple[str, int], dict[str, Any]]:
    """The current name or text (and kind) of each record the changes are about."""
    wanted: dict[str, set[int]] = {}
    for change in changes:
        wanted.setdefault(change.entity, set()).add(change.entity_id)
    found: dict[tuple[str, int], dict[str, Any]] = {}

    def fetch(entity: str, model: type, label: str, kind: str | None = None) -> None:
        ids = wanted.get(entity)
        if not ids:
            return
        columns = [model.id, getattr(model, label)] + ([getattr(model, kind)] if kind else [])
        for row in session.execute(select(*columns).where(model.id.in_(ids))):
            found[(entity, row[0])] = {"text": row[1], "kind": row[2] if kind else None}

    fetch("decision", Decision, "text", "kind")
    fetch("question", Question, "text")
    fetch("threat", Threat, "text", "kind")
    fetch("entry", Entry, "text", "kind")
    fetch("variable", Variable, "name")
    fetch("table", DataTable, "name")
    fetch("rule", Rule, "name")
    fetch("study", Study, "title")
    fetch("version", DictionaryVersion, "name")
    return found


def timeline(session: Session, *, since: str | None = None, variable: str | None = None) -> list[dict[str, Any]]:
    """Every record and change in the order it happened, with its author (oldest first)."""
    since_text = parse_since(since)
    query = select(Change)
    if since_text:
        query = query.where(Change.at >= since_text)
    drops_query = select(Drop)
    if since_text:
        drops_query = drops_query.where(Drop.checked_at >= since_text)
    if variable:
        target = find_variable(session, variable)
        scope = [(Change.entity == "variable") & (Change.entity_id == target.id)]
        for entity in JOURNAL_ENTITIES:
            ids = ids_linked_to_variable(session, entity, target)
            if ids:
                scope.append((Change.entity == entity) & Change.entity_id.in_(ids))
        from sqlalchemy import or_

        query = query.where(or_(*scope))
        drops_query = drops_query.where(Drop.table_id == target.table_id)
    changes = list(session.scalars(query.order_by(Change.at, Change.id)))
    labels = _labels(session, changes)
    events: list[dict[str, Any]] = []
    for change in changes:
        label = labels.get((change.entity, change.entity_id), {})
        events.append({
            "at": change.at, "author": change.author, "entity": change.entity, "record": change.entity_id,
            "kind": label.get("kind"), "action": change.action, "field": change.field,
            "old": change.old, "new": change.new, "why": change.why, "question": change.question_id,
            "text": label.get("text"), "change": change.id,
        })
    for drop in session.scalars(drops_query.order_by(Drop.id)):
        events.append({
            "at": drop.checked_at, "author": drop.author, "entity": "drop", "record": drop.id,
            "kind": None, "action": "check", "field": None, "old": None, "new": None, "why": None,
            "question": None, "change": None,
            "text": f"{drop.file_name}: {drop.rows} rows, {drop.errors} errors, {drop.warnings} warnings"
            + (f" ({drop.label})" if drop.label else ""),
        })
    events.sort(key=lambda e: (e["at"] or "", e["change"] if e["change"] is not None else -1))
    return events
