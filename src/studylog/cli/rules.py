"""``studylog rule ...``: cross-field rules every row of a table must meet."""

from __future__ import annotations

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, WHY_OPTION, reading, writing

TABLE_OPTION = typer.Option(None, "--table", help="The table (default: the only table).")
LANGUAGE_HELP = (
    "A condition in studylog's expression language, e.g. \"discharged_on >= admitted_on\", "
    "\"pregnant = 'yes' -> sex = 'female'\", \"total = clinic + home\". Columns by name (quote odd names "
    "in double quotes or backticks), numbers, 'strings', dates (2024-01-31 or date '2024-01-31'), "
    "= != < <= > >=, + - * /, and or not, -> (implication), is [not] missing, [not] in (...). "
    "A row breaks the rule when the condition is false; missing operands never break it unless the rule "
    "says 'is missing'."
)


def add(
    name: str = typer.Argument(..., help="The rule's name, used in findings."),
    expression: str = typer.Argument(..., help=LANGUAGE_HELP),
    table: str = TABLE_OPTION,
    severity: str = typer.Option("error", "--severity", help="error or warning."),
    why: str = typer.Option(None, "--why", help="Why rows must meet it (who said so, where it is agreed)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Add a cross-field rule; it is checked on every drop of its table."""
    from studylog import rules

    with writing() as session:
        rule = rules.add(session, name, expression, table=table, severity=severity, why=why)
        result = rules.rule_dict(session, rule)
    render.created("rule", result["id"], as_json, {"name": result["name"], "expression": result["expression"]})


def list_(
    table: str = TABLE_OPTION,
    active: bool = typer.Option(False, "--active", help="Only the rules still checked."),
    as_json: bool = JSON_OPTION,
) -> None:
    """List the cross-field rules (retired ones too, unless --active)."""
    from studylog import rules

    with reading() as session:
        result = rules.listing(session, table, include_retired=not active)
    if as_json:
        render.emit_json(result)
        return
    if not result:
        render.say("no rules yet; add one with 'studylog rule add NAME EXPRESSION'")
        return
    columns = ["id", "table", "name", "expression", "severity", "status", "why"]
    render.table(columns, ([r[c] for c in columns] for r in result))


def retire(
    name: str = typer.Argument(..., help="The rule."),
    why: str = WHY_OPTION,
    table: str = TABLE_OPTION,
    as_json: bool = JSON_OPTION,
) -> None:
    """Stop checking a rule (it stays in the store, with its history)."""
    from studylog import rules

    with writing() as session:
        rule = rules.retire(session, name, why=why, table=table)
        result = rules.rule_dict(session, rule)
    if as_json:
        render.emit_json(result)
    else:
        render.say(f"rule {result['name']} retired")


def register(app: typer.Typer) -> None:
    group = typer.Typer(help="Cross-field rules: conditions every row of a table must meet.",
                        no_args_is_help=True)
    group.command("add")(add)
    group.command("list")(list_)
    group.command("retire")(retire)
    app.add_typer(group, name="rule")
