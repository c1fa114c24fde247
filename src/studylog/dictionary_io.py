"""Export and import of the dictionary: CSV (one row per variable, one column per field) and JSON.

An export read back into a new study exports to the same bytes. CSV cells a spreadsheet would execute as
a formula are neutralised on export and restored on import (:mod:`studylog.safety`); lists of codes and
names are written as on the command line (``1=low,2=high``, backslash escapes). JSON carries the tables
too (description, grain, key); CSV carries the table's name only, and tables it names that do not exist
are created without a key. An import is all-or-nothing: it runs in the command's one transaction and the
first bad row stops it with the file's line (CSV) or the entry's number (JSON).

W3C CSV on the Web (``--format csvw``) lives in :mod:`studylog.csvw`; it is offered when that module is
installed, and a JSON document with an ``@context`` key is handed to it on import.
"""

from __future__ import annotations

import csv
import importlib.util
import io
import json
from pathlib import Path
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog import dictionary
from studylog.dictionary_fields import (
    BOOL_FIELDS,
    CODE_LIST_FIELDS,
    FIELDS,
    NAME_LIST_FIELDS,
    codes_from_text,
    codes_to_text,
    names_from_text,
    names_to_text,
    plain_number,
)
from studylog.errors import InputFileError, StudylogError, UsageError
from studylog.safety import neutralise_cell, restore_cell
from studylog.store.models import Variable

COLUMNS = ("table", "name", *FIELDS)
JSON_FORMAT_NAME = "studylog-dictionary"
JSON_FORMAT_VERSION = 1


def formats() -> tuple[str, ...]:
    """The export formats on offer; ``csvw`` once :mod:`studylog.csvw` is installed."""
    base = ("csv", "json")
    return base + ("csvw",) if importlib.util.find_spec("studylog.csvw") is not None else base


# ---- export ---------------------------------------------------------------------------------------


def _entries(session: Session, table: str | None) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    chosen = [dictionary.resolve_table(session, table)] if table is not None else dictionary.tables(session)
    tables = [
        {"name": t.name, "description": t.description, "grain": t.grain, "key": list(t.key or [])}
        for t in chosen
    ]
    variables = [
        dictionary.export_entry(v) for v in dictionary.variables(session)
        if table is None or v.table.name == table
    ]
    return tables, variables


def _cell(field: str, value: Any) -> str:
    if value is None:
        return ""
    if field in CODE_LIST_FIELDS:
        text = codes_to_text(value)
    elif field in NAME_LIST_FIELDS:
        text = names_to_text(value)
    elif field in BOOL_FIELDS:
        text = "true" if value else "false"
    else:
        text = repr(value) if isinstance(value, float) else str(value)
    return text if plain_number(text) else neutralise_cell(text)


def export_csv(session: Session, table: str | None = None) -> str:
    _, variables = _entries(session, table)
    out = io.StringIO()
    # CRLF as RFC 4180 has it; it also makes the writer quote cells holding a lone "\r"
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(COLUMNS)
    for entry in variables:
        writer.writerow([_cell(column, entry[column]) for column in COLUMNS])
    return out.getvalue()


def export_json(session: Session, table: str | None = None) -> str:
    tables, variables = _entries(session, table)
    for entry in variables:
        # the order of ordinal levels is their position in the list
        entry["levels"] = [{"code": c["code"], "label": c["label"]} for c in entry["levels"]]
    document = {"format": JSON_FORMAT_NAME, "version": JSON_FORMAT_VERSION, "tables": tables,
                "variables": variables}
    return json.dumps(document, ensure_ascii=False, indent=2) + "\n"


def export(session: Session, format: str = "csv", table: str | None = None) -> str:
    """The dictionary (or one table's part of it) as the text of a file."""
    if format == "csv":
        return export_csv(session, table)
    if format == "json":
        return export_json(session, table)
    if format == "csvw" and "csvw" in formats():
        from studylog import csvw

        return json.dumps(csvw.export_csvw(session, table=table), ensure_ascii=False, indent=2) + "\n"
    raise UsageError(f"unknown export format '{format}'; formats: {', '.join(formats())}")


# ---- import ---------------------------------------------------------------------------------------


def _apply(session: Session, entry: dict[str, Any], why: str | None, seen: set[tuple[str, str]]) -> str:
    """Create or update one variable from an entry; returns 'added', 'updated' or 'unchanged'."""
    name = entry.pop("name", None)
    table = entry.pop("table", None) or None
    if not isinstance(name, str) or not name:
        raise UsageError("the entry has no name")
    if table is None and dictionary.will_create_default_table(session, None):
        seen.add((dictionary.DEFAULT_TABLE, name))
        dictionary.add_variable(session, name, entry)
        return "added"
    owner = dictionary.resolve_table(session, table)
    if (owner.name, name) in seen:
        raise UsageError(f"variable '{name}' appears twice in the file")
    seen.add((owner.name, name))
    exists = session.scalars(
        select(Variable).where(Variable.table_id == owner.id, Variable.name == name)
    ).first()
    if not exists:
        dictionary.add_variable(session, name, entry, table=owner.name if owner else None)
        return "added"
    before = dictionary.export_entry(exists)
    variable = dictionary.update_variable(session, name, entry, table=owner.name, why=why)
    return "unchanged" if dictionary.export_entry(variable) == before else "updated"


def _csv_entries(path: str, text: str) -> list[tuple[int, dict[str, Any]]]:
    reader = csv.reader(io.StringIO(text, newline=""))
    try:
        header = next(reader)
    except StopIteration:
        raise InputFileError(path, "the file is empty", 1) from None
    except csv.Error as exc:
        raise InputFileError(path, f"not readable as CSV: {exc}", 1) from None
    header = [restore_cell(h.strip()) for h in header]
    unknown = [h for h in header if h not in COLUMNS]
    if unknown:
        raise InputFileError(path, f"unknown column '{unknown[0]}'; columns are: {', '.join(COLUMNS)}", 1)
    if "name" not in header:
        raise InputFileError(path, "the file has no 'name' column", 1)
    rows = []
    start = reader.line_num + 1
    try:
        for cells in reader:
            line, start = start, reader.line_num + 1
            if not any(c.strip() for c in cells):
                continue
            if len(cells) != len(header):
                raise InputFileError(path, f"{len(cells)} cells where the header has {len(header)}", line)
            rows.append((line, {h: _from_cell(h, restore_cell(c)) for h, c in zip(header, cells)}))
    except csv.Error as exc:
        raise InputFileError(path, f"not readable as CSV: {exc}", start) from None
    return rows


def _from_cell(field: str, text: str) -> Any:
    if text == "":
        return None
    if field in CODE_LIST_FIELDS:
        return codes_from_text(text)
    if field in NAME_LIST_FIELDS:
        return names_from_text(text)
    return text


def _json_entries(path: str, document: Any) -> tuple[list[dict[str, Any]], list[tuple[int, dict[str, Any]]]]:
    if isinstance(document, list):
        document = {"variables": document}
    if not isinstance(document, dict) or "variables" not in document \
            or not isinstance(document["variables"], list):
        raise InputFileError(path, "expected an object with a 'variables' list (as 'var export --format json' writes)")
    tables = document.get("tables", [])
    if not isinstance(tables, list) or not all(isinstance(t, dict) and t.get("name") for t in tables):
        raise InputFileError(path, "'tables' must be a list of objects with a 'name'")
    entries = []
    for number, entry in enumerate(document.get("variables", []), start=1):
        if not isinstance(entry, dict):
            raise InputFileError(path, f"variable entry {number} is not an object")
        unknown = [k for k in entry if k not in COLUMNS]
        if unknown:
            raise InputFileError(path, f"variable entry {number}: unknown key '{unknown[0]}'")
        entries.append((number, dict(entry)))
    return tables, entries


def _apply_tables(session: Session, tables: list[dict[str, Any]], why: str | None) -> None:
    for spec in tables:
        changes = {k: spec.get(k) for k in dictionary.TABLE_FIELDS if k in spec}
        if dictionary.find_table(session, spec["name"]) is None:
            dictionary.add_table(session, spec["name"], **changes)
        else:
            dictionary.update_table(session, spec["name"], changes, why=why)


def import_file(session: Session, path: str | Path, *, why: str | None = None) -> dict[str, Any]:
    """Read a dictionary file into the study; every change goes through the history."""
    path = Path(path)
    shown = str(path)
    try:
        # bytes, not read_text: universal newlines would turn a "\r" inside a quoted cell into "\n"
        text = path.read_bytes().decode("utf-8-sig")
    except FileNotFoundError:
        raise InputFileError(shown, "no such file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(shown, f"cannot be read: {exc}") from None
    looks_json = path.suffix.lower() == ".json" or text.lstrip()[:1] in ("{", "[")
    tables: list[dict[str, Any]] = []
    if looks_json:
        try:
            document = json.loads(text)
        except json.JSONDecodeError as exc:
            raise InputFileError(shown, f"not valid JSON: {exc.msg}", exc.lineno) from None
        except RecursionError:
            # thousands of nested brackets exhaust the parser's stack: a hostile file, not a bug
            raise InputFileError(shown, "not a dictionary: JSON nested too deeply") from None
        if isinstance(document, dict) and "@context" in document:
            return _import_csvw(session, shown, document)
        tables, entries = _json_entries(shown, document)
        where = "variable entry {}"
    else:
        entries = _csv_entries(shown, text)
        where = "line {}"
    try:
        _apply_tables(session, tables, why)
    except StudylogError as exc:
        raise InputFileError(shown, f"tables: {exc.message}") from None
    # tables named by entries but not described are created first (without a key), so that a row
    # may name a table that a later row also uses
    for _, entry in entries:
        name = entry.get("table")
        if isinstance(name, str) and name and dictionary.find_table(session, name) is None:
            try:
                dictionary.add_table(session, name)
            except StudylogError as exc:
                raise InputFileError(shown, f"table '{name}': {exc.message}") from None
    counts = {"added": 0, "updated": 0, "unchanged": 0}
    seen: set[tuple[str, str]] = set()
    for number, entry in entries:
        try:
            counts[_apply(session, entry, why, seen)] += 1
        except StudylogError as exc:
            if looks_json:
                raise InputFileError(shown, f"{where.format(number)}: {exc.message}") from None
            raise InputFileError(shown, exc.message, number) from None
    return {"file": shown, "format": "json" if looks_json else "csv", **counts}


def _import_csvw(session: Session, shown: str, document: dict[str, Any]) -> dict[str, Any]:
    if "csvw" not in formats():
        raise InputFileError(shown, "a CSV on the Web document, but this studylog cannot read that format")
    from studylog import csvw

    result = csvw.import_csvw(session, document)
    return {"file": shown, "format": "csvw", **(result if isinstance(result, dict) else {})}
