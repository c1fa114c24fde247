"""The threats-to-validity register: entries by kind, their links, their changes and what status shows."""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import select

from journal_fixtures import add_var, tx
from studylog import journal, threats
from studylog.errors import InvalidValue, NotFound
from studylog.store.models import Change


def test_threats_by_kind_with_links(study: Path) -> None:
    add_var("age")
    with tx() as session:
        decision = journal.log_decision(session, "exclude under-18s", kind="exclude-cases", removed=12)
        selection = threats.add(session, "only members who renewed online are in the extract", kind="internal",
                                variables=["age"], decisions=[decision["id"], decision["id"]], severity="high")
        threats.add(session, "one city only", kind="external", mitigation="say so in the limitations")
        threats.add(session, "self-reported smoking", kind="construct")
        threats.add(session, "12 models compared", kind="statistical", severity="low")
    assert selection["variables"] == ["age"] and selection["decisions"] == [decision["id"]]
    assert selection["severity"] == "high" and selection["status"] == "open"
    with tx() as session:
        by_kind = {k: [t["text"] for t in threats.list_threats(session, kind=k)] for k in threats.KINDS}
        about_age = threats.list_threats(session, variable="age")
    assert by_kind == {
        "internal": ["only members who renewed online are in the extract"],
        "external": ["one city only"],
        "construct": ["self-reported smoking"],
        "statistical": ["12 models compared"],
    }
    assert [t["id"] for t in about_age] == [selection["id"]]


@pytest.mark.parametrize("bad", [
    {"kind": "causal"}, {"kind": ""}, {"kind": "internal", "severity": "critical"},
    {"kind": "internal", "decisions": [42]}, {"kind": "internal", "variables": ["nope"]},
])
def test_bad_threats_are_refused(study: Path, bad: dict) -> None:
    with tx() as session, pytest.raises((InvalidValue, NotFound)):
        threats.add(session, "x", **bad)


def test_set_changes_with_a_reason_and_keeps_history(study: Path) -> None:
    with tx() as session:
        t = threats.add(session, "drop-outs differ from completers", kind="internal")
    with tx() as session:
        with pytest.raises(InvalidValue, match="--why"):
            threats.update(session, t["id"], status="accepted", why=None)
        with pytest.raises(InvalidValue, match="nothing to change"):
            threats.update(session, t["id"], why="x")
        with pytest.raises(InvalidValue, match="--mitigation"):
            threats.update(session, t["id"], status="mitigated", why="x")
        with pytest.raises(InvalidValue):
            threats.update(session, t["id"], status="closed", why="x")
        with pytest.raises(NotFound):
            threats.update(session, 99, status="accepted", why="x")
    with tx() as session:
        done = threats.update(session, t["id"], mitigation="inverse probability weights", status="mitigated",
                              severity="low", why="weights fitted on baseline covariates")
        changes = list(session.scalars(
            select(Change).where(Change.entity == "threat", Change.action == "update").order_by(Change.id)))
    assert (done["status"], done["severity"], done["mitigation"]) == ("mitigated", "low",
                                                                      "inverse probability weights")
    assert [(c.field, c.old, c.new) for c in changes] == [
        ("mitigation", None, "inverse probability weights"), ("status", "open", "mitigated"),
        ("severity", "medium", "low"),
    ]
    assert {c.why for c in changes} == {"weights fitted on baseline covariates"}


def test_status_lists_threats_with_no_mitigation(study: Path) -> None:
    with tx() as session:
        bare = threats.add(session, "no mitigation yet", kind="construct")
        threats.add(session, "has one", kind="construct", mitigation="validated scale")
        accepted = threats.add(session, "accepted as is", kind="external")
        threats.update(session, accepted["id"], status="accepted", why="out of scope")
        [section] = threats.status_sections(session)
    assert [i["id"] for i in section.items] == [bare["id"]]
    assert section.level == "todo"
