"""The study itself: creating one, and its title, target and index time."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog.clock import author, now
from studylog.errors import StoreCorrupt
from studylog.store.models import Change, Study
from studylog.store.session import StoreLocation, create_store, transaction


def create(
    location: StoreLocation,
    *,
    title: str | None = None,
    target: str | None = None,
    index_time: str | None = None,
    description: str | None = None,
) -> dict[str, Any]:
    """Make a new store with its study record; refuses a folder that already holds a study."""
    create_store(location)
    with transaction(location, write=True) as session:
        study = Study(
            title=title or (location.path.parent.name if location.path else "study"),
            description=description,
            target=target,
            index_time=index_time,
            created_at=now(),
            author=author(),
        )
        session.add(study)
        session.flush()
        session.add(
            Change(entity="study", entity_id=study.id, action="create", field=None, old=None,
                   new={"title": study.title, "target": target, "index_time": index_time},
                   author=study.author, at=study.created_at)
        )
        return as_dict(study) | {"store": location.url}


def get(session: Session) -> Study:
    study = session.scalars(select(Study).order_by(Study.id).limit(1)).first()
    if study is None:
        raise StoreCorrupt("the store has no study record; it is damaged (run 'studylog doctor')")
    return study


def as_dict(study: Study) -> dict[str, Any]:
    return {
        "title": study.title,
        "description": study.description,
        "target": study.target,
        "index_time": study.index_time,
        "plan_frozen_at": study.plan_frozen_at,
        "created_at": study.created_at,
        "author": study.author,
    }
