"""The question packet: what one person needs to answer the questions put to them, and their answers back.

The packet holds each open question addressed to them, grouped by the variable it is about (a question
about several variables sits under the first and names the others), with the variable's label,
description, unit, levels and missing codes and what the last checked drop showed. It is meant to be sent
out, so it is made safe here: values of direct-identifier and sensitive variables, of free text and of
identifiers are masked; counts from 1 to 4 are shown as "<5"; the extremes of quasi-identifiers are
withheld; CSV cells a spreadsheet would run as a formula are neutralised (OWASP, "CSV Injection"); HTML is
escaped by Jinja2's autoescape.

The CSV form has an empty ``answer`` column; :func:`read_answers` reads it back.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog import safety
from studylog import study as study_records
from studylog.clock import now
from studylog.data.spec import MASKED_SENSITIVITY
from studylog.errors import InputFileError, InvalidValue
from studylog.journal import latest_profile
from studylog.store.models import DataTable, Finding, Link, Variable

FORMATS = ("md", "csv", "html")
PACKET_LEVELS = 10
PACKET_FINDINGS = 5
CSV_COLUMNS = (
    "id", "to", "priority", "question", "table", "variable", "also_about", "label", "description", "unit",
    "levels", "missing_codes", "last_drop", "answer", "answered_by",
)
MASKED_TYPES = ("text", "identifier")
GENERAL = "General questions"


def _masked(variable: Variable) -> bool:
    return variable.sensitivity in MASKED_SENSITIVITY or variable.type in MASKED_TYPES


def _codes(codes: list[dict[str, Any]] | None) -> list[str]:
    return [f"{c.get('code')}={c['label']}" if c.get("label") else str(c.get("code")) for c in codes or []]


def _count(value: Any) -> Any:
    return safety.small_count(value) if isinstance(value, int) and not isinstance(value, bool) else value


def last_drop_view(session: Session, variable: Variable) -> dict[str, Any] | None:
    """What the latest checked drop of the variable's table showed about it, safe to send out."""
    found = latest_profile(session, variable)
    if found is None:
        return None
    drop, profile = found
    masked = _masked(variable)
    view: dict[str, Any] = {
        "drop": drop.id, "label": drop.label, "checked_at": drop.checked_at, "rows": _count(drop.rows),
        "present": profile is not None, "values_masked": masked,
    }
    if profile is not None:
        data = profile.data or {}
        missing = data.get("missing")
        rows = data.get("rows") or drop.rows
        view.update({
            "count": _count(data.get("count")),
            "missing": _count(missing),
            "distinct": _count(data.get("distinct")),
            "missing_codes": [{"code": c.get("code"), "count": _count(c.get("count"))}
                              for c in data.get("missing_codes") or []],
        })
        # a share would reveal a small count that is shown as "<5"
        if isinstance(missing, int) and rows and (missing == 0 or missing >= safety.DEFAULT_MIN_CELL):
            view["missing_share"] = round(missing / rows, 4)
        if not masked:
            view["levels"] = _levels(variable, data)
            view.update(_range(variable, data))
    findings = session.scalars(
        select(Finding).where(Finding.drop_id == drop.id,
                              Finding.variable.in_([variable.name, *(variable.aliases or [])]))
        .order_by(Finding.id).limit(PACKET_FINDINGS)
    )
    view["findings"] = [
        {"rule": f.rule, "severity": f.severity, "count": _count(f.count),
         # a checker's message may quote values; a masked variable's findings keep counts only
         "message": None if masked else f.message,
         "values": [safety.mask(v) for v in f.values or []] if masked else list(f.values or [])[:5]}
        for f in findings
    ]
    return view


def _levels(variable: Variable, data: dict[str, Any]) -> list[dict[str, Any]]:
    shown = []
    for level in (data.get("levels") or [])[:PACKET_LEVELS]:
        count = level.get("count")
        value = level.get("value")
        # a rare value of a quasi-identifier can single a person out
        if variable.sensitivity == "quasi-identifier" and isinstance(count, int) and count < safety.DEFAULT_MIN_CELL:
            value = safety.mask(value)
        shown.append({"value": value, "count": _count(count)})
    return shown


def _range(variable: Variable, data: dict[str, Any]) -> dict[str, Any]:
    shown: dict[str, Any] = {}
    if data.get("median") is not None:
        shown["median"] = data["median"]
    if variable.sensitivity != "quasi-identifier":
        for key in ("min", "max"):
            if data.get(key) is not None:
                shown[key] = data[key]
    return shown


def drop_summary(view: dict[str, Any] | None) -> str:
    """The last drop's facts as one line of text (the CSV cell, and the line under each variable)."""
    if view is None:
        return "no drop checked yet"
    head = f"drop {view['drop']}" + (f" ({view['label']})" if view.get("label") else "")
    if not view["present"]:
        return f"{head}: {view['rows']} rows; this column was not in it"
    parts = [f"{view['rows']} rows", f"{view['count']} present", f"{view['missing']} missing"
             + (f" ({view['missing_share']:.1%})" if "missing_share" in view else "")]
    if view.get("missing_codes"):
        parts.append("missing codes " + ", ".join(f"{c['code']}: {c['count']}" for c in view["missing_codes"]))
    if view.get("distinct") is not None:
        parts.append(f"{view['distinct']} distinct")
    if view.get("levels"):
        parts.append("most frequent " + ", ".join(f"{lv['value']} ({lv['count']})" for lv in view["levels"]))
    if any(k in view for k in ("min", "median", "max")):
        parts.append(", ".join(f"{k} {view[k]}" for k in ("min", "median", "max") if k in view))
    if view["values_masked"]:
        parts.append("values masked")
    for finding in view.get("findings", []):
        parts.append(f"{finding['severity']} {finding['rule']}: {finding['count']} rows")
    return f"{head}: " + "; ".join(str(p) for p in parts)


def build(session: Session, *, to: str | None = None) -> dict[str, Any]:
    """The packet's content: open questions (to one person, or all), grouped by variable."""
    from studylog.questions import list_questions

    questions = list_questions(session, status="open", to=to)
    ids = [q["id"] for q in questions]
    first_variable: dict[int, Variable] = {}
    if ids:
        for source_id, variable in session.execute(
            select(Link.source_id, Variable).join(Variable, Variable.id == Link.variable_id)
            .where(Link.source_kind == "question", Link.source_id.in_(ids)).order_by(Link.id)
        ):
            first_variable.setdefault(source_id, variable)
    groups: dict[int | None, dict[str, Any]] = {}
    for question in questions:
        variable = first_variable.get(question["id"])
        key = variable.id if variable is not None else None
        if key not in groups:
            groups[key] = _group(session, variable)
        entry = dict(question)
        entry["also_about"] = [n for n in question["variables"] if variable is None or n != variable.name]
        groups[key]["questions"].append(entry)
    ordered = sorted(groups.values(), key=lambda g: (g["variable"] is None, g["table"] or "", g["position"]))
    study = study_records.get(session)
    return {
        "study": study.title, "to": to, "exported_at": now(), "questions": len(questions),
        "groups": ordered,
    }


def _group(session: Session, variable: Variable | None) -> dict[str, Any]:
    if variable is None:
        return {"variable": None, "table": None, "position": 0, "title": GENERAL, "questions": []}
    table = session.scalar(select(DataTable.name).where(DataTable.id == variable.table_id))
    view = last_drop_view(session, variable)
    return {
        "variable": variable.name, "table": table, "position": variable.position,
        "title": variable.name + (f" - {variable.label}" if variable.label else ""),
        "label": variable.label, "description": variable.description, "unit": variable.unit,
        "type": variable.type, "sensitivity": variable.sensitivity,
        "levels": _codes(variable.levels), "missing_codes": _codes(variable.missing_codes),
        "last_drop": view, "last_drop_text": drop_summary(view), "questions": [],
    }


def render(packet: dict[str, Any], fmt: str) -> str:
    if fmt not in FORMATS:
        raise InvalidValue(f"unknown packet format {fmt!r}; one of: {', '.join(FORMATS)}")
    return {"md": _markdown, "csv": _csv, "html": _html}[fmt](packet)


def _csv(packet: dict[str, Any]) -> str:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(CSV_COLUMNS)
    for group in packet["groups"]:
        for q in group["questions"]:
            cells = [
                str(q["id"]), q["to"] or "", q["priority"], q["text"], group.get("table") or "",
                group["variable"] or "", ", ".join(q["also_about"]), group.get("label") or "",
                group.get("description") or "", group.get("unit") or "", ", ".join(group.get("levels") or []),
                ", ".join(group.get("missing_codes") or []),
                group.get("last_drop_text", "") if group["variable"] else "", "", "",
            ]
            writer.writerow([safety.neutralise_cell(cell) for cell in cells])
    return out.getvalue()


def _markdown(packet: dict[str, Any]) -> str:
    lines = [f"# Questions for {packet['to'] or 'the study team'}", ""]
    lines.append(f"Study: {packet['study']}. Exported {packet['exported_at'][:10]}; "
                 f"{packet['questions']} open question(s).")
    lines.append("")
    for group in packet["groups"]:
        lines += [f"## {group['title']}", ""]
        if group["variable"]:
            for name, key in (("Table", "table"), ("Description", "description"), ("Unit", "unit"),
                              ("Type", "type")):
                if group.get(key):
                    lines.append(f"- {name}: {group[key]}")
            if group["levels"]:
                lines.append(f"- Levels: {', '.join(group['levels'])}")
            if group["missing_codes"]:
                lines.append(f"- Missing codes: {', '.join(group['missing_codes'])}")
            lines.append(f"- Last checked drop: {group['last_drop_text']}")
            lines.append("")
        for q in group["questions"]:
            lines.append(f"### Question {q['id']} ({q['priority']} priority)")
            lines.append("")
            lines.append(q["text"])
            if q["also_about"]:
                lines += ["", f"Also about: {', '.join(q['also_about'])}"]
            lines += ["", "Answer:", "", ""]
    return "\n".join(lines).rstrip() + "\n"


_HTML = """<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<title>Questions for {{ packet.to or "the study team" }}</title>
<style>
body { font-family: system-ui, sans-serif; max-width: 52rem; margin: 2rem auto; color: #222; line-height: 1.45; }
h1 { font-size: 1.5rem; } h2 { font-size: 1.2rem; border-bottom: 1px solid #ccc; margin-top: 2rem; }
dl { display: grid; grid-template-columns: max-content 1fr; gap: .2rem 1rem; }
dt { font-weight: 600; } dd { margin: 0; }
.question { border-left: 4px solid #4a7; padding: .4rem .8rem; margin: 1rem 0; background: #f6faf7; }
.high { border-color: #c44; } .low { border-color: #aaa; }
.answer { min-height: 3rem; border: 1px dashed #999; margin-top: .5rem; padding: .3rem; color: #777; }
.facts { font-size: .9rem; color: #444; }
</style></head><body>
<h1>Questions for {{ packet.to or "the study team" }}</h1>
<p>Study: {{ packet.study }}. Exported {{ packet.exported_at[:10] }};
{{ packet.questions }} open question(s).</p>
{% for group in packet.groups %}
<section>
<h2>{{ group.title }}</h2>
{% if group.variable %}
<dl>
{% if group.table %}<dt>Table</dt><dd>{{ group.table }}</dd>{% endif %}
{% if group.description %}<dt>Description</dt><dd>{{ group.description }}</dd>{% endif %}
{% if group.unit %}<dt>Unit</dt><dd>{{ group.unit }}</dd>{% endif %}
<dt>Type</dt><dd>{{ group.type }}</dd>
{% if group.levels %}<dt>Levels</dt><dd>{{ group.levels | join(", ") }}</dd>{% endif %}
{% if group.missing_codes %}<dt>Missing codes</dt><dd>{{ group.missing_codes | join(", ") }}</dd>{% endif %}
<dt>Last checked drop</dt><dd class="facts">{{ group.last_drop_text }}</dd>
</dl>
{% endif %}
{% for q in group.questions %}
<div class="question {{ q.priority }}">
<p><strong>Question {{ q.id }}</strong> ({{ q.priority }} priority)</p>
<p>{{ q.text }}</p>
{% if q.also_about %}<p>Also about: {{ q.also_about | join(", ") }}</p>{% endif %}
<div class="answer">Answer:</div>
</div>
{% endfor %}
</section>
{% endfor %}
</body></html>
"""


def _html(packet: dict[str, Any]) -> str:
    from jinja2 import Environment

    return Environment(autoescape=True).from_string(_HTML).render(packet=packet)


# ---- answers back in ----

@dataclass(frozen=True)
class AnswerRow:
    line: int
    question_id: int
    answer: str | None
    answered_by: str | None


def _delimiter(header: str) -> str:
    # a spreadsheet saving CSV in some locales writes semicolons
    counts = {d: header.count(d) for d in (",", ";", "\t")}
    return max(counts, key=lambda d: counts[d]) if any(counts.values()) else ","


def read_answers(path: str | Path) -> list[AnswerRow]:
    """The rows of a filled-in CSV packet: question id, answer and who answered, with their line numbers."""
    name = str(path)
    try:
        # newline="": a carriage return inside a quoted cell is part of the cell, not a line end
        with open(path, encoding="utf-8-sig", newline="") as handle:
            text = handle.read()
    except FileNotFoundError as exc:
        raise InputFileError(name, "no such file") from exc
    except UnicodeDecodeError as exc:
        raise InputFileError(name, "not UTF-8 text; save the packet as CSV (UTF-8)") from exc
    except OSError as exc:
        raise InputFileError(name, f"cannot be read: {exc.strerror}") from exc
    # strict: a quote left open at the end of the file is an error, not an answer that swallows the rest
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=_delimiter(text.splitlines()[0] if text else ""),
                        strict=True)
    try:
        header = [safety.restore_cell(h).strip().lower() for h in next(reader, [])]
    except csv.Error as exc:
        raise InputFileError(name, f"not a readable CSV file ({exc})", 1) from exc
    if "id" not in header or "answer" not in header:
        raise InputFileError(name, "it has no 'id' and 'answer' columns; is it a question packet?", 1)
    at = {column: header.index(column) for column in ("id", "answer", "answered_by") if column in header}
    rows: list[AnswerRow] = []
    seen: dict[int, AnswerRow] = {}
    line = reader.line_num
    while True:
        start = line + 1
        try:
            cells = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            raise InputFileError(name, f"malformed CSV ({exc})", start) from exc
        line = reader.line_num
        if not any(c.strip() for c in cells):
            continue

        def cell(column: str) -> str | None:
            index = at.get(column)
            if index is None or index >= len(cells):
                return None
            value = safety.restore_cell(cells[index]).strip()
            return value or None

        raw_id = cell("id")
        # ASCII digits only ("²" and "٣" pass str.isdigit), and no more than SQLite's 64-bit integers
        if raw_id is None or not (raw_id.isascii() and raw_id.isdigit()) or len(raw_id) > 18:
            raise InputFileError(name, f"the id {raw_id or '(empty)'!r} is not a question number", start)
        row = AnswerRow(start, int(raw_id), cell("answer"), cell("answered_by"))
        earlier = seen.get(row.question_id)
        if earlier is not None and earlier.answer != row.answer:
            raise InputFileError(
                name, f"question {row.question_id} is answered differently on lines {earlier.line} and {start}",
                start)
        seen[row.question_id] = row
        rows.append(row)
    return rows


def export(session: Session, *, to: str | None = None, fmt: str = "md") -> tuple[dict[str, Any], str]:
    """The packet's content and its text in the chosen format."""
    if fmt not in FORMATS:
        raise InvalidValue(f"unknown packet format {fmt!r}; one of: {', '.join(FORMATS)}")
    packet = build(session, to=to)
    return packet, render(packet, fmt)

