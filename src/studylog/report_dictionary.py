"""The dictionary's part of the document context: tables, variables by role, and what the latest drop
showed of each (privacy applied, see :mod:`studylog.report_context`)."""

from __future__ import annotations

import re
from collections import defaultdict
from typing import Any

from sqlalchemy import select

from studylog import charts
from studylog.data.spec import NUMERIC_TYPES
from studylog.report_context import (
    MAX_LEVELS_SHOWN,
    ROLE_ORDER,
    ROLE_TITLES,
    Study,
    _date,
    version_context,
)
from studylog.store.models import Change, DataTable, Drop, Rule, Variable


def _profile_context(s: Study, variable: Variable, data: dict[str, Any], drop: Drop) -> dict[str, Any]:
    rows = data.get("rows", drop.rows)
    missing = data.get("missing")
    masked = s.masked(variable)
    quasi = variable.sensitivity == "quasi-identifier"
    present, distinct = data.get("count"), data.get("distinct")
    all_distinct = bool(data.get("distinct_exact", True)) and distinct is not None and distinct == present
    result: dict[str, Any] = {
        # present = rows - missing, and distinct = present when every value differs: neither is given
        # where it would give a small missing count away
        "drop": drop.id, "drop_label": drop.label, "rows": s.count(rows),
        "count": s.complement(present, missing), "missing": s.count(missing),
        "missing_share": s.share(missing, rows),
        "distinct": s.complement(distinct, missing) if all_distinct else distinct,
        "distinct_exact": data.get("distinct_exact", True), "all_distinct": all_distinct,
        "missing_codes": [{"code": c.get("code"), "count": s.count(c.get("count"))}
                          for c in data.get("missing_codes") or []],
        "summary": [], "levels": [], "levels_other": None, "chart": None, "withheld": [],
        "quantile_error": data.get("quantile_error"),
    }
    label = f"distribution of {variable.name} in drop {drop.id}"
    if masked:
        result["withheld"].append("values are not shown (identifier, sensitive or free text)")
        return result
    numeric = variable.type in NUMERIC_TYPES or "histogram" in data
    keys = ["mean", "sd", "q1", "median", "q3"] if numeric else []
    if variable.type in ("date", "datetime") or numeric:
        keys = (["min"] if not quasi else []) + keys + (["max"] if not quasi else [])
    if quasi:
        result["withheld"].append("the lowest and highest values (a quasi-identifier)")
    moment = variable.type in ("date", "datetime")
    result["summary"] = [{"name": k, "value": _moment(data[k]) if moment else data[k]}
                         for k in keys if data.get(k) is not None]
    histogram = data.get("histogram") or {}
    if histogram.get("counts"):
        result["chart"] = charts.histogram(
            list(histogram.get("edges") or []), list(histogram["counts"]), min_cell=s.min_cell,
            show_extremes=not quasi, label=label,
        )
    levels = list(data.get("levels") or [])
    if levels and not numeric:
        other = (data.get("levels_other") or 0) + sum(int(x["count"]) for x in levels[MAX_LEVELS_SHOWN:])
        result["levels"] = [{"value": x["value"], "count": s.count(x["count"])}
                            for x in levels[:MAX_LEVELS_SHOWN]]
        result["levels_other"] = s.count(other) if other else None
        result["chart"] = charts.level_bars(levels, other=data.get("levels_other") or 0,
                                            min_cell=s.min_cell, label=label)
    return result


def _moment(value: Any) -> Any:
    """An ISO date-time as a reader writes it: ``2026-02-01 08:30`` (seconds only when not zero)."""
    text = str(value)
    match = re.fullmatch(r"(\d{4}-\d\d-\d\d)[T ](\d\d:\d\d)(:\d\d(?:\.\d+)?)?(.*)", text)
    if match is None:
        return value
    seconds = match.group(3) or ""
    if re.fullmatch(r":00(\.0*)?", seconds):
        seconds = ""
    return f"{match.group(1)} {match.group(2)}{seconds}{match.group(4)}"


def _last_change(s: Study, variable: Variable) -> dict[str, Any] | None:
    change = s.session.scalars(
        select(Change).where(Change.entity == "variable", Change.entity_id == variable.id)
        .order_by(Change.id.desc()).limit(1)
    ).first()
    if change is None:
        return None
    return {"action": change.action, "field": change.field, "why": change.why,
            "on": _date(change.at), "author": change.author, "question": change.question_id}


def _codes_text(items: list[dict[str, Any]] | None) -> str:
    return "; ".join(f"{i.get('code')} = {i['label']}" if i.get("label") else str(i.get("code"))
                     for i in items or [])


def _range(low: str | None, high: str | None, unit: str | None) -> str | None:
    unit = f" {unit}" if unit else ""
    if low is None and high is None:
        return None
    if high is None:
        return f"at least {low}{unit}"
    if low is None:
        return f"at most {high}{unit}"
    return f"{low} to {high}{unit}"


# a change of an entry as a reader says it ("levels changed", "renamed"); others by their action's name
CHANGE_WORDS = {"create": "created", "confirm": "confirmed", "deprecate": "deprecated", "rename": "renamed",
                "import": "imported", "draft": "drafted", "redact": "redacted"}


def _change_text(last: dict[str, Any]) -> str:
    action, field = last["action"], last.get("field")
    if action == "update" and field:
        what = f"{field.replace('_', ' ')} changed"
    else:
        what = CHANGE_WORDS.get(action, action) + (f" ({field.replace('_', ' ')})"
                                                    if field and action not in CHANGE_WORDS else "")
    text = f"{what} on {last['on']} by {last['author']}"
    return text + (f": {last['why']}" if last.get("why") else "")


def display_rows(variable: Variable, confirmed_on: str | None,
                 last: dict[str, Any] | None) -> list[dict[str, str]]:
    """The entry's fields as (label, text) rows in a fixed order, empty ones left out."""
    kind = variable.type
    if variable.unit:
        kind += f", in {variable.unit}"
    if variable.precision is not None:
        kind += (", recorded as whole numbers" if variable.precision == 0 else
                 f", recorded to {variable.precision} decimal{'s' if variable.precision != 1 else ''}")
    source = variable.source
    if source and variable.source_detail:
        source += f" ({variable.source_detail})"
    elif variable.source_detail:
        source = variable.source_detail
    status = variable.status
    if variable.status == "confirmed" and variable.confirmed_by:
        status += f" by {variable.confirmed_by}" + (f" on {confirmed_on}" if confirmed_on else "")
    checks = ", ".join(w for w, on in (("required", variable.required), ("unique", variable.unique)) if on)
    dates = "; ".join(x for x in (variable.date_format, variable.timezone) if x)
    # a confirmation is already told by the status
    change = None if last is None or last["action"] == "confirm" else _change_text(last)
    rows = [
        ("Type", kind), ("Role", variable.role), ("Source", source), ("Instrument", variable.instrument),
        ("Question text", variable.question_text), ("Derivation", variable.derivation),
        ("Derived from", ", ".join(variable.derived_from or [])),
        ("Time", variable.time_association),
        ("Available", f"{variable.availability} the index time" if variable.availability
         and variable.availability != "unknown" else variable.availability),
        ("Levels", _codes_text(variable.levels)),
        ("True values", ", ".join(variable.true_values or [])),
        ("False values", ", ".join(variable.false_values or [])),
        ("Possible range", _range(variable.minimum, variable.maximum, variable.unit)),
        ("Plausible range", _range(variable.plausible_min, variable.plausible_max, variable.unit)),
        ("Missing codes", _codes_text(variable.missing_codes)),
        ("Largest missing share", None if variable.max_missing is None
         else f"{100 * variable.max_missing:g}%"),
        ("Checks", checks), ("Pattern", variable.pattern), ("Date format", dates),
        ("Earlier names", ", ".join(variable.aliases or [])), ("References", variable.references),
        ("Sensitivity", variable.sensitivity), ("Status", status), ("Last change", change),
    ]
    return [{"label": label, "value": str(value)} for label, value in rows if value not in (None, "")]


def variable_context(s: Study, variable: Variable, profile: dict[str, Any] | None,
                     drop: Drop | None) -> dict[str, Any]:
    fields = {
        name: getattr(variable, name) for name in (
            "name", "label", "description", "type", "unit", "precision", "role", "source",
            "source_detail", "instrument", "question_text", "derivation", "derived_from",
            "time_association", "availability", "levels", "true_values", "false_values", "minimum",
            "maximum", "plausible_min", "plausible_max", "missing_codes", "max_missing", "required",
            "unique", "pattern", "date_format", "timezone", "aliases", "references", "sensitivity",
            "status", "confirmed_by",
        )
    }
    fields["confirmed_on"] = _date(variable.confirmed_at)
    fields["last_change"] = _last_change(s, variable)
    fields["masked"] = s.masked(variable)
    fields["rows"] = display_rows(variable, fields["confirmed_on"], fields["last_change"])
    fields["profile"] = _profile_context(s, variable, profile, drop) if profile and drop else None
    return fields


def _foreign_keys(s: Study, table: DataTable) -> list[dict[str, str]]:
    keys = []
    for variable in s.variables:
        if variable.table_id == table.id and variable.references:
            other, _, column = variable.references.rpartition(".")
            keys.append({"column": variable.name, "table": other, "references": column})
    return keys


def table_context(s: Study, table: DataTable) -> dict[str, Any]:
    drop = s.latest_drop(table.id)
    profiles = s.profiles(drop)
    groups: dict[str, list[dict[str, Any]]] = defaultdict(list)
    deprecated: list[dict[str, Any]] = []
    for variable in s.variables:
        if variable.table_id != table.id:
            continue
        data = profiles.get(variable.name)
        if data is None:
            data = next((profiles[a] for a in variable.aliases or [] if a in profiles), None)
        entry = variable_context(s, variable, data, drop)
        (deprecated if variable.status == "deprecated" else groups[variable.role]).append(entry)
    roles = [{"role": r, "title": ROLE_TITLES[r], "variables": groups[r]} for r in ROLE_ORDER if groups[r]]
    if deprecated:
        roles.append({"role": "deprecated", "title": "Deprecated", "variables": deprecated})
    rules = s.session.scalars(
        select(Rule).where(Rule.table_id == table.id, Rule.status == "active").order_by(Rule.id)
    )
    return {
        "name": table.name, "description": table.description, "grain": table.grain,
        "key": list(table.key or []), "foreign_keys": _foreign_keys(s, table),
        "variable_count": sum(len(g["variables"]) for g in roles),
        "profiled_drop": None if drop is None else
        {"id": drop.id, "label": drop.label, "checked_on": _date(drop.checked_at), "rows": s.count(drop.rows)},
        "groups": roles,
        "rules": [{"name": r.name, "expression": r.expression, "severity": r.severity, "why": r.why}
                  for r in rules],
    }


def dictionary_context(s: Study) -> dict[str, Any]:
    return {"version": version_context(s), "tables": [table_context(s, t) for t in s.tables]}
