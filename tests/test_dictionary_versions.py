"""Named versions: what a freeze keeps, and the diff between two versions or a version and now."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from studylog import dictionary, versions
from studylog.errors import AlreadyExists, NotFound
from studylog.store.models import Change, Rule
from studylog.store.session import locate, transaction


@pytest.fixture
def session(study: Path) -> Iterator[Session]:
    with transaction(locate(), write=True) as session:
        yield session


def test_freeze_keeps_the_whole_dictionary_and_the_last_change(session: Session) -> None:
    table = dictionary.add_table(session, "visits", key="visit_id", grain="one row per visit")
    dictionary.add_variable(session, "visit_id", {"type": "identifier"}, table="visits")
    session.add(Rule(table_id=table.id, name="dates_in_order", expression="start <= end", author="t",
                     created_at="2026-01-01T00:00:00Z"))
    session.flush()
    last = session.scalar(select(func.max(Change.id)))
    version = versions.freeze(session, "agreed", note="with the data owner")
    assert version.change_id == last
    assert version.snapshot["tables"] == [{
        "name": "visits", "description": None, "grain": "one row per visit", "key": ["visit_id"],
        "rules": [{"name": "dates_in_order", "expression": "start <= end", "severity": "error"}],
    }]
    assert [v["name"] for v in version.snapshot["variables"]] == ["visit_id"]
    assert "id" not in version.snapshot["variables"][0]
    spec = dictionary.table_spec(session, version="agreed")
    assert [r.name for r in spec.rules] == ["dates_in_order"]
    with pytest.raises(AlreadyExists):
        versions.freeze(session, "agreed")
    with pytest.raises(AlreadyExists, match="stands for the dictionary as it is now"):
        versions.freeze(session, "current")


def test_diff_reports_added_removed_renamed_changed_and_tables(session: Session) -> None:
    dictionary.add_variable(session, "age", {"type": "integer", "maximum": "120"})
    dictionary.add_variable(session, "sex", {"type": "categorical", "levels": "f=female,m=male"})
    versions.freeze(session, "v1")
    dictionary.update_variable(session, "sex", {"levels": "f=female,m=male,x=other"})
    dictionary.rename(session, "age", "age_years", why="clearer")
    dictionary.update_variable(session, "age_years", {"unit": "years"})
    dictionary.add_table(session, "visits")
    dictionary.update_table(session, "data", {"grain": "one row per member"})
    diff = versions.diff(session, "v1")
    assert diff["from"] == "v1" and diff["to"] == "current"
    assert diff["added"] == [] and diff["removed"] == []
    assert len(diff["renamed"]) == 1
    renamed = diff["renamed"][0]
    assert (renamed["old"], renamed["new"]) == ("age", "age_years")
    assert {f["field"] for f in renamed["fields"]} == {"aliases", "unit"}
    (sex,) = diff["changed"]
    assert sex["name"] == "sex"
    assert sex["fields"][0]["field"] == "levels"
    assert [c["code"] for c in sex["fields"][0]["new"]] == ["f", "m", "x"]
    assert diff["tables"]["added"] == ["visits"]
    assert diff["tables"]["changed"] == [
        {"name": "data", "fields": [{"field": "grain", "old": None, "new": "one row per member"}]}
    ]
    versions.freeze(session, "v2")
    dictionary.add_variable(session, "lab", {"type": "number"}, table="visits")
    assert versions.diff(session, "v1", "v2")["added"] == []
    assert versions.diff(session, "v2")["added"] == [{"table": "visits", "name": "lab"}]
    # the reverse direction sees the rename undone as removed + added (aliases only point forward)
    back = versions.diff(session, "v2", "v1")
    assert back["removed"] == [{"table": "data", "name": "age_years"}]
    assert back["added"] == [{"table": "data", "name": "age"}]
    with pytest.raises(NotFound, match="versions: v1, v2"):
        versions.diff(session, "v3")
