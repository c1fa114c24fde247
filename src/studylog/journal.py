"""The journal's decisions: what was decided, why, on which data facts and in which code; and the plan freeze.

A decision names the stage of the analysis it belongs to (its kind), the variables it is about, what it
rests on (the facts of those variables in the latest checked drop, captured when it is logged) and where
it lives in the code (a path and line, and the git commit of the work tree). Its status moves along
proposed -> adopted -> implemented, and it may be superseded by a newer decision or reverted; nothing is
deleted, and every change is a row of the change history.

Imports only the store and the standard library (the journal's commands must start fast).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog import history
from studylog import study as study_records
from studylog.clock import author, now
from studylog.errors import InvalidValue, NotFound, UsageError
from studylog.store.models import DataTable, Decision, Drop, Link, Profile, Variable

# The stages of an analysis a decision can belong to: short name -> what it covers (shown in help).
KINDS: dict[str, str] = {
    "cleaning": "fixing recorded values: typos, inconsistent codes, units, impossible entries",
    "recoding": "recoding values or levels, deriving a variable from others",
    "duplicates": "finding and resolving repeated records",
    "missing": "missing data: deletion, single-value or model-based imputation (give --assumption)",
    "outliers": "detecting and treating extreme values",
    "transform": "transformation and scaling (log, standardising, binning)",
    "merge-levels": "merging rare or equivalent levels of a categorical variable",
    "exclude-cases": "excluding records (give --removed N)",
    "exclude-variables": "excluding variables from the analysis",
    "select-features": "feature selection",
    "extract-features": "feature extraction (components, embeddings, aggregates)",
    "sampling": "sampling, and treatment of class imbalance (weights, over/under-sampling)",
    "split": "data split and validation design: hold-out, cross-validation, bootstrap, time-ordered "
    "(give --seed)",
    "model": "the model or estimator, its specification and tuning",
    "metric": "the evaluation metric and how it is estimated",
    "other": "anything else",
}
STATUSES = ("proposed", "adopted", "implemented", "superseded", "reverted")
ASSUMPTIONS = ("MCAR", "MAR", "MNAR")
# statuses a decision can be in and still be in force
IN_FORCE = ("adopted", "implemented")
FACT_LEVELS = 20
MASKED_TYPES = ("text", "identifier")


# ---- shared helpers of the journal's records (used by questions and threats too) ----

def require_text(text: str | None, what: str) -> str:
    if text is None or not text.strip():
        raise InvalidValue(f"{what} must not be empty")
    return text.strip()


def choice(value: str | None, allowed: tuple[str, ...] | list[str], what: str) -> str | None:
    if value is None:
        return None
    if value not in allowed:
        raise InvalidValue(f"unknown {what} {value!r}; one of: {', '.join(allowed)}")
    return value


def find_variable(session: Session, name: str) -> Variable:
    """A variable by name (``TABLE.NAME`` when the name is in several tables)."""
    from studylog.dictionary import get_variable

    return get_variable(session, name)


def find_variables(session: Session, names: list[str] | None) -> list[Variable]:
    found: list[Variable] = []
    for name in names or []:
        variable = find_variable(session, name)
        if variable not in found:
            found.append(variable)
    return found


def link(session: Session, source_kind: str, source_id: int, *, variables: list[Variable] | None = None,
         decisions: list[int] | None = None) -> None:
    for variable in variables or []:
        session.add(Link(source_kind=source_kind, source_id=source_id, variable_id=variable.id))
    for decision_id in decisions or []:
        session.add(Link(source_kind=source_kind, source_id=source_id, decision_id=decision_id))
    if variables or decisions:
        session.flush()


def linked_variables(session: Session, source_kind: str, ids: list[int]) -> dict[int, list[str]]:
    """The names of the variables each record links to, in link order."""
    if not ids:
        return {}
    rows = session.execute(
        select(Link.source_id, Variable.name)
        .join(Variable, Variable.id == Link.variable_id)
        .where(Link.source_kind == source_kind, Link.source_id.in_(ids))
        .order_by(Link.id)
    )
    names: dict[int, list[str]] = {i: [] for i in ids}
    for source_id, name in rows:
        names[source_id].append(name)
    return names


def linked_decisions(session: Session, source_kind: str, ids: list[int]) -> dict[int, list[int]]:
    if not ids:
        return {}
    rows = session.execute(
        select(Link.source_id, Link.decision_id)
        .where(Link.source_kind == source_kind, Link.source_id.in_(ids), Link.decision_id.is_not(None))
        .order_by(Link.id)
    )
    found: dict[int, list[int]] = {i: [] for i in ids}
    for source_id, decision_id in rows:
        found[source_id].append(decision_id)
    return found


def ids_linked_to_variable(session: Session, source_kind: str, variable: Variable) -> list[int]:
    return list(session.scalars(
        select(Link.source_id).where(Link.source_kind == source_kind, Link.variable_id == variable.id)
    ))


def store_path(session: Session) -> Path | None:
    """The store's file when it is SQLite on disk (the git state is also looked for beside it)."""
    url = session.get_bind().url
    if url.get_backend_name() == "sqlite" and url.database and url.database != ":memory:":
        return Path(url.database)
    return None


# ---- what a decision rests on ----

def parse_code(code: str | None) -> tuple[str | None, int | None]:
    """``PATH[:LINE]`` -> (path, line)."""
    if code is None:
        return None, None
    code = code.strip()
    if not code:
        raise InvalidValue("--code needs a path, optionally with :LINE")
    path, sep, line = code.rpartition(":")
    if sep and line.isdigit() and path:
        if int(line) < 1:
            raise InvalidValue(f"the line in --code {code!r} must be 1 or more")
        return path, int(line)
    return code, None


def _masked(variable: Variable) -> bool:
    # imported here: data.spec costs a few milliseconds that a decision without variables need not pay
    from studylog.data.spec import MASKED_SENSITIVITY

    return variable.sensitivity in MASKED_SENSITIVITY or variable.type in MASKED_TYPES


def latest_profile(session: Session, variable: Variable,
                   drop_id: int | None = None) -> tuple[Drop, Profile | None] | None:
    """The latest checked drop of the variable's table (or ``drop_id`` when it is one of them) and the
    variable's stored profile in it, found under its name or one of its aliases; None before any drop."""
    query = select(Drop).where(Drop.table_id == variable.table_id)
    drop = None
    if drop_id is not None:
        drop = session.scalars(query.where(Drop.id == drop_id)).first()
    if drop is None:
        drop = session.scalars(query.order_by(Drop.id.desc()).limit(1)).first()
    if drop is None:
        return None
    names = [variable.name, *(variable.aliases or [])]
    profile = session.scalars(
        select(Profile).where(Profile.drop_id == drop.id, Profile.variable.in_(names))
    ).first()
    return drop, profile


def variable_facts(session: Session, variable: Variable, drop_id: int | None = None) -> dict[str, Any] | None:
    """The variable's facts in the latest checked drop of its table (or in ``drop_id`` when it is one).

    Values of direct-identifier and sensitive variables and of free text are not copied into the journal:
    their facts keep counts only.
    """
    found = latest_profile(session, variable, drop_id)
    if found is None:
        return None
    drop, profile = found
    table_name = session.scalar(select(DataTable.name).where(DataTable.id == variable.table_id))
    facts: dict[str, Any] = {
        "table": table_name, "drop": drop.id, "drop_label": drop.label, "checked_at": drop.checked_at,
        "rows": drop.rows,
    }
    if profile is None:
        facts["present"] = False
        return facts
    data = profile.data or {}
    rows = data.get("rows", drop.rows)
    missing = data.get("missing")
    facts.update({
        "present": True,
        "rows": rows,
        "n": data.get("count"),
        "missing": missing,
        "missing_share": (missing / rows) if isinstance(missing, (int, float)) and rows else None,
        "missing_codes": data.get("missing_codes") or [],
        "distinct": data.get("distinct"),
    })
    if data.get("outliers") is not None:
        facts["outliers"] = data["outliers"]
    if not _masked(variable):
        for key in ("min", "max", "median", "mean", "sd"):
            if data.get(key) is not None:
                facts[key] = data[key]
        if data.get("levels"):
            facts["levels"] = list(data["levels"])[:FACT_LEVELS]
            rest = sum(level.get("count", 0) for level in data["levels"][FACT_LEVELS:])
            other = (data.get("levels_other") or 0) + rest
            if other:
                facts["levels_other"] = other
    else:
        facts["values_masked"] = True
    return facts


def capture_facts(session: Session, variables: list[Variable], drop_id: int | None) -> dict[str, Any]:
    facts: dict[str, Any] = {}
    for variable in variables:
        found = variable_facts(session, variable, drop_id)
        if found is None:
            continue
        key = variable.name if variable.name not in facts else f"{found['table']}.{variable.name}"
        facts[key] = found
    return facts


def _git_state(session: Session) -> tuple[str | None, bool | None]:
    from studylog import gitstate

    state = gitstate.capture(store_path(session))
    if state is None:
        return None, None
    return state.commit, state.dirty


# ---- decisions ----

def get_decision(session: Session, decision_id: int) -> Decision:
    decision = session.get(Decision, decision_id)
    if decision is None:
        raise NotFound(f"no decision {decision_id}")
    return decision


def decision_dicts(session: Session, decisions: list[Decision]) -> list[dict[str, Any]]:
    ids = [d.id for d in decisions]
    names = linked_variables(session, "decision", ids)
    successors: dict[int, list[int]] = {i: [] for i in ids}
    if ids:
        for new_id, old_id in session.execute(
            select(Decision.id, Decision.supersedes_id).where(Decision.supersedes_id.in_(ids))
        ):
            successors[old_id].append(new_id)
    return [_as_dict(d, names.get(d.id, []), successors.get(d.id, [])) for d in decisions]


def _as_dict(decision: Decision, variables: list[str], superseded_by: list[int]) -> dict[str, Any]:
    code = None
    if decision.code_path:
        code = decision.code_path + (f":{decision.code_line}" if decision.code_line else "")
    return {
        "id": decision.id,
        "text": decision.text,
        "kind": decision.kind,
        "status": decision.status,
        "variables": variables,
        "why": decision.why,
        "evidence": decision.evidence,
        "alternatives": decision.alternatives,
        "drop": decision.drop_id,
        "code": code,
        "code_path": decision.code_path,
        "code_line": decision.code_line,
        "assumption": decision.assumption,
        "seed": decision.seed,
        "removed": decision.removed,
        "supersedes": decision.supersedes_id,
        "superseded_by": superseded_by,
        "post_hoc": decision.post_hoc,
        "git": None if decision.git_commit is None and decision.git_dirty is None
        else {"commit": decision.git_commit, "dirty": decision.git_dirty},
        "facts": decision.facts or {},
        "author": decision.author,
        "created_at": decision.created_at,
        "updated_at": decision.updated_at,
    }


def decision_dict(session: Session, decision: Decision) -> dict[str, Any]:
    return decision_dicts(session, [decision])[0]


def log_decision(
    session: Session,
    text: str,
    *,
    kind: str | None = None,
    variables: list[str] | None = None,
    why: str | None = None,
    evidence: str | None = None,
    alternatives: str | None = None,
    drop_id: int | None = None,
    code: str | None = None,
    assumption: str | None = None,
    seed: int | None = None,
    removed: int | None = None,
    proposed: bool = False,
    supersedes: Decision | None = None,
) -> dict[str, Any]:
    """Record a decision (adopted, or proposed), with its data facts and code state captured."""
    # the git state first: a subprocess, run before the first statement takes the write lock
    git_commit, git_dirty = _git_state(session)
    text = require_text(text, "the decision's text")
    kind = choice(kind or "other", tuple(KINDS), "decision kind")
    if assumption is not None:
        assumption = choice(assumption.upper(), ASSUMPTIONS, "missingness assumption")
    if removed is not None and removed < 0:
        raise InvalidValue("--removed counts records and cannot be negative")
    code_path, code_line = parse_code(code)
    if drop_id is not None and session.get(Drop, drop_id) is None:
        raise NotFound(f"no drop {drop_id}")
    linked = find_variables(session, variables)
    stamp = now()
    decision = Decision(
        text=text, kind=kind, why=why, evidence=evidence, alternatives=alternatives, drop_id=drop_id,
        code_path=code_path, code_line=code_line, assumption=assumption, seed=seed, removed=removed,
        status="proposed" if proposed else "adopted",
        supersedes_id=supersedes.id if supersedes is not None else None,
        post_hoc=study_records.get(session).plan_frozen_at is not None,
        git_commit=git_commit, git_dirty=git_dirty,
        facts=capture_facts(session, linked, drop_id),
        author=author(), created_at=stamp, updated_at=stamp,
    )
    session.add(decision)
    session.flush()
    link(session, "decision", decision.id, variables=linked)
    # built from what is at hand (a new decision has no successors): no queries, so `log` stays quick
    result = _as_dict(decision, [v.name for v in linked], [])
    history.record(session, "decision", decision.id, "create", new=_history_view(result), at=stamp)
    return result


def _history_view(result: dict[str, Any]) -> dict[str, Any]:
    # the create change keeps what was recorded, without the bulky captured facts (they stay on the row)
    return {k: v for k, v in result.items() if k not in ("facts", "superseded_by", "updated_at")}


def _set_status(session: Session, decision: Decision, status: str, action: str, why: str | None) -> None:
    history.record(session, "decision", decision.id, action, field="status", old=decision.status,
                   new=status, why=why)
    decision.status = status
    decision.updated_at = now()


def adopt(session: Session, decision_id: int, why: str | None = None) -> dict[str, Any]:
    decision = get_decision(session, decision_id)
    if decision.status != "proposed":
        raise InvalidValue(f"decision {decision_id} is {decision.status}; only a proposed one can be adopted")
    _set_status(session, decision, "adopted", "adopt", why)
    return decision_dict(session, decision)


def implement(session: Session, decision_id: int, code: str | None = None,
              why: str | None = None) -> dict[str, Any]:
    """Mark an adopted decision as carried out in the code (again, to move its code location)."""
    git_commit, git_dirty = _git_state(session)
    decision = get_decision(session, decision_id)
    if decision.status == "proposed":
        raise InvalidValue(f"decision {decision_id} is proposed; adopt it first ('decision adopt {decision_id}')")
    if decision.status not in IN_FORCE:
        raise InvalidValue(f"decision {decision_id} is {decision.status}; it can no longer be implemented")
    path, line = parse_code(code)
    updates: dict[str, Any] = {}
    if code is not None:
        updates.update(code_path=path, code_line=line)
    if git_commit is not None or git_dirty is not None:
        updates.update(git_commit=git_commit, git_dirty=git_dirty)
    for field, value in updates.items():
        if getattr(decision, field) != value:
            history.record(session, "decision", decision.id, "implement", field=field,
                           old=getattr(decision, field), new=value, why=why)
            setattr(decision, field, value)
    if decision.status != "implemented":
        _set_status(session, decision, "implemented", "implement", why)
    decision.updated_at = now()
    return decision_dict(session, decision)


def supersede(session: Session, decision_id: int, text: str, *, why: str | None,
              **fields: Any) -> dict[str, Any]:
    """A new decision replaces an earlier one, which becomes superseded; the new one links to it.

    The new one keeps the earlier one's kind and variables unless others are given.
    """
    why = require_text(why, "--why (why the decision is replaced)")
    old = get_decision(session, decision_id)
    if old.status not in (*IN_FORCE, "proposed"):
        raise InvalidValue(f"decision {decision_id} is {old.status}; only a decision in force can be superseded")
    if not fields.get("kind"):
        fields["kind"] = old.kind
    if not fields.get("variables"):
        fields["variables"] = [
            v.name if _unique_name(session, v) else f"{v.table.name}.{v.name}"
            for v in session.scalars(
                select(Variable).join(Link, Link.variable_id == Variable.id)
                .where(Link.source_kind == "decision", Link.source_id == old.id).order_by(Link.id)
            )
        ]
    new = log_decision(session, text, why=why, supersedes=old, **fields)
    _set_status(session, old, "superseded", "supersede", why)
    history.record(session, "decision", old.id, "supersede", field="superseded_by", new=new["id"], why=why)
    return new


def _unique_name(session: Session, variable: Variable) -> bool:
    return len(session.scalars(select(Variable.id).where(Variable.name == variable.name)).all()) == 1


def revert(session: Session, decision_id: int, why: str | None) -> dict[str, Any]:
    why = require_text(why, "--why (why the decision is reverted)")
    decision = get_decision(session, decision_id)
    if decision.status not in (*IN_FORCE, "proposed"):
        raise InvalidValue(f"decision {decision_id} is {decision.status}; it cannot be reverted")
    _set_status(session, decision, "reverted", "revert", why)
    return decision_dict(session, decision)


def list_decisions(session: Session, *, kind: str | None = None, variable: str | None = None,
                   status: str | None = None) -> list[dict[str, Any]]:
    choice(kind, tuple(KINDS), "decision kind")
    choice(status, STATUSES, "status")
    query = select(Decision)
    if kind:
        query = query.where(Decision.kind == kind)
    if status:
        query = query.where(Decision.status == status)
    if variable:
        ids = ids_linked_to_variable(session, "decision", find_variable(session, variable))
        query = query.where(Decision.id.in_(ids))
    return decision_dicts(session, list(session.scalars(query.order_by(Decision.id))))


def show_decision(session: Session, decision_id: int) -> dict[str, Any]:
    """One decision with its chain (what it replaced, what replaced it) and its history."""
    decision = get_decision(session, decision_id)
    result = decision_dict(session, decision)
    result["history"] = [history.as_dict(c) for c in history.for_entity(session, "decision", decision_id)]
    chain: list[dict[str, Any]] = []
    back = decision
    while back.supersedes_id is not None and len(chain) < 1000:
        back = get_decision(session, back.supersedes_id)
        chain.append({"id": back.id, "status": back.status, "text": back.text})
    result["replaces"] = chain
    return result


# ---- the plan ----

def freeze_plan(session: Session, note: str | None = None) -> dict[str, Any]:
    """Record when the analysis plan was fixed; decisions logged after it are marked post hoc."""
    study = study_records.get(session)
    if study.plan_frozen_at is not None:
        raise UsageError(f"the plan was already frozen at {study.plan_frozen_at}")
    stamp = now()
    history.record(session, "study", study.id, "freeze-plan", field="plan_frozen_at", new=stamp,
                   why=note, at=stamp)
    if note:
        history.record(session, "study", study.id, "freeze-plan", field="plan_note", old=study.plan_note,
                       new=note, at=stamp)
    study.plan_frozen_at = stamp
    study.plan_note = note
    pre = session.scalars(select(Decision.id).where(Decision.post_hoc.is_(False))).all()
    return {"plan_frozen_at": stamp, "note": note, "decisions_before": len(pre)}


def plan_state(session: Session) -> dict[str, Any]:
    study = study_records.get(session)
    decisions = session.execute(select(Decision.post_hoc, Decision.status)).all()
    return {
        "plan_frozen_at": study.plan_frozen_at,
        "note": study.plan_note,
        "pre_specified": sum(1 for post_hoc, _ in decisions if not post_hoc),
        "post_hoc": sum(1 for post_hoc, _ in decisions if post_hoc),
    }


# ---- status ----

def status_sections(session: Session) -> list[Any]:
    from studylog.status import Section

    def items(query: Any) -> list[dict[str, Any]]:
        return [{"id": d.id, "kind": d.kind, "text": d.text} for d in session.scalars(query.order_by(Decision.id))]

    proposed = items(select(Decision).where(Decision.status == "proposed"))
    unimplemented = items(select(Decision).where(Decision.status == "adopted"))
    deprecated_rows = session.execute(
        select(Decision, Variable.name)
        .join(Link, (Link.source_kind == "decision") & (Link.source_id == Decision.id))
        .join(Variable, Variable.id == Link.variable_id)
        .where(Decision.status.in_(IN_FORCE), Variable.status == "deprecated")
        .order_by(Decision.id, Link.id)
    ).all()
    on_deprecated = [{"id": d.id, "kind": d.kind, "text": d.text, "variable": name} for d, name in deprecated_rows]
    return [
        Section("decisions-proposed", "Proposed decisions not yet adopted", proposed,
                "todo" if proposed else "ok", f"{len(proposed)} proposed"),
        Section("decisions-unimplemented", "Adopted decisions not yet implemented", unimplemented,
                "todo" if unimplemented else "ok", f"{len(unimplemented)} to implement"),
        Section("decisions-deprecated-variables", "Decisions in force about deprecated variables",
                on_deprecated, "warning" if on_deprecated else "ok", f"{len(on_deprecated)} to review"),
    ]
