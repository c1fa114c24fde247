"""The threats-to-validity register: ``threat add``, ``threat set`` and ``threats``."""

from __future__ import annotations

from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, reading, writing

KIND_HELP = (
    "internal (bias within the study: confounding, selection, measurement, leakage), external (does it "
    "carry over to other people, places, times), construct (do the variables measure what they claim), "
    "statistical (power, multiplicity, assumptions)."
)

threat_app = typer.Typer(help="Enter a threat to validity, or change its mitigation, status or severity.",
                         no_args_is_help=True)


def _row(t: dict[str, Any]) -> list[Any]:
    return [t["id"], t["kind"], t["severity"], t["status"], t["text"], t["mitigation"],
            ", ".join(t["variables"]), ", ".join(str(d) for d in t["decisions"])]


@threat_app.command("add")
def threat_add(
    text: str = typer.Argument(..., metavar="TEXT", help="The threat."),
    kind: str = typer.Option(None, "--kind", metavar="KIND", help="Required: " + KIND_HELP),
    var: list[str] = typer.Option(None, "--var", metavar="NAME",
        help="A variable it concerns (repeat for several)."),
    decision: list[int] = typer.Option(None, "--decision", metavar="ID",
        help="A decision it concerns (repeat)."),
    severity: str = typer.Option(None, "--severity", metavar="low|medium|high",
        help="low, medium (the default) or high."),
    mitigation: str = typer.Option(None, "--mitigation", metavar="TEXT", help="What is done about it."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Enter a threat to validity in the register."""
    from studylog import threats

    with writing() as session:
        result = threats.add(session, text, kind=kind, variables=var, decisions=decision, severity=severity,
                             mitigation=mitigation)
    render.created("threat", result["id"], as_json, result)


@threat_app.command("set")
def threat_set(
    threat_id: int = typer.Argument(..., metavar="ID"),
    mitigation: str = typer.Option(None, "--mitigation", metavar="TEXT",
        help="What is done about it ('' clears it)."),
    status: str = typer.Option(None, "--status", metavar="STATUS", help="open, mitigated or accepted."),
    severity: str = typer.Option(None, "--severity", metavar="low|medium|high", help="low, medium or high."),
    why: str = typer.Option(None, "--why", metavar="TEXT", help="Why it changes (required)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Change a threat's mitigation, status or severity."""
    from studylog import threats

    with writing() as session:
        result = threats.update(session, threat_id, why=why, mitigation=mitigation, status=status,
                                severity=severity)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"threat {result['id']}: {result['status']}, {result['severity']} severity")


def threats_list(
    kind: str = typer.Option(None, "--kind", metavar="KIND",
        help="Only this kind: internal, external, construct, statistical."),
    status: str = typer.Option(None, "--status", metavar="STATUS",
        help="Only this status: open, mitigated, accepted."),
    var: str = typer.Option(None, "--var", metavar="NAME", help="Only threats concerning this variable."),
    as_json: bool = JSON_OPTION,
) -> None:
    """The threats-to-validity register."""
    from studylog import threats

    with reading() as session:
        found = threats.list_threats(session, kind=kind, status=status, variable=var)
    if as_json:
        render.emit_json({"threats": found})
        return
    render.table(["id", "kind", "severity", "status", "threat", "mitigation", "variables", "decisions"],
                 [_row(t) for t in found], title=f"{len(found)} threat(s)")


def register(app: typer.Typer) -> None:
    app.add_typer(threat_app, name="threat")
    app.command("threats")(threats_list)
