"""Cross-field rules of a table: conditions every row must meet, in studylog's expression language.

A rule is validated against the table's variables when it is added (unknown columns and malformed
expressions are refused with the position of the problem), checked on every drop of its table, and
retired rather than deleted; its name stays taken so that old findings keep their meaning. Every change
goes through :func:`studylog.history.record`.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog import dictionary, history
from studylog.clock import author, now
from studylog.errors import AlreadyExists, InvalidValue, NotFound, UsageError
from studylog.store.models import DataTable, Rule

SEVERITIES = ("error", "warning")
# the check's own rule names: a cross-field rule may not take one, or findings would be ambiguous
RESERVED = ("absent-column", "undeclared-column", "renamed-column", "type", "level", "range",
            "plausible", "required", "missing-share", "unique", "key", "pattern", "repeated-row", "orphan")


def _validated(session: Session, table: DataTable, expression: str) -> str:
    from studylog.data.expressions import compile_expression, kind_of_variable_type

    kinds = {v.name: kind_of_variable_type(v.type) for v in dictionary.variables(session, table=table.name)}
    if not kinds:
        raise InvalidValue(f"table '{table.name}' has no variables yet; add them before its rules")
    compile_expression(expression, kinds)
    return expression.strip()


def add(
    session: Session,
    name: str,
    expression: str,
    *,
    table: str | None = None,
    severity: str = "error",
    why: str | None = None,
) -> Rule:
    """Add an active cross-field rule to a table (the only table when ``table`` is None)."""
    name = name.strip()
    if not name:
        raise InvalidValue("a rule needs a name")
    if name in RESERVED:
        raise InvalidValue(f"'{name}' is the name of one of the check's own rules; choose another name")
    if severity not in SEVERITIES:
        raise InvalidValue(f"severity must be one of {', '.join(SEVERITIES)}, not '{severity}'")
    owner = dictionary.resolve_table(session, table)
    existing = session.scalars(select(Rule).where(Rule.table_id == owner.id, Rule.name == name)).first()
    if existing is not None:
        state = "retired" if existing.status != "active" else "active"
        raise AlreadyExists(f"table '{owner.name}' already has a rule '{name}' ({state}); choose another name")
    text = _validated(session, owner, expression)
    rule = Rule(table_id=owner.id, name=name, expression=text, severity=severity, why=why,
                status="active", author=author(), created_at=now())
    session.add(rule)
    session.flush()
    history.record(session, "rule", rule.id, "create", new=rule_dict(session, rule), why=why)
    return rule


def find(session: Session, name: str, table: str | None = None) -> Rule:
    """A rule by name; without ``table`` the name must be unambiguous across tables."""
    query = select(Rule).where(Rule.name == name)
    if table is not None:
        query = query.where(Rule.table_id == dictionary.resolve_table(session, table).id)
    found = list(session.scalars(query))
    if not found:
        raise NotFound(f"no rule '{name}'" + (f" in table '{table}'" if table else ""))
    if len(found) > 1:
        tables = ", ".join(sorted(session.get(DataTable, r.table_id).name for r in found))
        raise UsageError(f"several tables have a rule '{name}' ({tables}); say which with --table")
    return found[0]


def retire(session: Session, name: str, *, why: str, table: str | None = None) -> Rule:
    """Stop checking a rule; it stays in the store with its history."""
    if not why or not why.strip():
        raise UsageError("say why the rule is retired (--why)")
    rule = find(session, name, table)
    if rule.status != "active":
        raise InvalidValue(f"rule '{name}' is already retired")
    history.record(session, "rule", rule.id, "retire", field="status", old=rule.status, new="retired",
                   why=why)
    rule.status = "retired"
    session.flush()
    return rule


def listing(session: Session, table: str | None = None, *, include_retired: bool = True) -> list[dict[str, Any]]:
    """The rules of one table (or all tables), oldest first."""
    query = select(Rule).order_by(Rule.table_id, Rule.id)
    if table is not None:
        query = query.where(Rule.table_id == dictionary.resolve_table(session, table).id)
    if not include_retired:
        query = query.where(Rule.status == "active")
    return [rule_dict(session, r) for r in session.scalars(query)]


def rule_dict(session: Session, rule: Rule) -> dict[str, Any]:
    table = session.get(DataTable, rule.table_id)
    return {
        "id": rule.id, "table": table.name if table else None, "name": rule.name,
        "expression": rule.expression, "severity": rule.severity, "status": rule.status,
        "why": rule.why, "author": rule.author, "created_at": rule.created_at,
    }
