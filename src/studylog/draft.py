"""``studylog draft``: a draft dictionary proposed from a data file, and written on request.

:func:`propose` reads the file and infers an entry per column (no store involved); :func:`reconcile` sets
the proposal beside the study's dictionary — what would be added, what a draft entry would change to, and
where the file disagrees with an entry — and, with ``write=True``, writes it:

- a column the dictionary does not know becomes a new entry with status ``draft``;
- an existing draft entry takes the proposed data-derived fields (type, levels, true/false values, date
  format, missing codes; role and sensitivity only while they are still the defaults), every change in
  the history with the reason "proposed by draft from FILE";
- a confirmed or deprecated entry is never changed: its disagreements are listed;
- the table is created when needed, with the proposed or given key;
- ``--target COL`` gives that column the role ``target``, and becomes the study's target if none is set.

Observed minima and maxima are shown as evidence and never written as the possible range: a later drop
with a new extreme is not an error.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog import history
from studylog.dictionary_fields import check_name, normalise
from studylog.errors import InvalidValue, UsageError
from studylog.safety import mask

if TYPE_CHECKING:
    from studylog.data.infer import Proposal, TableProposal

DEFAULTED_FIELDS = {"role": "input", "sensitivity": "none"}
LONGEST_NAME = 255
DEFAULT_TABLE = "data"


@dataclass
class Draft:
    """What a file proposes: the inferred entries, the file's facts, and the options given."""

    file: Path
    format: str
    delimiter: str | None
    proposal: TableProposal
    key_given: bool
    target: str | None


def propose(
    path: str | Path,
    *,
    key: list[str] | None = None,
    target: str | None = None,
    encoding: str | None = None,
    sheet: str | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> Draft:
    """Read the file and infer a draft entry per column (and a key, unless one is given)."""
    from studylog.data.infer import infer_table
    from studylog.data.read import open_source

    source = open_source(path, encoding=encoding, sheet=sheet, progress=progress)
    for name in [*(key or []), *([target] if target else [])]:
        if name not in source.columns:
            raise UsageError(f"no column '{name}' in {source.path} (columns: {_names(source.columns)})")
    data = source.table()
    proposal = infer_table(data, key=key)
    if key:
        complete = all(data.column(name).null_count == 0 for name in key)
        groups = data.select(key).group_by(key).aggregate([]).num_rows
        repeats = data.num_rows - groups
        if complete and not repeats:
            proposal.key_evidence = f"given; complete and unique over {data.num_rows} rows"
        else:
            gaps = sum(data.column(name).null_count for name in key)
            proposal.key_evidence = (f"given; NOT a key of this file: {repeats} repeated "
                                     f"and {gaps} empty values")
    if target:
        chosen = proposal.column(target)
        if chosen is not None:
            chosen.role = "target"
    for column in proposal.columns:
        if column.sensitivity == "direct-identifier":
            # these values never leave the study unmasked, not even in a draft's evidence
            column.evidence.examples = [mask(v) for v in column.evidence.examples]
            column.evidence.not_parsed = [mask(v) for v in column.evidence.not_parsed]
    return Draft(file=source.path, format=source.format, delimiter=source.delimiter, proposal=proposal,
                 key_given=bool(key), target=target)


def table_name_for(draft: Draft, table: str | None) -> str:
    """The table a draft goes to: ``--table``, else the file's name without its extension."""
    if table:
        return check_name(table, "table")
    stem = draft.file.stem.strip()
    return stem if stem and not any(ord(ch) < 32 for ch in stem) else DEFAULT_TABLE


def reconcile(session: Session | None, draft: Draft, *, table: str | None = None,
              write: bool = False) -> dict[str, Any]:
    """The draft beside the dictionary (none without a study); with ``write``, apply it."""
    from studylog import dictionary

    name = table_name_for(draft, table)
    owner = dictionary.find_table(session, name) if session is not None else None
    proposal = draft.proposal
    document: dict[str, Any] = {
        "file": str(draft.file),
        "format": draft.format,
        "delimiter": draft.delimiter,
        "table": name,
        "table_exists": owner is not None,
        "applied": write,
        "rows": proposal.rows,
        "columns": len(proposal.columns),
        "key": list(proposal.key),
        "key_evidence": proposal.key_evidence,
        "target": draft.target,
        "variables": [],
        "disagreements": [],
        "refused": [],
        "study_target_set": False,
    }
    why = f"proposed by draft from {draft.file.name}"
    if write and session is not None and owner is None:
        owner = dictionary.add_table(session, name, key=proposal.key or None)
        document["table_created"] = True
    if owner is not None:
        document["id"] = owner.id
        _compare_key(session, owner, draft, document, write, why)
    existing = _entries(session, owner)
    for column in proposal.columns:
        row = _describe(column)
        refusal = _refusal(column.name)
        variable = existing.get(column.name)
        if refusal is not None:
            row["action"] = "refuse"
            document["refused"].append({"variable": column.name, "why": refusal})
        elif variable is None:
            renamed = _renamed(existing, column.name)
            if renamed is not None:
                row["action"] = "keep"
                document["disagreements"].append(_disagree(column.name, "name", renamed.name, column.name,
                                                           renamed.status, "the file uses an earlier name"))
            else:
                row["action"] = "add"
                if write and session is not None:
                    try:
                        dictionary.add_variable(session, column.name, column.fields() | {"status": "draft"},
                                                table=name)
                    except InvalidValue as exc:
                        row["action"] = "refuse"
                        document["refused"].append({"variable": column.name, "why": exc.message})
        else:
            changes = _changes(variable, column)
            if variable.status == "draft":
                row["action"] = "update" if changes else "same"
                row["changes"] = sorted(changes)
                if changes and write and session is not None:
                    try:
                        dictionary.update_variable(session, variable.name, changes, table=name, why=why)
                    except InvalidValue as exc:  # raised before anything is changed
                        row["action"] = "refuse"
                        document["refused"].append({"variable": column.name, "why": exc.message})
            else:
                row["action"] = "keep"
                for field, new in changes.items():
                    document["disagreements"].append(
                        _disagree(column.name, field, getattr(variable, field), new, variable.status))
        document["variables"].append(row)
    in_file = {column.name for column in proposal.columns}
    for variable_name, variable in existing.items():
        if variable_name not in in_file and variable.status != "deprecated":
            document["disagreements"].append(
                _disagree(variable_name, "column", "in the dictionary", "absent from the file", variable.status))
    if write and session is not None and draft.target:
        document["study_target_set"] = adopt_target(session, draft.target, why=why)
    return document


def adopt_target(session: Session, name: str, *, why: str | None = None) -> bool:
    """Make ``name`` the study's target when the study has none yet; True when it was set."""
    from studylog.study import get

    study = get(session)
    if study.target:
        return False
    history.record(session, "study", study.id, "update", field="target", old=None, new=name, why=why)
    study.target = name
    return True


# ---------------------------------------------------------------------------------------------- helpers


def _names(columns: list[str], limit: int = 12) -> str:
    shown = ", ".join(columns[:limit])
    return shown + (f", ... ({len(columns)} in all)" if len(columns) > limit else "")


def _entries(session: Session | None, owner: Any) -> dict[str, Any]:
    if session is None or owner is None:
        return {}
    from studylog.store.models import Variable

    found = session.scalars(select(Variable).where(Variable.table_id == owner.id).order_by(Variable.position))
    return {variable.name: variable for variable in found}


def _renamed(existing: dict[str, Any], name: str) -> Any:
    return next((v for v in existing.values() if name in (v.aliases or [])), None)


def _refusal(name: str) -> str | None:
    try:
        check_name(name)
    except InvalidValue as exc:
        return exc.message
    if len(name) > LONGEST_NAME:
        return f"the column name is {len(name)} characters long; at most {LONGEST_NAME} fit a name"
    return None


def _changes(variable: Any, column: Proposal) -> dict[str, Any]:
    """The proposed fields that differ from the entry.

    Lists of codes and values only grow: what the entry declares is kept with its labels (a level or a
    missing code may simply be absent from this file), and what the file adds is appended.
    """
    proposed = column.fields()
    changes: dict[str, Any] = {}
    if proposed["type"] != variable.type:
        changes["type"] = proposed["type"]
    if proposed.get("date_format") and proposed["date_format"] != variable.date_format:
        changes["date_format"] = proposed["date_format"]
    for field in ("levels", "missing_codes"):
        held = [dict(item) for item in getattr(variable, field) or []]
        codes = {str(item["code"]) for item in held}
        added = [item for item in normalise(field, proposed.get(field)) if item["code"] not in codes]
        if added:
            changes[field] = held + added
    for field in ("true_values", "false_values"):
        held = list(getattr(variable, field) or [])
        added = [value for value in proposed.get(field, []) if value not in held]
        if added:
            changes[field] = held + added
    for field, default in DEFAULTED_FIELDS.items():
        if field in proposed and getattr(variable, field) in (default, None) and proposed[field] != default:
            changes[field] = proposed[field]
    kind = changes.get("type") or variable.type
    if kind not in ("categorical", "ordinal") and variable.levels:
        changes["levels"] = []  # a type without levels cannot keep them
    if kind != "boolean" and (variable.true_values or variable.false_values):
        changes["true_values"], changes["false_values"] = [], []
    return changes


def _compare_key(session: Session | None, owner: Any, draft: Draft, document: dict[str, Any],
                 write: bool, why: str) -> None:
    from studylog import dictionary

    proposed = list(draft.proposal.key)
    current = list(owner.key or [])
    if not proposed or proposed == current:
        return
    if not current and write and session is not None:
        try:
            dictionary.update_table(session, owner.name, {"key": proposed}, why=why)
            document["key_set"] = True
            return
        except InvalidValue:
            pass
    document["disagreements"].append(
        _disagree(None, "key", current, proposed, None, "the table's key is kept; change it with 'table set'"))


def _disagree(variable: str | None, field: str, dictionary_value: Any, file_value: Any,
              status: str | None, note: str | None = None) -> dict[str, Any]:
    return {"variable": variable, "field": field, "dictionary": _plain(dictionary_value),
            "file": _plain(file_value), "status": status, "note": note}


def _plain(value: Any) -> Any:
    if isinstance(value, list) and value and isinstance(value[0], dict):
        return [str(item.get("code")) for item in value]
    return value


def _describe(column: Proposal) -> dict[str, Any]:
    row = column.to_dict()
    row["fields"] = column.fields()
    return row
