"""The dictionary's sections of ``studylog status``: tables, variables, gaps, stale derivations, target.

The study section (status.study_sections) already warns when no target or index time is set; these
sections add what the dictionary knows: whether the target names a variable, which variables carry the
role target, and the inputs whose availability relative to the index time would leak the outcome.
"""

from __future__ import annotations

from collections import Counter
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from studylog import dictionary
from studylog import study as study_records
from studylog.data.spec import NUMERIC_TYPES
from studylog.status import Section
from studylog.store.models import Change, Variable


def _counts(values: list[str]) -> str:
    return ", ".join(f"{n} {value}" for value, n in Counter(values).most_common())


def _tables(session: Session) -> Section:
    tables = dictionary.tables(session)
    items = [
        {"table": t.name, "problem": "no key declared",
         "hint": f"studylog table set {t.name} --key COLUMN (repeated records cannot be found without it)"}
        for t in tables if not t.key
    ]
    summary = "; ".join(f"{t.name} (key {', '.join(t.key)})" if t.key else t.name for t in tables)
    if not tables:
        summary = "none yet"
    return Section("tables", "Tables", items, "todo" if items else "ok", summary)


def _variables(entries: list[Variable]) -> Section:
    if not entries:
        return Section("variables", "Variables", [], "todo", "none yet; add them with 'studylog var add'")
    items: list[dict[str, Any]] = [
        {"by": group, "counts": dict(Counter(getattr(v, group) for v in entries).most_common())}
        for group in ("status", "role", "type")
    ]
    summary = f"{len(entries)}: " + _counts([v.status for v in entries])
    return Section("variables", "Variables", items, "ok", summary)


def _gaps(entries: list[Variable]) -> Section:
    items = []
    for variable in entries:
        if variable.status == "deprecated":
            continue
        missing = [name for name, absent in (
            ("description", not variable.description),
            ("unit", variable.type in NUMERIC_TYPES and not variable.unit),
            ("source", not variable.source),
        ) if absent]
        if missing:
            items.append({"variable": f"{variable.table.name}.{variable.name}", "missing": ", ".join(missing)})
    summary = f"{len(items)} entries still missing a description, unit or source" if items else "complete"
    return Section("dictionary-gaps", "Dictionary gaps", items, "todo" if items else "ok", summary)


def _resolve(name: str, owner: Variable, by_table: dict[tuple[str, str], Variable],
             by_name: dict[str, list[Variable]]) -> Variable | None:
    found = by_table.get((owner.table.name, name))
    if found is not None:
        return found
    prefix, _, rest = name.rpartition(".")
    if prefix and (prefix, rest) in by_table:
        return by_table[(prefix, rest)]
    elsewhere = by_name.get(name, [])
    return elsewhere[0] if len(elsewhere) == 1 else None


def _stale(session: Session, entries: list[Variable]) -> Section:
    latest = dict(session.execute(
        select(Change.entity_id, func.max(Change.at)).where(Change.entity == "variable")
        .group_by(Change.entity_id)
    ).all())
    by_table = {(v.table.name, v.name): v for v in entries}
    by_name: dict[str, list[Variable]] = {}
    for variable in entries:
        by_name.setdefault(variable.name, []).append(variable)
    items = []
    for variable in entries:
        if variable.status == "deprecated" or not variable.derived_from:
            continue
        mine = latest.get(variable.id, variable.updated_at)
        for name in variable.derived_from:
            source = _resolve(name, variable, by_table, by_name)
            where = f"{variable.table.name}.{variable.name}"
            if source is None:
                items.append({"variable": where, "input": name, "problem": "the input is not in the dictionary"})
            elif latest.get(source.id, source.updated_at) > mine:
                items.append({"variable": where, "input": name,
                              "problem": "the input changed after the derived variable",
                              "hint": f"review {variable.name}'s derivation (studylog var show {variable.name})"})
    summary = f"{len(items)} to review" if items else "none to review"
    return Section("derived", "Derived variables", items, "warning" if items else "ok", summary)


def _target(session: Session, entries: list[Variable]) -> Section:
    study = study_records.get(session)
    live = [v for v in entries if v.status != "deprecated"]
    targets = [v.name for v in live if v.role == "target"]
    items: list[dict[str, Any]] = []
    level = "ok"
    if study.target and live and study.target not in {v.name for v in live}:
        items.append({"problem": f"the study's target '{study.target}' is not in the dictionary",
                      "hint": f"studylog var add {study.target} --type TYPE --role target"})
        level = "warning"
    for name in targets:
        if study.target and name != study.target:
            items.append({"variable": name, "problem": f"has role target, but the study's target is "
                          f"'{study.target}'"})
            level = "warning"
    if study.target and study.target in {v.name for v in live} and study.target not in targets:
        items.append({"variable": study.target, "problem": "is the study's target but its role is not target",
                      "hint": f"studylog var set {study.target} --role target"})
        level = "warning" if level == "warning" else "todo"
    if study.index_time:
        inputs = [v for v in live if v.role == "input"]
        for variable in inputs:
            if variable.availability == "after":
                items.append({"variable": variable.name, "problem": "available after the index time: "
                              "using it as an input would leak the outcome"})
                level = "warning"
        unknown = [v.name for v in inputs if v.availability in (None, "unknown")]
        if unknown:
            items.append({"variables": unknown, "problem": "availability relative to the index time "
                          "not known", "hint": "studylog var set NAME --available before|at|after"})
            if level == "ok":
                level = "todo"
    summary = (f"target: {study.target or '-'}; role target: {', '.join(targets) or '-'}; "
               f"index time: {study.index_time or '-'}")
    return Section("target", "Target and index time", items, level, summary)


def sections(session: Session) -> list[Section]:
    entries = dictionary.variables(session)
    return [
        _tables(session), _variables(entries), _gaps(entries), _stale(session, entries),
        _target(session, entries),
    ]
