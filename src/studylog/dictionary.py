"""The data dictionary: tables and their variables, every change kept in the history.

Rules kept here: names are unique within a table; a draft entry changes freely, a confirmed one only with
a reason; nothing is deleted (entries are deprecated, renamed names live on as aliases); every change is
one ``changes`` row per field through :func:`studylog.history.record`. A study with a single table needs no
table name; the first variable of a study without tables creates the table ``data`` (DEFAULT_TABLE).

Versions (freeze, diff) are in :mod:`studylog.versions`, import and export in :mod:`studylog.dictionary_io`.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from studylog import history
from studylog.clock import author, now
from studylog.data.spec import Code, RuleSpec, TableSpec, VariableSpec
from studylog.dictionary_fields import FIELDS, check_entry, check_name, empty_value, normalise
from studylog.errors import AlreadyExists, InvalidValue, NotFound, UsageError
from studylog.store.models import DataTable, DictionaryVersion, Question, Rule, Variable

DEFAULT_TABLE = "data"
TABLE_FIELDS = ("description", "grain", "key")


# ---- tables ---------------------------------------------------------------------------------------


def tables(session: Session) -> list[DataTable]:
    return list(session.scalars(select(DataTable).order_by(DataTable.id)))


def find_table(session: Session, name: str) -> DataTable | None:
    return session.scalars(select(DataTable).where(DataTable.name == name)).first()


def resolve_table(session: Session, name: str | None) -> DataTable:
    """The named table, or the study's only table when no name is given."""
    if name is not None:
        found = find_table(session, name)
        if found is None:
            known = ", ".join(t.name for t in tables(session)) or "none yet"
            raise NotFound(f"no table '{name}' (tables: {known})")
        return found
    every = tables(session)
    if not every:
        raise NotFound("the study has no tables yet; add one with 'studylog table add NAME'")
    if len(every) > 1:
        raise UsageError(
            f"the study has {len(every)} tables ({', '.join(t.name for t in every)}); say which with --table"
        )
    return every[0]


def will_create_default_table(session: Session, table: str | None) -> bool:
    """Whether adding a variable with this --table would first create the default table."""
    return table is None and session.scalar(select(DataTable.id).limit(1)) is None


def _key_list(key: Any) -> list[str]:
    if key is None:
        return []
    if isinstance(key, str):
        return normalise("aliases", key)  # a comma list of column names, escapes allowed
    return normalise("aliases", list(key))


def add_table(
    session: Session,
    name: str,
    *,
    grain: str | None = None,
    key: Any = None,
    description: str | None = None,
) -> DataTable:
    check_name(name, "table")
    if find_table(session, name) is not None:
        raise AlreadyExists(f"table '{name}' already exists")
    stamp = now()
    table = DataTable(
        name=name,
        grain=normalise("description", grain),
        key=_key_list(key),
        description=normalise("description", description),
        created_at=stamp,
        updated_at=stamp,
        author=author(),
    )
    session.add(table)
    session.flush()
    history.record(session, "table", table.id, "create", new=table_dict(table), at=stamp)
    return table


def update_table(session: Session, name: str, changes: dict[str, Any], *, why: str | None = None) -> DataTable:
    """Change a table's description, grain or key. A table with confirmed variables changes only with a reason."""
    table = resolve_table(session, name)
    updates: dict[str, Any] = {}
    for field, value in changes.items():
        if field not in TABLE_FIELDS:
            raise InvalidValue(f"unknown table field '{field}'; fields are: {', '.join(TABLE_FIELDS)}")
        new = _key_list(value) if field == "key" else normalise("description", value)
        if new != getattr(table, field):
            updates[field] = new
    if not updates:
        return table
    confirmed = session.scalars(
        select(Variable.id).where(Variable.table_id == table.id, Variable.status == "confirmed")
    ).first() is not None
    if confirmed and not (why and why.strip()):
        raise InvalidValue(f"table '{table.name}' has confirmed variables; give --why to change it")
    if "key" in updates:
        _check_key_change(session, table, updates["key"])
    stamp = now()
    for field, new in updates.items():
        history.record(session, "table", table.id, "update", field=field, old=getattr(table, field),
                       new=new, why=why, at=stamp)
        setattr(table, field, new)
    table.updated_at = stamp
    return table


def _check_key_change(session: Session, table: DataTable, key: list[str]) -> None:
    target = [f"{table.name}.{column}" for column in table.key]
    if len(key) == 1 and target == [f"{table.name}.{key[0]}"]:
        return
    referring = session.scalars(select(Variable).where(Variable.references.in_(target))).first() if target else None
    if referring is not None:
        raise InvalidValue(
            f"{referring.table.name}.{referring.name} refers to {referring.references}; "
            "change that reference before the key"
        )


def table_dict(table: DataTable) -> dict[str, Any]:
    return {
        "id": table.id,
        "name": table.name,
        "description": table.description,
        "grain": table.grain,
        "key": list(table.key or []),
        "created_at": table.created_at,
        "updated_at": table.updated_at,
        "author": table.author,
    }


# ---- variables ------------------------------------------------------------------------------------


def variables(
    session: Session,
    *,
    table: str | None = None,
    role: str | None = None,
    type: str | None = None,
    status: str | None = None,
) -> list[Variable]:
    """Variables in dictionary order (table, then position), filtered."""
    query = select(Variable).join(DataTable)
    if table is not None:
        query = query.where(Variable.table_id == resolve_table(session, table).id)
    for field, value in (("role", role), ("type", type), ("status", status)):
        if value is not None:
            query = query.where(getattr(Variable, field) == normalise(field, value))
    return list(session.scalars(query.order_by(DataTable.id, Variable.position, Variable.id)))


def get_variable(session: Session, name: str, table: str | None = None) -> Variable:
    """A variable by name; without a table, the one variable of that name in any table.

    ``TABLE.NAME`` is accepted too. An earlier name (alias) is pointed at, not followed.
    """
    query = select(Variable).join(DataTable).where(Variable.name == name)
    if table is not None:
        query = query.where(Variable.table_id == resolve_table(session, table).id)
    found = list(session.scalars(query))
    if not found and table is None and "." in name:
        prefix, _, rest = name.rpartition(".")
        if find_table(session, prefix) is not None:
            return get_variable(session, rest, prefix)
    if len(found) == 1:
        return found[0]
    if len(found) > 1:
        names = ", ".join(v.table.name for v in found)
        raise UsageError(f"'{name}' is in several tables ({names}); say which with --table")
    renamed = [v for v in variables(session, table=table) if name in (v.aliases or [])]
    if renamed:
        raise NotFound(f"no variable '{name}'; it was renamed to '{renamed[0].name}'")
    where = f" in table '{table}'" if table else ""
    raise NotFound(f"no variable '{name}'{where}")


def _current_entry(variable: Variable) -> dict[str, Any]:
    return {field: _copy(getattr(variable, field)) for field in FIELDS}


def _copy(value: Any) -> Any:
    if isinstance(value, list):
        return [dict(v) if isinstance(v, dict) else v for v in value]
    return value


def _prepared(changes: dict[str, Any]) -> dict[str, Any]:
    return {field: normalise(field, value) for field, value in changes.items()}


def _checked(name: str, entry: dict[str, Any], changes: dict[str, Any]) -> dict[str, Any]:
    """The entry with ``changes`` applied and checked; errors name the variable."""
    try:
        return check_entry(entry | _prepared(changes))
    except InvalidValue as exc:
        raise InvalidValue(f"{name}: {exc.message}") from None


def _check_references(session: Session, reference: str | None, own_table: DataTable | None) -> None:
    if reference is None:
        return
    candidates = [(reference[:i], reference[i + 1 :]) for i, ch in enumerate(reference) if ch == "."]
    for table_name, column in candidates:
        table = find_table(session, table_name)
        if table is None:
            continue
        if list(table.key or []) != [column]:
            keyed = ", ".join(table.key or []) or "none"
            raise InvalidValue(
                f"--references {reference}: '{column}' is not the key of table '{table_name}' (key: {keyed})"
            )
        return
    if not candidates:
        raise InvalidValue(f"--references must be TABLE.COLUMN, not '{reference}'")
    raise InvalidValue(f"--references {reference}: no such table")


def _check_question(session: Session, question_id: int | None) -> None:
    if question_id is not None and session.get(Question, question_id) is None:
        raise NotFound(f"no question {question_id}")


def add_variable(
    session: Session, name: str, fields: dict[str, Any], *, table: str | None = None
) -> Variable:
    """Add a dictionary entry. Without a table: the study's only table, or a new table ``data``."""
    check_name(name)
    if will_create_default_table(session, table):
        owner = add_table(session, DEFAULT_TABLE)
    else:
        owner = resolve_table(session, table)
    exists = session.scalars(
        select(Variable).where(Variable.table_id == owner.id, Variable.name == name)
    ).first()
    if exists is not None:
        raise AlreadyExists(f"variable '{name}' already exists in table '{owner.name}'")
    entry = _checked(name, {field: empty_value(field) for field in FIELDS}, fields)
    _check_references(session, entry["references"], owner)
    stamp = now()
    if entry["status"] == "confirmed":
        entry["confirmed_by"] = entry["confirmed_by"] or author()
        entry["confirmed_at"] = entry["confirmed_at"] or stamp
    position = session.scalar(
        select(func.coalesce(func.max(Variable.position), 0)).where(Variable.table_id == owner.id)
    )
    variable = Variable(
        table_id=owner.id, name=name, position=int(position or 0) + 1,
        created_at=stamp, updated_at=stamp, author=author(), **entry,
    )
    session.add(variable)
    session.flush()
    session.refresh(variable, ["table"])
    history.record(session, "variable", variable.id, "create",
                   new=export_entry(variable), at=stamp)
    return variable


def update_variable(
    session: Session,
    name: str,
    changes: dict[str, Any],
    *,
    table: str | None = None,
    why: str | None = None,
    question_id: int | None = None,
    action: str = "update",
) -> Variable:
    """Change fields of an entry; one history row per field that really changes.

    A confirmed entry changes only with ``why``. Setting ``status`` to confirmed stamps who and when.
    """
    variable = get_variable(session, name, table)
    _check_question(session, question_id)
    why = why.strip() if why and why.strip() else None
    current = _current_entry(variable)
    entry = _checked(variable.name, current, changes)
    if entry["status"] == "confirmed" and current["status"] != "confirmed":
        if "confirmed_by" not in changes or entry["confirmed_by"] is None:
            entry["confirmed_by"] = author()
        if "confirmed_at" not in changes or entry["confirmed_at"] is None:
            entry["confirmed_at"] = now()
    changed = {f: entry[f] for f in FIELDS if entry[f] != current[f]}
    if not changed:
        return variable
    if current["status"] == "confirmed" and why is None:
        raise InvalidValue(
            f"'{variable.name}' is confirmed; give --why to change {', '.join(sorted(changed))}"
        )
    if "references" in changed:
        _check_references(session, entry["references"], variable.table)
    stamp = now()
    for field, new in changed.items():
        history.record(session, "variable", variable.id, action, field=field, old=current[field],
                       new=new, why=why, question_id=question_id, at=stamp)
        setattr(variable, field, new)
    variable.updated_at = stamp
    return variable


def confirm(session: Session, name: str, *, by: str | None = None, table: str | None = None) -> Variable:
    """Mark an entry as agreed; from now on it changes only with a reason."""
    variable = get_variable(session, name, table)
    if variable.status == "confirmed":
        return variable
    if variable.status == "deprecated":
        raise InvalidValue(f"'{variable.name}' is deprecated; set its status to draft first (with --why)")
    stamp = now()
    who = by or author()
    history.record(session, "variable", variable.id, "confirm", field="status", old=variable.status,
                   new="confirmed", by=who, at=stamp)
    variable.status, variable.confirmed_by, variable.confirmed_at = "confirmed", who, stamp
    variable.updated_at = stamp
    return variable


def deprecate(session: Session, name: str, *, why: str, table: str | None = None) -> Variable:
    """Retire an entry without deleting it; it stays in the history and the exports."""
    if not why or not why.strip():
        raise InvalidValue("say why the variable is deprecated (--why)")
    variable = get_variable(session, name, table)
    if variable.status == "deprecated":
        raise InvalidValue(f"'{variable.name}' is already deprecated")
    stamp = now()
    history.record(session, "variable", variable.id, "deprecate", field="status", old=variable.status,
                   new="deprecated", why=why, at=stamp)
    variable.status = "deprecated"
    variable.updated_at = stamp
    return variable


def rename(session: Session, old: str, new: str, *, why: str, table: str | None = None) -> Variable:
    """Rename an entry; the old name becomes an alias, and inputs lists of derived variables follow."""
    if not why or not why.strip():
        raise InvalidValue("say why the variable is renamed (--why)")
    check_name(new)
    variable = get_variable(session, old, table)
    if new == variable.name:
        raise InvalidValue(f"'{new}' is already the variable's name")
    clash = session.scalars(
        select(Variable).where(Variable.table_id == variable.table_id, Variable.name == new)
    ).first()
    if clash is not None:
        raise AlreadyExists(f"variable '{new}' already exists in table '{variable.table.name}'")
    stamp = now()
    old_name = variable.name
    history.record(session, "variable", variable.id, "rename", field="name", old=old_name, new=new,
                   why=why, at=stamp)
    aliases = [a for a in (variable.aliases or []) if a != new]
    if old_name not in aliases:
        aliases.append(old_name)
    history.record(session, "variable", variable.id, "rename", field="aliases",
                   old=list(variable.aliases or []), new=aliases, why=why, at=stamp)
    variable.name, variable.aliases, variable.updated_at = new, aliases, stamp
    for other in variables(session):
        inputs = list(other.derived_from or [])
        if old_name in inputs and other.table_id == variable.table_id:
            followed = [new if item == old_name else item for item in inputs]
            history.record(session, "variable", other.id, "rename", field="derived_from", old=inputs,
                           new=followed, why=why, at=stamp)
            other.derived_from, other.updated_at = followed, stamp
    return variable


def variable_history(session: Session, name: str | None = None, table: str | None = None) -> list[dict[str, Any]]:
    """Changes of one variable (or of the whole dictionary: variables and tables), oldest first."""
    if name is not None:
        variable = get_variable(session, name, table)
        return [history.as_dict(c) | {"variable": variable.name} for c in
                history.for_entity(session, "variable", variable.id)]
    names = {v.id: v.name for v in session.scalars(select(Variable))}
    table_names = {t.id: t.name for t in tables(session)}
    rows = [history.as_dict(c) | {"variable": names.get(c.entity_id)}
            for c in history.for_entity(session, "variable")]
    rows += [history.as_dict(c) | {"table": table_names.get(c.entity_id)}
             for c in history.for_entity(session, "table")]
    return sorted(rows, key=lambda row: row["id"])


# ---- shapes ---------------------------------------------------------------------------------------


def export_entry(variable: Variable) -> dict[str, Any]:
    """The study-independent shape of an entry: table, name and every field (no ids, no timestamps)."""
    return {"table": variable.table.name, "name": variable.name} | _current_entry(variable)


def variable_dict(variable: Variable) -> dict[str, Any]:
    """The JSON shape of ``var show --json``."""
    return (
        {"id": variable.id}
        | export_entry(variable)
        | {"position": variable.position, "created_at": variable.created_at,
           "updated_at": variable.updated_at, "author": variable.author}
    )


def _codes(items: list[dict[str, Any]] | None) -> tuple[Code, ...]:
    return tuple(Code(str(i["code"]), i.get("label"), i.get("order")) for i in items or [])


def spec_of(entry: dict[str, Any]) -> VariableSpec:
    """A VariableSpec from an entry in the export shape (current or a version's snapshot)."""
    return VariableSpec(
        name=entry["name"], type=entry["type"], table=entry.get("table", ""),
        aliases=tuple(entry.get("aliases") or ()), label=entry.get("label"), unit=entry.get("unit"),
        precision=entry.get("precision"), role=entry.get("role") or "input",
        levels=_codes(entry.get("levels")), true_values=tuple(entry.get("true_values") or ()),
        false_values=tuple(entry.get("false_values") or ()), minimum=entry.get("minimum"),
        maximum=entry.get("maximum"), plausible_min=entry.get("plausible_min"),
        plausible_max=entry.get("plausible_max"), missing_codes=_codes(entry.get("missing_codes")),
        max_missing=entry.get("max_missing"), required=bool(entry.get("required")),
        unique=bool(entry.get("unique")), pattern=entry.get("pattern"),
        date_format=entry.get("date_format"), timezone=entry.get("timezone"),
        references=entry.get("references"), sensitivity=entry.get("sensitivity") or "none",
        status=entry.get("status") or "draft",
    )


def rule_entries(session: Session, table: DataTable) -> list[dict[str, Any]]:
    rules = session.scalars(
        select(Rule).where(Rule.table_id == table.id, Rule.status == "active").order_by(Rule.id)
    )
    return [{"name": r.name, "expression": r.expression, "severity": r.severity} for r in rules]


def table_spec(session: Session, table: str | None = None, version: str | None = None) -> TableSpec:
    """The dictionary of one table as plain objects, now or as frozen in ``version``."""
    if version is None:
        owner = resolve_table(session, table)
        return TableSpec(
            name=owner.name, key=tuple(owner.key or ()),
            variables=tuple(spec_of(export_entry(v)) for v in variables(session, table=owner.name)),
            rules=tuple(RuleSpec(**r) for r in rule_entries(session, owner)),
        )
    frozen = session.scalars(select(DictionaryVersion).where(DictionaryVersion.name == version)).first()
    if frozen is None:
        known = ", ".join(session.scalars(select(DictionaryVersion.name).order_by(DictionaryVersion.id)))
        raise NotFound(f"no dictionary version '{version}' (versions: {known or 'none yet'})")
    snapshot = frozen.snapshot
    names = [t["name"] for t in snapshot.get("tables", [])]
    if table is None:
        if len(names) != 1:
            raise UsageError(
                f"version '{version}' has {len(names)} tables ({', '.join(names)}); say which with --table"
            )
        table = names[0]
    if table not in names:
        raise NotFound(f"version '{version}' has no table '{table}' (tables: {', '.join(names)})")
    frozen_table = next(t for t in snapshot["tables"] if t["name"] == table)
    return TableSpec(
        name=table, key=tuple(frozen_table.get("key") or ()),
        variables=tuple(spec_of(v) for v in snapshot.get("variables", []) if v["table"] == table),
        rules=tuple(RuleSpec(**r) for r in frozen_table.get("rules", [])),
        version=version,
    )
