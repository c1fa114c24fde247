"""The drops part of the methods' context: what was received, what the check found, what resolved it.

Privacy (see :mod:`studylog.report_context`): a finding's count below ``min_cell`` arrives as "<N"; its
message is the checker's only when that message can carry nothing private, otherwise a plain
description of the rule. The checker's message is replaced when

- the count is below the threshold (the message states it: "3 values outside ..."), or the message
  states any other count below it (a key finding counts repeats and missing keys separately);
- a variable it is about is a direct identifier, sensitive, free text, an identifier or a
  quasi-identifier (the message may list offending values, or the lowest and highest of them).

A finding is resolved by a decision in force (adopted or implemented) that names the finding's variable
and was logged after the drop was checked, or that names the drop (``log --drop``). Findings about no
variable (repeated rows, cross-field rules) are resolved only by a decision that names the drop.
"""

from __future__ import annotations

import re
from typing import Any

from sqlalchemy import func, select

from studylog.report_context import IN_FORCE, Study, _date
from studylog.store.models import Change, DictionaryVersion, Drop, Finding, Rule, Variable

# what a finding is about, said without its values or counts
RULE_TEXT = {
    "absent-column": "the column is missing from the file",
    "undeclared-column": "a column the dictionary does not know",
    "renamed-column": "the column was found under an earlier name",
    "type": "values not of the declared type", "level": "values not among the declared levels",
    "range": "values outside the possible range", "plausible": "values outside the plausible range",
    "required": "missing values in a required variable",
    "missing-share": "a larger share missing than the dictionary allows",
    "unique": "values repeating an earlier row", "key": "rows repeating an earlier key, or without a key",
    "pattern": "values not matching the pattern", "repeated-row": "rows repeating an earlier row",
    "orphan": "rows referring to a key not in the referenced table",
}
# findings about the file's columns: their count is 1 (one column), not a number of rows
COLUMN_RULES = ("absent-column", "undeclared-column", "renamed-column")
# the counts a checker message states: "12 values ...", "3 rows ...", "(3 of 2000)"
COUNT_IN_MESSAGE = re.compile(r"(?<![\w.\-])(\d[\d,]*)\s+(?:values?|rows?|records?)\b|\((\d[\d,]*) of \d")
# the records whose changes make a new dictionary (a frozen version holds tables, variables and rules)
DICTIONARY_ENTITIES = ("variable", "table", "rule")
MEASURE_NAMES = {"psi": "PSI", "smd": "SMD"}


def about_columns(finding: Finding) -> bool:
    """A finding about the header (a column missing, unknown or renamed; a rule not checked)."""
    return finding.rule in COLUMN_RULES or (finding.severity == "info" and not finding.rows)


def small_counts_in(message: str, min_cell: int) -> bool:
    """Whether a checker message states a count from 1 to ``min_cell - 1``."""
    for match in COUNT_IN_MESSAGE.finditer(message):
        number = int((match.group(1) or match.group(2)).replace(",", ""))
        if 0 < number < min_cell:
            return True
    return False


class _DropReader:
    """What the findings of every drop need, read once: the table's variables and rules, versions."""

    def __init__(self, s: Study) -> None:
        self.s = s
        self.by_name: dict[tuple[int, str], Variable] = {(v.table_id, v.name): v for v in s.variables}
        self.rules: dict[tuple[int, str], Rule] = {
            (r.table_id, r.name): r for r in s.session.scalars(select(Rule).order_by(Rule.id))
        }
        self.versions = list(s.session.scalars(select(DictionaryVersion).order_by(DictionaryVersion.id)))
        self.in_force = [d for d in s.decisions if d.status in IN_FORCE]

    def variables_of(self, finding: Finding, table_id: int) -> list[Variable]:
        names = (finding.variable or "").split(",")
        return [self.by_name[(table_id, n.strip())] for n in names if (table_id, n.strip()) in self.by_name]

    def private(self, variables: list[Variable]) -> bool:
        return any(self.s.masked(v) or v.sensitivity == "quasi-identifier" for v in variables)

    def description(self, finding: Finding, table_id: int) -> str:
        if finding.rule in RULE_TEXT:
            return RULE_TEXT[finding.rule]
        rule = self.rules.get((table_id, finding.rule))
        if rule is not None:
            return f"rows breaking the rule: {rule.expression}"
        return "rows breaking a rule of the study"

    def message(self, finding: Finding, table_id: int, variables: list[Variable]) -> str:
        min_cell = self.s.min_cell
        small = not about_columns(finding) and 0 < (finding.count or 0) < min_cell
        if small or self.private(variables) or small_counts_in(finding.message or "", min_cell):
            return self.description(finding, table_id)
        return finding.message

    def resolved_by(self, finding: Finding, drop: Drop, variables: list[Variable]) -> list[int]:
        named = {v.id for v in variables}
        found = []
        for decision in self.in_force:
            if decision.drop_id == drop.id and not named:
                found.append(decision.id)
                continue
            linked = set(self.s.links.variables.get(("decision", decision.id), []))
            if named & linked and (decision.drop_id == drop.id or decision.created_at > drop.checked_at):
                found.append(decision.id)
        return found

    def checked_against(self, drop: Drop) -> dict[str, Any]:
        """The dictionary a drop was checked against: a chosen version, else the one in force then."""
        if drop.dictionary_version:
            return {"version": drop.dictionary_version, "chosen": True, "known": True, "changes_after": 0}
        unknown = {"version": None, "chosen": False, "known": False, "changes_after": None}
        if drop.dictionary_change is None:
            return unknown
        frozen = [v for v in self.versions
                  if (v.change_id or 0) <= drop.dictionary_change and v.created_at <= drop.checked_at]
        if not frozen:
            return unknown | {"known": True}
        version = frozen[-1]
        after = self.s.session.scalar(
            select(func.count(Change.id)).where(
                Change.entity.in_(DICTIONARY_ENTITIES), Change.id > (version.change_id or 0),
                Change.id <= drop.dictionary_change,
            )
        )
        return {"version": version.name, "chosen": False, "known": True, "changes_after": int(after or 0)}


def _finding_context(reader: _DropReader, finding: Finding, drop: Drop) -> dict[str, Any]:
    variables = reader.variables_of(finding, drop.table_id)
    return {
        "variable": finding.variable, "rule": finding.rule, "severity": finding.severity,
        "count": None if about_columns(finding) else reader.s.count(finding.count),
        "message": reader.message(finding, drop.table_id, variables),
        "resolved_by": reader.resolved_by(finding, drop, variables),
    }


def drops_context(s: Study) -> list[dict[str, Any]]:
    reader = _DropReader(s)
    found = []
    for drop in s.drops:
        decisions = [d.id for d in reader.in_force if d.drop_id == drop.id]
        findings = list(s.session.scalars(
            select(Finding).where(Finding.drop_id == drop.id).order_by(Finding.id)
        ))
        comparison = drop.comparison or {}
        records = comparison.get("records") or None
        found.append({
            "id": drop.id, "label": drop.label, "table": s.table_by_id[drop.table_id].name,
            "file": drop.file_name, "checked_on": _date(drop.checked_at), "rows": s.count(drop.rows),
            "columns": drop.columns, "dictionary_version": drop.dictionary_version,
            "checked_against": reader.checked_against(drop),
            "errors": drop.errors, "warnings": drop.warnings,
            "notes": sum(1 for f in findings if f.severity == "info"), "analysis": drop.analysis,
            "against": drop.against_id,
            "findings": [_finding_context(reader, f, drop) for f in findings],
            "decisions": [f"D{i}" for i in decisions],
            "drift": [{"variable": d.get("variable"), "measure": d.get("measure"),
                       "measure_name": MEASURE_NAMES.get(str(d.get("measure")), d.get("measure")),
                       "value": d.get("value"), "band": d.get("band")}
                      for d in comparison.get("drift") or [] if d.get("band") not in (None, "stable")],
            "records": None if not records or drop.against_id is None else
            {k: s.count(records[k]) for k in ("new", "vanished", "changed")
             if records.get(k) is not None} or None,
        })
    return found
