"""``studylog var ...``: the entries of the data dictionary, their history, versions, import and export.

``var add`` and ``var set`` share one list of field options (FIELD_OPTIONS); their signatures are built
from it so that the two can never disagree on an option's name or help.
"""

from __future__ import annotations

import inspect
from collections.abc import Callable
from pathlib import Path
from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, WHY_OPTION, reading, writing

TABLE_OPTION = typer.Option(None, "--table", help="The table (default: the study's only table).")

# (parameter, field, flags, help); every value is passed to the core as text, which checks it
FIELD_OPTIONS: list[tuple[str, str, tuple[str, ...], str]] = [
    ("type", "type", ("--type",), "integer, number, boolean, categorical, ordinal, date, datetime, text "
     "or identifier."),
    ("label", "label", ("--label",), "A short label for tables and charts."),
    ("description", "description", ("--description",), "What the variable means."),
    ("unit", "unit", ("--unit",), "Unit of measurement (e.g. kg, EUR, years)."),
    ("precision", "precision", ("--precision",), "Number of decimals recorded (0 or more)."),
    ("role", "role", ("--role",), "input, target, identifier, weight, stratum, cluster, time, group or "
     "excluded."),
    ("source", "source", ("--source",), "measured, derived, reported, administrative or external."),
    ("source_detail", "source_detail", ("--source-detail",), "Where exactly it comes from."),
    ("instrument", "instrument", ("--instrument",), "Questionnaire, device or form, with its version."),
    ("question_text", "question_text", ("--question-text",), "The wording put to respondents."),
    ("derivation", "derivation", ("--derivation",), "The formula or rule it is computed by."),
    ("derived_from", "derived_from", ("--derived-from",), "Comma-separated names of its inputs."),
    ("time", "time_association", ("--time",), "What time the value refers to."),
    ("available", "availability", ("--available",), "Available before, at or after the index time, or "
     "unknown (the guard against target leakage)."),
    ("levels", "levels", ("--levels",), "Comma-separated codes, each 'code' or 'code=label', in order "
     "(an ordinal's order is its position); '\\' escapes ',' and '='."),
    ("true_values", "true_values", ("--true-values",), "Comma-separated texts that mean true."),
    ("false_values", "false_values", ("--false-values",), "Comma-separated texts that mean false."),
    ("minimum", "minimum", ("--min",), "Smallest possible value (outside is an error); dates in the "
     "variable's date format."),
    ("maximum", "maximum", ("--max",), "Largest possible value (outside is an error)."),
    ("plausible_min", "plausible_min", ("--plausible-min",), "Smallest plausible value (outside is a "
     "warning); within the possible range."),
    ("plausible_max", "plausible_max", ("--plausible-max",), "Largest plausible value (outside is a "
     "warning)."),
    ("missing_codes", "missing_codes", ("--missing-codes",), "Comma-separated codes that mean missing, "
     "each 'code' or 'code=meaning' (e.g. '-99=refused,-98=don't know')."),
    ("max_missing", "max_missing", ("--max-missing",), "Largest acceptable share of missing values, 0 to "
     "1."),
    ("pattern", "pattern", ("--pattern",), "A regular expression (Python syntax) every value matches."),
    ("date_format", "date_format", ("--date-format",), "Python strftime codes (default ISO 8601, "
     "%Y-%m-%d)."),
    ("timezone", "timezone", ("--timezone",), "IANA timezone (Europe/Paris), UTC or an offset (+01:00)."),
    ("aliases", "aliases", ("--aliases",), "Comma-separated earlier names of the same column."),
    ("references", "references", ("--references",), "TABLE.COLUMN: the single-column key of another "
     "table this column refers to."),
    ("sensitivity", "sensitivity", ("--sensitivity",), "none, quasi-identifier, direct-identifier or "
     "sensitive."),
    ("status", "status", ("--status",), "draft, confirmed or deprecated."),
]
BOOL_OPTIONS: list[tuple[str, str, str, str]] = [
    ("required", "--required/--optional", "required", "Whether every record must have a value."),
    ("unique", "--unique/--not-unique", "unique", "Whether values must not repeat."),
]
FIELD_OF = {param: field for param, field, _, _ in FIELD_OPTIONS} | {p: f for p, _, f, _ in BOOL_OPTIONS}


def _parameter(name: str, default: Any, annotation: Any) -> inspect.Parameter:
    return inspect.Parameter(name, inspect.Parameter.KEYWORD_ONLY, default=default, annotation=annotation)


def _with_field_options(leading: list[inspect.Parameter], trailing: list[inspect.Parameter],
                        *, type_required: bool) -> Callable[[Callable[..., None]], Callable[..., None]]:
    """Give a ``**kwargs`` command the field options of FIELD_OPTIONS as its typer signature."""

    def decorate(command: Callable[..., None]) -> Callable[..., None]:
        params = list(leading)
        for param, _field, flags, help_text in FIELD_OPTIONS:
            required = type_required and param == "type"
            params.append(_parameter(param, typer.Option(... if required else None, *flags, help=help_text),
                                     str | None if not required else str))
        for param, flags, _field, help_text in BOOL_OPTIONS:
            params.append(_parameter(param, typer.Option(None, flags, help=help_text, show_default=False),
                                     bool | None))
        params.extend(trailing)
        command.__signature__ = inspect.Signature(params)  # type: ignore[attr-defined]
        command.__annotations__ = {p.name: p.annotation for p in params}
        return command

    return decorate


def _fields(values: dict[str, Any]) -> dict[str, Any]:
    """The fields the user gave (an empty text clears a field)."""
    return {FIELD_OF[k]: v for k, v in values.items() if k in FIELD_OF and v is not None}


NAME_PARAM = inspect.Parameter("name", inspect.Parameter.POSITIONAL_OR_KEYWORD,
                               default=typer.Argument(..., help="The variable (the column's name)."),
                               annotation=str)
TABLE_PARAM = _parameter("table", TABLE_OPTION, str | None)
JSON_PARAM = _parameter("as_json", JSON_OPTION, bool)


@_with_field_options([NAME_PARAM, TABLE_PARAM], [JSON_PARAM], type_required=True)
def add(**values: Any) -> None:
    """Add a variable to the dictionary (a draft until confirmed).

    In a study without tables the first variable creates the table 'data'.
    """
    from studylog import dictionary

    with writing() as session:
        new_table = dictionary.will_create_default_table(session, values["table"])
        variable = dictionary.add_variable(session, values["name"], _fields(values), table=values["table"])
        result = {"id": variable.id, "name": variable.name, "table": variable.table.name,
                  "table_created": new_table}
    render.created("variable", result["id"], values["as_json"], {k: v for k, v in result.items() if k != "id"})
    if new_table and not values["as_json"]:
        render.say(f"created table '{result['table']}' for it (the study had no table)")


@_with_field_options(
    [NAME_PARAM, TABLE_PARAM],
    [_parameter("why", WHY_OPTION, str | None),
     _parameter("question", typer.Option(None, "--question", help="The id of the question whose answer "
                                         "caused this change."), int | None),
     JSON_PARAM],
    type_required=False,
)
def set_(**values: Any) -> None:
    """Change fields of a variable; an empty value clears a field (--unit '').

    A confirmed variable changes only with --why.
    """
    from studylog import dictionary

    fields = _fields(values)
    if not fields:
        from studylog.errors import UsageError

        raise UsageError("give at least one field to change (see 'studylog var set --help')")
    with writing() as session:
        variable = dictionary.update_variable(session, values["name"], fields, table=values["table"],
                                              why=values["why"], question_id=values["question"])
        result = dictionary.variable_dict(variable)
    if values["as_json"]:
        render.emit_json(result)
    else:
        render.say(f"updated {result['table']}.{result['name']}")


def show(
    name: str = typer.Argument(..., help="The variable."),
    table: str = TABLE_OPTION,
    as_json: bool = JSON_OPTION,
) -> None:
    """Show every field of a variable."""
    from studylog import dictionary

    with reading() as session:
        result = dictionary.variable_dict(dictionary.get_variable(session, name, table))
    if as_json:
        render.emit_json(result)
        return
    shown = dict(result)
    from studylog.dictionary_fields import codes_to_text

    for field in ("levels", "missing_codes"):
        shown[field] = codes_to_text(shown[field]) if shown[field] else None
    render.fields([(k.replace("_", " "), v) for k, v in shown.items() if k != "id"],
                  title=f"{result['table']}.{result['name']}")


def list_(
    table: str = TABLE_OPTION,
    role: str = typer.Option(None, "--role", help="Only variables with this role."),
    type_: str = typer.Option(None, "--type", help="Only variables of this type."),
    status: str = typer.Option(None, "--status", help="Only draft, confirmed or deprecated variables."),
    as_json: bool = JSON_OPTION,
) -> None:
    """List the variables of the dictionary."""
    from studylog import dictionary

    with reading() as session:
        result = [dictionary.variable_dict(v) for v in
                  dictionary.variables(session, table=table, role=role, type=type_, status=status)]
    if as_json:
        render.emit_json(result)
        return
    if not result:
        render.say("no variables")
        return
    several = len({v["table"] for v in result}) > 1
    columns = (["table"] if several else []) + ["name", "type", "role", "unit", "status", "label"]
    render.table(columns, ([v[c] for c in columns] for v in result))


def history_(
    name: str = typer.Argument(None, help="The variable (default: the whole dictionary)."),
    table: str = TABLE_OPTION,
    as_json: bool = JSON_OPTION,
) -> None:
    """The changes of a variable, or of the whole dictionary, oldest first."""
    from studylog import dictionary

    with reading() as session:
        result = dictionary.variable_history(session, name, table)
    if as_json:
        render.emit_json(result)
        return
    rows = ([c["id"], c["at"][:16].replace("T", " "), c["author"], c.get("variable") or c.get("table"),
             c["action"] + (f" {c['field']}" if c["field"] else ""),
             "" if c["action"] == "create" else _short(c["old"]),
             "(new entry)" if c["action"] == "create" else _short(c["new"]),
             c["why"] or "", c["question"] or ""]
            for c in result)
    render.table(["id", "at", "by", "entry", "change", "old", "new", "why", "question"], rows)


def _short(value: Any) -> str:
    text = render.cell(value)
    return text if len(text) <= 60 else text[:57] + "..."


def confirm(
    names: list[str] = typer.Argument(..., help="The variables to confirm."),
    by: str = typer.Option(None, "--by", help="Who agreed them (default: you)."),
    table: str = TABLE_OPTION,
    as_json: bool = JSON_OPTION,
) -> None:
    """Mark variables as agreed; from then on each change needs --why."""
    from studylog import dictionary

    with writing() as session:
        done = [dictionary.confirm(session, name, by=by, table=table) for name in names]
        result = {"confirmed": [v.name for v in done], "by": done[0].confirmed_by if done else None}
    if as_json:
        render.emit_json(result)
    else:
        render.say(f"confirmed {', '.join(result['confirmed'])} (by {result['by']})")


def deprecate(
    name: str = typer.Argument(..., help="The variable."),
    why: str = typer.Option(..., "--why", help="Why it is no longer used."),
    table: str = TABLE_OPTION,
    as_json: bool = JSON_OPTION,
) -> None:
    """Retire a variable; it stays in the dictionary, the history and the exports."""
    from studylog import dictionary

    with writing() as session:
        result = dictionary.variable_dict(dictionary.deprecate(session, name, why=why, table=table))
    if as_json:
        render.emit_json(result)
    else:
        render.say(f"deprecated {result['table']}.{result['name']}")


def rename(
    old: str = typer.Argument(..., help="The current name."),
    new: str = typer.Argument(..., help="The new name."),
    why: str = typer.Option(..., "--why", help="Why it is renamed."),
    table: str = TABLE_OPTION,
    as_json: bool = JSON_OPTION,
) -> None:
    """Rename a variable; the old name becomes an alias (a drop may still use it)."""
    from studylog import dictionary

    with writing() as session:
        result = dictionary.variable_dict(dictionary.rename(session, old, new, why=why, table=table))
    if as_json:
        render.emit_json(result)
    else:
        render.say(f"renamed {old} to {result['name']}; '{old}' is kept as an alias")


def freeze(
    name: str = typer.Argument(..., help="The version's name, e.g. v1 or agreed-2026-03-03."),
    note: str = typer.Option(None, "--note", help="What this version is (e.g. 'agreed with the data owner')."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Save the whole dictionary as a named version, to check drops against and diff with later."""
    from studylog import versions

    with writing() as session:
        version = versions.freeze(session, name, note=note)
        result = versions.version_dict(version)
    render.created("dictionary version", result["id"], as_json, {k: v for k, v in result.items() if k != "id"})


def versions_(as_json: bool = JSON_OPTION) -> None:
    """List the named versions of the dictionary."""
    from studylog import versions

    with reading() as session:
        result = [versions.version_dict(v) for v in versions.versions(session)]
    if as_json:
        render.emit_json(result)
        return
    if not result:
        render.say("no versions yet; freeze one with 'studylog var freeze NAME'")
        return
    columns = ["id", "name", "note", "variables", "change_id", "author", "created_at"]
    render.table(columns, ([v[c] for c in columns] for v in result))


def diff(
    first: str = typer.Argument(..., help="The earlier version."),
    second: str = typer.Argument(None, help="The later version (default: the dictionary as it is now)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """What was added, removed, renamed and changed between two versions, or a version and now."""
    from studylog import versions

    with reading() as session:
        result = versions.diff(session, first, second)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"from {result['from']} to {result['to']}")
    for kind in ("added", "removed"):
        for item in result[kind]:
            render.say(f"  {kind}: {item['table']}.{item['name']}")
    for item in result["renamed"]:
        render.say(f"  renamed: {item['table']}.{item['old']} -> {item['new']}")
    for item in result["renamed"] + result["changed"]:
        for change in item["fields"]:
            who = item.get("name") or item["new"]
            render.say(f"  changed: {item['table']}.{who} {change['field']}: "
                       f"{_short(change['old'])!s} -> {_short(change['new'])!s}")
    for kind in ("added", "removed"):
        for name in result["tables"][kind]:
            render.say(f"  table {kind}: {name}")
    for item in result["tables"]["changed"]:
        for change in item["fields"]:
            render.say(f"  table changed: {item['name']} {change['field']}: "
                       f"{_short(change['old'])} -> {_short(change['new'])}")
    if not any(result[k] for k in ("added", "removed", "renamed", "changed")) and not any(
        result["tables"].values()
    ):
        render.say("  no differences")


def import_(
    file: Path = typer.Argument(..., help="A CSV or JSON file in the shape 'var export' writes."),
    why: str = WHY_OPTION,
    as_json: bool = JSON_OPTION,
) -> None:
    """Read variables from a file: new ones are added, known ones updated (all or nothing)."""
    from studylog import dictionary_io

    with writing() as session:
        result = dictionary_io.import_file(session, file, why=why)
    if as_json:
        render.emit_json(result)
    else:
        render.say(f"{result['file']}: {result.get('added', 0)} added, {result.get('updated', 0)} updated, "
                   f"{result.get('unchanged', 0)} unchanged")


def export(
    format: str = typer.Option("csv", "--format", help="csv or json (csvw when installed)."),
    table: str = TABLE_OPTION,
    output: Path = typer.Option(None, "-o", "--output", help="Write to this file (default: stdout)."),
) -> None:
    """Write the dictionary as CSV (one row per variable) or JSON (tables and variables)."""
    import sys

    from studylog import dictionary_io

    with reading() as session:
        text = dictionary_io.export(session, format.lower(), table)
    if output is None:
        sys.stdout.write(text)
        return
    try:
        output.write_text(text, encoding="utf-8", newline="")
    except OSError as exc:
        from studylog.errors import InputFileError

        raise InputFileError(str(output), f"cannot be written: {exc.strerror or exc}") from None
    render.say(f"wrote {output}")


def register(app: typer.Typer) -> None:
    var = typer.Typer(help="The data dictionary: variables, their history and versions.",
                      no_args_is_help=True)
    for name, command in (
        ("add", add), ("set", set_), ("show", show), ("list", list_), ("history", history_),
        ("confirm", confirm), ("deprecate", deprecate), ("rename", rename), ("freeze", freeze),
        ("versions", versions_), ("diff", diff), ("import", import_), ("export", export),
    ):
        var.command(name)(command)
    app.add_typer(var, name="var")
