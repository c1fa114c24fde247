"""The change history every record keeps: what changed, old and new value, why, who, when.

Every part of studylog writes its changes through :func:`record`, so that ``var history``, the timeline,
``doctor``'s replay check and the dumps all read one table.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog.clock import author, now
from studylog.store.models import Change


def record(
    session: Session,
    entity: str,
    entity_id: int,
    action: str,
    *,
    field: str | None = None,
    old: Any = None,
    new: Any = None,
    why: str | None = None,
    question_id: int | None = None,
    at: str | None = None,
    by: str | None = None,
) -> Change:
    """Add one change row (flushed, so its id is known)."""
    change = Change(
        entity=entity,
        entity_id=entity_id,
        action=action,
        field=field,
        old=old,
        new=new,
        why=why,
        question_id=question_id,
        author=by or author(),
        at=at or now(),
    )
    session.add(change)
    session.flush()
    return change


def for_entity(session: Session, entity: str, entity_id: int | None = None) -> list[Change]:
    """Changes of one kind of record (or one record), oldest first."""
    query = select(Change).where(Change.entity == entity)
    if entity_id is not None:
        query = query.where(Change.entity_id == entity_id)
    return list(session.scalars(query.order_by(Change.id)))


def as_dict(change: Change) -> dict[str, Any]:
    return {
        "id": change.id,
        "entity": change.entity,
        "entity_id": change.entity_id,
        "action": change.action,
        "field": change.field,
        "old": change.old,
        "new": change.new,
        "why": change.why,
        "question": change.question_id,
        "author": change.author,
        "at": change.at,
    }
