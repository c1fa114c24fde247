"""``studylog table ...``: the tables of the study, their grain and key."""

from __future__ import annotations

from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, WHY_OPTION, reading, writing

GRAIN_HELP = "What one row is, e.g. 'one row per visit'."
KEY_HELP = "The key: one column, or several separated by commas."


def add(
    name: str = typer.Argument(..., help="The table's name."),
    grain: str = typer.Option(None, "--grain", help=GRAIN_HELP),
    key: str = typer.Option(None, "--key", help=KEY_HELP),
    description: str = typer.Option(None, "--description", help="What the table holds."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Add a table to the study."""
    from studylog import dictionary

    with writing() as session:
        table = dictionary.add_table(session, name, grain=grain, key=key, description=description)
        result = dictionary.table_dict(table)
    render.created("table", result["id"], as_json, {"name": result["name"], "key": result["key"]})


def set_(
    name: str = typer.Argument(..., help="The table."),
    grain: str = typer.Option(None, "--grain", help=GRAIN_HELP + " An empty text clears it."),
    key: str = typer.Option(None, "--key", help=KEY_HELP + " An empty text clears it."),
    description: str = typer.Option(None, "--description", help="What the table holds."),
    why: str = WHY_OPTION,
    as_json: bool = JSON_OPTION,
) -> None:
    """Change a table's grain, key or description (with --why once it has confirmed variables)."""
    from studylog import dictionary
    from studylog.errors import UsageError

    changes = {k: v for k, v in (("grain", grain), ("key", key), ("description", description)) if v is not None}
    if not changes:
        raise UsageError("give --grain, --key or --description to change")
    with writing() as session:
        result = dictionary.table_dict(dictionary.update_table(session, name, changes, why=why))
    if as_json:
        render.emit_json(result)
    else:
        render.say(f"updated table {result['name']}")


def _summary(session: Any, table: Any) -> dict[str, Any]:
    from studylog import dictionary

    entries = dictionary.variables(session, table=table.name)
    return dictionary.table_dict(table) | {
        "variables": len(entries),
        "confirmed": sum(1 for v in entries if v.status == "confirmed"),
        "references": [{"variable": v.name, "references": v.references} for v in entries if v.references],
    }


def list_(as_json: bool = JSON_OPTION) -> None:
    """List the study's tables."""
    from studylog import dictionary

    with reading() as session:
        result = [_summary(session, t) for t in dictionary.tables(session)]
    if as_json:
        render.emit_json(result)
        return
    if not result:
        render.say("no tables yet; add one with 'studylog table add NAME'")
        return
    columns = ["name", "grain", "key", "variables", "confirmed", "description"]
    render.table(columns, ([t[c] for c in columns] for t in result))


def show(name: str = typer.Argument(..., help="The table."), as_json: bool = JSON_OPTION) -> None:
    """Show a table: grain, key, its variables and the foreign keys between tables."""
    from sqlalchemy import select

    from studylog import dictionary
    from studylog.store.models import Variable

    with reading() as session:
        table = dictionary.resolve_table(session, name)
        result = _summary(session, table)
        result["variable_names"] = [v.name for v in dictionary.variables(session, table=table.name)]
        targets = [f"{table.name}.{column}" for column in table.key or []]
        referring = session.scalars(select(Variable).where(Variable.references.in_(targets))) if targets else []
        result["referred_by"] = [{"table": v.table.name, "variable": v.name} for v in referring]
    if as_json:
        render.emit_json(result)
        return
    render.fields([
        ("name", result["name"]), ("description", result["description"]), ("grain", result["grain"]),
        ("key", result["key"]), ("variables", result["variable_names"]),
        ("confirmed", f"{result['confirmed']} of {result['variables']}"),
        ("references", [f"{r['variable']} -> {r['references']}" for r in result["references"]]),
        ("referred by", [f"{r['table']}.{r['variable']}" for r in result["referred_by"]]),
        ("created", f"{result['created_at']} by {result['author']}"),
    ], title=f"table {result['name']}")


def register(app: typer.Typer) -> None:
    table = typer.Typer(help="The study's tables: grain, key and links between them.", no_args_is_help=True)
    table.command("add")(add)
    table.command("set")(set_)
    table.command("list")(list_)
    table.command("show")(show)
    app.add_typer(table, name="table")
