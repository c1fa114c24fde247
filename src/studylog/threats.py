"""The threats-to-validity register: what could make the study's conclusions wrong, and what was done about it.

Kinds follow the usual division of validity (Shadish, Cook & Campbell 2002): internal (is the association
causal / free of bias in this sample), external (does it generalise), construct (do the variables measure
what they are said to), statistical conclusion (power, multiplicity, violated assumptions). A threat links
to the variables and decisions it concerns; it is open until mitigated or accepted.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog import history
from studylog.clock import author, now
from studylog.errors import InvalidValue, NotFound
from studylog.journal import (
    choice,
    find_variable,
    find_variables,
    get_decision,
    ids_linked_to_variable,
    link,
    linked_decisions,
    linked_variables,
    require_text,
)
from studylog.store.models import Threat

KINDS: dict[str, str] = {
    "internal": "bias within the study: confounding, selection, measurement error, leakage",
    "external": "whether the results carry over to other people, places, times",
    "construct": "whether the variables measure what they are said to measure",
    "statistical": "statistical conclusion validity: power, multiplicity, violated assumptions",
}
SEVERITIES = ("low", "medium", "high")
STATUSES = ("open", "mitigated", "accepted")


def get_threat(session: Session, threat_id: int) -> Threat:
    threat = session.get(Threat, threat_id)
    if threat is None:
        raise NotFound(f"no threat {threat_id}")
    return threat


def threat_dicts(session: Session, threats: list[Threat]) -> list[dict[str, Any]]:
    ids = [t.id for t in threats]
    names = linked_variables(session, "threat", ids)
    decisions = linked_decisions(session, "threat", ids)
    return [
        {
            "id": t.id,
            "text": t.text,
            "kind": t.kind,
            "severity": t.severity,
            "mitigation": t.mitigation,
            "status": t.status,
            "variables": names.get(t.id, []),
            "decisions": decisions.get(t.id, []),
            "author": t.author,
            "created_at": t.created_at,
        }
        for t in threats
    ]


def threat_dict(session: Session, threat: Threat) -> dict[str, Any]:
    return threat_dicts(session, [threat])[0]


def add(session: Session, text: str, *, kind: str, variables: list[str] | None = None,
        decisions: list[int] | None = None, severity: str | None = None,
        mitigation: str | None = None) -> dict[str, Any]:
    """Enter a threat in the register."""
    text = require_text(text, "the threat")
    if not kind:
        raise InvalidValue(f"--kind is required: one of {', '.join(KINDS)}")
    choice(kind, tuple(KINDS), "threat kind")
    severity = choice(severity or "medium", SEVERITIES, "severity")
    linked = find_variables(session, variables)
    decision_ids: list[int] = []
    for decision_id in decisions or []:
        if decision_id not in decision_ids:
            decision_ids.append(get_decision(session, decision_id).id)
    stamp = now()
    threat = Threat(text=text, kind=kind, severity=severity,
                    mitigation=mitigation.strip() if mitigation and mitigation.strip() else None,
                    status="open", author=author(), created_at=stamp)
    session.add(threat)
    session.flush()
    link(session, "threat", threat.id, variables=linked, decisions=decision_ids)
    result = threat_dict(session, threat)
    history.record(session, "threat", threat.id, "create", new=result, at=stamp)
    return result


def update(session: Session, threat_id: int, *, why: str | None, mitigation: str | None = None,
           status: str | None = None, severity: str | None = None) -> dict[str, Any]:
    """Change a threat's mitigation, status or severity; each change is in the history with its reason."""
    why = require_text(why, "--why (why the threat changes)")
    threat = get_threat(session, threat_id)
    changes: dict[str, str | None] = {}
    if mitigation is not None:
        # an empty --mitigation "" clears it
        changes["mitigation"] = mitigation.strip() or None
    if status is not None:
        changes["status"] = choice(status, STATUSES, "status")
    if severity is not None:
        changes["severity"] = choice(severity, SEVERITIES, "severity")
    if not changes:
        raise InvalidValue("nothing to change: give --mitigation, --status or --severity")
    mitigation_after = changes["mitigation"] if "mitigation" in changes else threat.mitigation
    if changes.get("status", threat.status) == "mitigated" and not mitigation_after:
        raise InvalidValue("a threat is mitigated by something: give --mitigation")
    stamp = now()
    for field, value in changes.items():
        old = getattr(threat, field)
        if old != value:
            history.record(session, "threat", threat.id, "update", field=field, old=old, new=value,
                           why=why, at=stamp)
            setattr(threat, field, value)
    return threat_dict(session, threat)


def list_threats(session: Session, *, kind: str | None = None, status: str | None = None,
                 variable: str | None = None) -> list[dict[str, Any]]:
    choice(kind, tuple(KINDS), "threat kind")
    choice(status, STATUSES, "status")
    query = select(Threat)
    if kind:
        query = query.where(Threat.kind == kind)
    if status:
        query = query.where(Threat.status == status)
    if variable:
        query = query.where(Threat.id.in_(ids_linked_to_variable(session, "threat", find_variable(session, variable))))
    return threat_dicts(session, list(session.scalars(query.order_by(Threat.id))))


def status_sections(session: Session) -> list[Any]:
    from studylog.status import Section

    bare = session.scalars(
        select(Threat).where(Threat.status == "open", Threat.mitigation.is_(None)).order_by(Threat.id)
    )
    items = [{"id": t.id, "kind": t.kind, "severity": t.severity, "text": t.text} for t in bare]
    return [Section("threats", "Threats with no mitigation", items, "todo" if items else "ok",
                    f"{len(items)} without mitigation")]
