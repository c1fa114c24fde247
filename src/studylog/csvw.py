"""The dictionary as W3C CSV on the Web metadata, and back.

Follows the Metadata Vocabulary for Tabular Data (W3C Recommendation, 17 December 2015): a table
description (``url``, ``tableSchema`` with ``columns``, ``primaryKey``, ``foreignKeys``) or, for several
tables, a table group (``tables``), with ``@context`` "http://www.w3.org/ns/csvw".

What CSVW carries natively, per column: ``name`` (the column name percent-encoded into the characters
a URI-template variable allows), ``titles`` (the name as it appears in the header, then its earlier
names), ``dc:title`` (the label) and ``dc:description``, ``datatype`` (``base``; ``format`` for dates,
datetimes, booleans ``"true|false"`` and string patterns; ``minimum`` and ``maximum``), ``null`` (the
empty cell and the missing codes) and ``required``; per table ``primaryKey`` from the key and
``foreignKeys`` from the variables' references, and ``dc:description``.

Fields CSVW cannot carry (our type where several share one datatype, unit, role, levels, sources,
availability, plausible range, sensitivity, status, ...) travel in one extension property per column,
``studylog:variable``, and per table ``studylog:table`` (name, grain). Their names are absolute IRIs in a
scheme of our own, which CSVW processors keep as common properties and otherwise ignore. Import reads a
native property where it is present and the extension for the rest, so an export imported into a new study
gives the same dictionary, and a CSVW document written by anyone else is read from its native properties.
"""

from __future__ import annotations

import math
import re
from typing import Any
from urllib.parse import quote, unquote, urlsplit

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog import dictionary
from studylog.dictionary_fields import FIELDS
from studylog.errors import InvalidValue, NotFound
from studylog.store.models import DataTable, Variable

CSVW_CONTEXT = "http://www.w3.org/ns/csvw"
VARIABLE_EXTENSION = "studylog:variable"
TABLE_EXTENSION = "studylog:table"
IMPORT_WHY = "imported from CSV on the Web metadata"

# our types -> CSVW datatype base (XML Schema names as CSVW spells them)
BASES = {
    "integer": "integer", "boolean": "boolean", "date": "date", "datetime": "dateTime",
    "categorical": "string", "ordinal": "string", "text": "string", "identifier": "string",
}
# a base from anyone's document -> our type (the CSVW built-in datatypes, W3C tabular metadata 5.11)
INTEGER_BASES = ("integer", "int", "long", "short", "byte", "nonNegativeInteger", "positiveInteger",
                 "nonPositiveInteger", "negativeInteger", "unsignedLong", "unsignedInt", "unsignedShort",
                 "unsignedByte")
NUMBER_BASES = ("decimal", "double", "float", "number")
DATETIME_BASES = ("dateTime", "datetime", "dateTimeStamp")
# fields CSVW carries natively (never repeated in the extension unless the native form cannot hold them)
NATIVE = ("label", "description", "required", "minimum", "maximum", "aliases", "references")

# strftime codes <-> the Unicode date-field symbols CSVW uses for date and time formats (UAX #35)
_TO_UAX = {"%Y": "yyyy", "%m": "MM", "%d": "dd", "%H": "HH", "%M": "mm", "%S": "ss", "%f": "SSSSSS",
           "%z": "xx"}
_UAX_TOKENS = re.compile(r"yyyy|MM|M|dd|d|HH|mm|ss|S+|XXX|XX|X|xxx|xx|x")
_FROM_UAX = {"yyyy": "%Y", "MM": "%m", "M": "%m", "dd": "%d", "d": "%d", "HH": "%H", "mm": "%M",
             "ss": "%S"}
# the date formats CSVW allows (W3C Model for Tabular Data, 6.4.4; from memory), times and zones after
_DATE_FORMATS = ("yyyy-MM-dd", "yyyyMMdd", "dd-MM-yyyy", "d-M-yyyy", "MM-dd-yyyy", "M-d-yyyy",
                 "dd/MM/yyyy", "d/M/yyyy", "MM/dd/yyyy", "M/d/yyyy", "dd.MM.yyyy", "d.M.yyyy",
                 "MM.dd.yyyy", "M.d.yyyy")
_TIME = r"(HH:mm|HH:mm:ss|HH:mm:ss\.S+)"
_ZONE = r"(X|XX|XXX|x|xx|xxx)?"


def _csvw_date_format(strftime: str, base: str) -> str | None:
    """Our strftime format as a CSVW format, or None when CSVW has no equivalent."""
    text = strftime
    for code, symbol in _TO_UAX.items():
        text = text.replace(code, symbol)
    if "%" in text:
        return None
    if base == "date":
        return text if text in _DATE_FORMATS else None
    dates = "|".join(re.escape(f) for f in _DATE_FORMATS)
    return text if re.fullmatch(rf"({dates})[T ]{_TIME}{_ZONE}", text) else None


def _strftime(uax: str) -> str:
    def swap(match: re.Match[str]) -> str:
        token = match.group(0)
        if token.startswith("S"):
            return "%f"
        if token[0] in "Xx":
            return "%z"
        return _FROM_UAX[token]

    return _UAX_TOKENS.sub(swap, uax)


def column_name(name: str) -> str:
    """A CSVW column name: only characters a URI-template variable allows, not starting with "_"."""
    encoded = quote(name, safe="")
    encoded = "".join(ch if ch.isalnum() or ch in "%_" else f"%{ord(ch):02X}" for ch in encoded)
    return "%5F" + encoded[1:] if encoded.startswith("_") else encoded


def _number(text: str | None) -> Any:
    """A range bound as a JSON number when that gives back the same text, else the text itself."""
    if text is None:
        return None
    try:
        as_int = int(text)
        if str(as_int) == text:
            return as_int
    except ValueError:
        pass
    try:
        as_float = float(text)
    except ValueError:
        return text
    return as_float if math.isfinite(as_float) and repr(as_float) == text else text


def _bound_text(value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, bool):
        raise InvalidValue(f"a minimum or maximum cannot be {value!r}")
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value)
    return str(value)


def _datatype(variable: Variable) -> tuple[dict[str, Any], dict[str, Any]]:
    """The CSVW datatype, and what the extension must add because the datatype cannot hold it."""
    extra: dict[str, Any] = {}
    if variable.type == "number":
        base = "decimal" if variable.precision is not None else "double"
    else:
        base = BASES[variable.type]
    datatype: dict[str, Any] = {"base": base}
    if variable.type == "boolean":
        trues, falses = list(variable.true_values or []), list(variable.false_values or [])
        if len(trues) == 1 and len(falses) == 1 and "|" not in trues[0] + falses[0]:
            datatype["format"] = f"{trues[0]}|{falses[0]}"
        elif trues or falses:
            extra.update(true_values=trues, false_values=falses)
    elif variable.type in ("date", "datetime"):
        if variable.date_format:
            converted = _csvw_date_format(variable.date_format, base)
            if converted is None:
                extra["date_format"] = variable.date_format
            else:
                datatype["format"] = converted
    elif base == "string" and variable.pattern:
        datatype["format"] = variable.pattern
    if variable.pattern and base != "string":
        extra["pattern"] = variable.pattern
    if variable.type in ("integer", "number"):
        bounds = {"minimum": _number(variable.minimum), "maximum": _number(variable.maximum)}
    else:
        bounds = {"minimum": variable.minimum, "maximum": variable.maximum}
    datatype.update({k: v for k, v in bounds.items() if v is not None})
    return datatype, extra


def _column(variable: Variable) -> dict[str, Any]:
    column: dict[str, Any] = {"name": column_name(variable.name),
                              "titles": [variable.name, *(variable.aliases or [])]}
    if variable.label:
        column["dc:title"] = variable.label
    if variable.description:
        column["dc:description"] = variable.description
    datatype, extra = _datatype(variable)
    column["datatype"] = datatype
    if variable.missing_codes:
        column["null"] = ["", *(str(c["code"]) for c in variable.missing_codes)]
    if variable.required:
        column["required"] = True
    carried = {"type", "true_values", "false_values", "date_format", "pattern", *NATIVE}
    extension = {"type": variable.type}
    # empty fields are left out: absent means empty (None, or no items) when read back
    extension.update({f: getattr(variable, f) for f in FIELDS
                      if f not in carried and getattr(variable, f) not in (None, [])})
    if not any(c.get("label") for c in variable.missing_codes or []):
        extension.pop("missing_codes", None)
    extension.update(extra)
    column[VARIABLE_EXTENSION] = extension
    return column


def _url(table: DataTable) -> str:
    return f"{quote(table.name, safe='')}.csv"


def _table(session: Session, table: DataTable, urls: dict[str, str]) -> dict[str, Any]:
    variables = list(session.scalars(
        select(Variable).where(Variable.table_id == table.id).order_by(Variable.position, Variable.id)
    ))
    schema: dict[str, Any] = {"columns": [_column(v) for v in variables]}
    key = [column_name(c) for c in table.key or []]
    if key:
        schema["primaryKey"] = key[0] if len(key) == 1 else key
    foreign = []
    for variable in variables:
        if not variable.references:
            continue
        other, _, column = variable.references.rpartition(".")
        foreign.append({"columnReference": column_name(variable.name),
                        "reference": {"resource": urls.get(other, f"{quote(other, safe='')}.csv"),
                                      "columnReference": column_name(column)}})
    if foreign:
        schema["foreignKeys"] = foreign
    description: dict[str, Any] = {"url": urls[table.name]}
    if table.description:
        description["dc:description"] = table.description
    description["tableSchema"] = schema
    description[TABLE_EXTENSION] = {"name": table.name, "grain": table.grain}
    return description


def export_csvw(session: Session, table: str | None = None) -> dict[str, Any]:
    """The dictionary of one table (a table description), or of every table (a table group)."""
    every = dictionary.tables(session)
    if not every:
        raise NotFound("the study has no tables yet; nothing to export")
    chosen = [dictionary.resolve_table(session, table)] if table else every
    urls = {t.name: _url(t) for t in every}
    if len(chosen) == 1:
        return {"@context": CSVW_CONTEXT, **_table(session, chosen[0], urls)}
    return {"@context": CSVW_CONTEXT, "tables": [_table(session, t, urls) for t in chosen]}


# ---- import ----

def _check_context(document: dict[str, Any]) -> None:
    context = document.get("@context")
    first = context[0] if isinstance(context, list) and context else context
    if first != CSVW_CONTEXT:
        raise InvalidValue(f"not a CSV on the Web metadata document: @context must be {CSVW_CONTEXT!r}")


def _text_value(value: Any) -> str | None:
    """A natural-language property (string, list of strings, or language map) as one text."""
    if value is None:
        return None
    if isinstance(value, str):
        return value
    if isinstance(value, list):
        return str(value[0]) if value else None
    if isinstance(value, dict):
        if "@value" in value:
            return str(value["@value"])
        for texts in value.values():
            found = _text_value(texts)
            if found is not None:
                return found
    return str(value)


def _titles(value: Any) -> list[str]:
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    if isinstance(value, list):
        return [str(v) for v in value]
    if isinstance(value, dict):
        return [t for texts in value.values() for t in _titles(texts)]
    raise InvalidValue(f"titles must be text or a list of texts, not {value!r}")


def _as_list(value: Any) -> list[str]:
    if value is None:
        return []
    return [str(v) for v in value] if isinstance(value, list) else [str(value)]


def _type_of(base: str, extension: dict[str, Any], is_key: bool) -> str:
    if isinstance(extension.get("type"), str):
        return extension["type"]
    if base in INTEGER_BASES:
        return "integer"
    if base in NUMBER_BASES:
        return "number"
    if base == "boolean":
        return "boolean"
    if base == "date":
        return "date"
    if base in DATETIME_BASES:
        return "datetime"
    # text is the careful choice for strings of unknown meaning: documents never show its values
    return "identifier" if is_key else "text"


def _variable_fields(column: dict[str, Any], key: list[str], where: str) -> tuple[str, dict[str, Any]]:
    if not isinstance(column, dict):
        raise InvalidValue(f"{where}: a column must be an object")
    titles = _titles(column.get("titles"))
    if isinstance(column.get("name"), str):
        name = unquote(column["name"])
    elif titles:
        name = titles[0]
    else:
        raise InvalidValue(f"{where}: a column needs a name or titles")
    extension = column.get(VARIABLE_EXTENSION) or {}
    if not isinstance(extension, dict):
        raise InvalidValue(f"{where}: {VARIABLE_EXTENSION} must be an object")
    datatype = column.get("datatype") or {"base": "string"}
    if isinstance(datatype, str):
        datatype = {"base": datatype}
    if not isinstance(datatype, dict):
        raise InvalidValue(f"{where}: datatype must be a name or an object")
    base = str(datatype.get("base", "string"))
    kind = _type_of(base, extension, name in key)
    fields: dict[str, Any] = {f: v for f, v in extension.items() if f in FIELDS}
    fields["type"] = kind
    fields["aliases"] = [t for t in titles if t != name]
    fields["label"] = _text_value(column.get("dc:title"))
    fields["description"] = _text_value(column.get("dc:description"))
    fields["required"] = bool(column.get("required", False))
    fields["minimum"] = _bound_text(datatype.get("minimum", datatype.get("minInclusive")))
    fields["maximum"] = _bound_text(datatype.get("maximum", datatype.get("maxInclusive")))
    fmt = datatype.get("format")
    if isinstance(fmt, dict):  # a number format: pattern/decimalChar/groupChar, nothing we keep
        fmt = None
    if fmt is not None:
        if kind == "boolean":
            true, _, false = str(fmt).partition("|")
            fields["true_values"], fields["false_values"] = [true], [false]
        elif kind in ("date", "datetime"):
            fields["date_format"] = _strftime(str(fmt))
        elif base == "string" or base not in (*INTEGER_BASES, *NUMBER_BASES):
            fields["pattern"] = str(fmt)
    labels = {str(c.get("code")): c.get("label") for c in extension.get("missing_codes") or []
              if isinstance(c, dict)}
    codes = [code for code in _as_list(column.get("null")) if code != ""]
    fields["missing_codes"] = [{"code": c, "label": labels.get(c)} for c in codes]
    return name, fields


def _table_name(description: dict[str, Any]) -> str:
    extension = description.get(TABLE_EXTENSION) or {}
    if isinstance(extension, dict) and isinstance(extension.get("name"), str):
        return extension["name"]
    url = description.get("url")
    if not isinstance(url, str) or not url:
        raise InvalidValue("a table description needs a url")
    stem = unquote(urlsplit(url).path.rsplit("/", 1)[-1])
    return stem.rsplit(".", 1)[0] if "." in stem else stem


def import_csvw(session: Session, document: dict[str, Any]) -> dict[str, Any]:
    """Read a CSVW table description or table group into the dictionary; every change in the history.

    Tables and variables that do not exist are created; existing ones are updated field by field.
    Returns ``{"tables_added", "added", "updated", "unchanged", "skipped"}``.
    """
    if not isinstance(document, dict):
        raise InvalidValue("a CSV on the Web metadata document is a JSON object")
    _check_context(document)
    if "tables" in document:
        descriptions = document["tables"]
        if not isinstance(descriptions, list) or not descriptions:
            raise InvalidValue("tables must be a non-empty list of table descriptions")
    elif "tableSchema" in document or "url" in document:
        descriptions = [document]
    else:
        raise InvalidValue("neither a table description (url, tableSchema) nor a table group (tables)")
    urls: dict[str, str] = {}
    plans = []
    for index, description in enumerate(descriptions, 1):
        if not isinstance(description, dict):
            raise InvalidValue(f"table {index}: a table description must be an object")
        name = _table_name(description)
        urls[str(description.get("url"))] = name
        schema = description.get("tableSchema") or {}
        if not isinstance(schema, dict):
            raise InvalidValue(f"table {name}: tableSchema must be an object (a schema given by URL "
                               "cannot be read)")
        key = [unquote(k) for k in _as_list(schema.get("primaryKey"))]
        columns = schema.get("columns") or []
        entries = [_variable_fields(c, key, f"table {name}, column {i}") for i, c in enumerate(columns, 1)]
        plans.append((name, description, schema, key, entries))
    summary: dict[str, Any] = {"tables_added": [], "added": 0, "updated": 0, "unchanged": 0,
                               "skipped": []}
    for name, description, schema, key, _ in plans:
        extension = description.get(TABLE_EXTENSION) or {}
        grain = extension.get("grain") if isinstance(extension, dict) else None
        text = _text_value(description.get("dc:description"))
        if dictionary.find_table(session, name) is None:
            dictionary.add_table(session, name, grain=grain, description=text)
            summary["tables_added"].append(name)
        else:
            dictionary.update_table(session, name, {"grain": grain, "description": text}, why=IMPORT_WHY)
    references: list[tuple[str, str, str | None]] = []
    for name, description, schema, key, entries in plans:
        foreign = {}
        for fk in schema.get("foreignKeys") or []:
            columns = _as_list(fk.get("columnReference"))
            reference = fk.get("reference") or {}
            target_columns = _as_list(reference.get("columnReference"))
            resource = reference.get("resource")
            if len(columns) != 1 or len(target_columns) != 1 or not isinstance(resource, str):
                summary["skipped"].append(f"{name}: a foreign key on {', '.join(columns)} "
                                          "(only single-column references to a resource are kept)")
                continue
            other = urls.get(resource) or _table_name({"url": resource})
            foreign[unquote(columns[0])] = f"{other}.{unquote(target_columns[0])}"
        for variable_name, fields in entries:
            references.append((name, variable_name, foreign.get(variable_name)))
            fields = dict(fields)
            fields.pop("references", None)
            summary[_apply(session, name, variable_name, fields)] += 1
        if key:
            dictionary.update_table(session, name, {"key": key}, why=IMPORT_WHY)
    for table, variable_name, reference in references:
        variable = dictionary.get_variable(session, variable_name, table)
        if variable.references != reference:
            dictionary.update_variable(session, variable_name, {"references": reference}, table=table,
                                       why=IMPORT_WHY)
    return summary


def _apply(session: Session, table: str, name: str, fields: dict[str, Any]) -> str:
    owner = dictionary.find_table(session, table)
    assert owner is not None
    exists = session.scalars(
        select(Variable).where(Variable.table_id == owner.id, Variable.name == name)
    ).first()
    if exists is None:
        dictionary.add_variable(session, name, fields, table=table)
        return "added"
    before = dictionary.export_entry(exists)
    dictionary.update_variable(session, name, fields, table=table, why=IMPORT_WHY)
    return "unchanged" if dictionary.export_entry(exists) == before else "updated"
