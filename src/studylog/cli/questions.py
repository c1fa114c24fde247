"""Questions for domain experts: ``ask``, ``answer``, ``withdraw``, ``questions`` (list), ``questions export``
and ``questions import``."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, reading, writing

questions_app = typer.Typer(
    help="List the questions (open ones by default); export the packet for one person; read answers back.",
    invoke_without_command=True,
)


def ask(
    text: str = typer.Argument(..., metavar="TEXT", help="The question."),
    var: list[str] = typer.Option(None, "--var", metavar="NAME",
        help="A variable it is about (repeat for several)."),
    to: str = typer.Option(None, "--to", metavar="WHO",
        help="Who can answer it: 'data owner', 'lab', a name."),
    priority: str = typer.Option(None, "--priority", metavar="low|normal|high",
        help="low, normal (the default) or high."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Put a question to someone who knows the data; it stays open until answered or withdrawn."""
    from studylog import questions

    with writing() as session:
        result = questions.ask(session, text, variables=var, to=to, priority=priority)
    render.created("question", result["id"], as_json, result)


def answer(
    question_id: int = typer.Argument(..., metavar="ID"),
    text: str = typer.Argument(..., metavar="TEXT", help="The answer."),
    by: str = typer.Option(None, "--by", metavar="WHO",
        help="Who answered (default: the person it was put to)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Record the answer to a question. A dictionary change it causes: 'var set NAME ... --question ID'."""
    from studylog import questions

    with writing() as session:
        result = questions.answer(session, question_id, text, by=by)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"question {result['id']} answered by {result['answered_by']}")


def withdraw(
    question_id: int = typer.Argument(..., metavar="ID"),
    why: str = typer.Option(None, "--why", metavar="TEXT", help="Why it is withdrawn (required)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Withdraw an open question (it stays in the journal and its history)."""
    from studylog import questions

    with writing() as session:
        result = questions.withdraw(session, question_id, why)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"question {result['id']} withdrawn")


@questions_app.callback()
def questions_list(
    ctx: typer.Context,
    status: str = typer.Option("open", "--status", metavar="STATUS",
        help="open (the default), answered, withdrawn or all."),
    to: str = typer.Option(None, "--to", metavar="WHO", help="Only questions put to this person."),
    var: str = typer.Option(None, "--var", metavar="NAME", help="Only questions about this variable."),
    as_json: bool = JSON_OPTION,
) -> None:
    """List the questions (open ones by default, highest priority first)."""
    if ctx.invoked_subcommand is not None:
        return
    from studylog import questions

    with reading() as session:
        found = questions.list_questions(session, status=status, to=to, variable=var)
    if as_json:
        render.emit_json({"questions": found})
        return
    render.table(
        ["id", "status", "priority", "to", "question", "variables", "answer"],
        [[q["id"], q["status"], q["priority"], q["to"], q["text"], ", ".join(q["variables"]),
          q["answer"] + (f" ({q['answered_by']})" if q["answered_by"] else "") if q["answer"] else None]
         for q in found],
        title=f"{len(found)} question(s)",
    )


@questions_app.command("export")
def questions_export(
    to: str = typer.Option(None, "--to", metavar="WHO",
        help="The person the packet is for (default: every open question)."),
    fmt: str = typer.Option("md", "--format", metavar="md|csv|html",
        help="md (the default), csv (with an answer column) or html."),
    output: Path = typer.Option(None, "-o", "--output", metavar="FILE",
        help="Write to this file (default: stdout)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Write the packet one person needs to answer their open questions.

    Grouped by variable, with its label, description, unit, levels and missing codes and what the last
    checked drop showed. Made safe to send: values of direct-identifier and sensitive variables, free text
    and identifiers are masked, counts below 5 shown as "<5", CSV cells that a spreadsheet would run as a
    formula are neutralised, HTML is escaped. Fill in the CSV's answer column and read it back with
    'questions import FILE'.
    """
    from studylog import packet

    with reading() as session:
        content, text = packet.export(session, to=to, fmt=fmt)
    if output is not None:
        try:
            # a BOM lets spreadsheet programs open the UTF-8 CSV with its accents intact
            output.write_text(text, encoding="utf-8-sig" if fmt == "csv" else "utf-8", newline="")
        except OSError as exc:
            from studylog.errors import UsageError

            raise UsageError(f"cannot write {output}: {exc.strerror}") from exc
    if content["questions"] == 0:
        render.warn(f"no open questions{f' for {to}' if to else ''}: the packet is empty")
    if as_json:
        render.emit_json({**content, "file": str(output) if output else None, "format": fmt})
    elif output is not None:
        render.say(f"{content['questions']} question(s) for {to or 'everyone'} written to {output}")
    else:
        sys.stdout.write(text)


@questions_app.command("import")
def questions_import(
    file: Path = typer.Argument(..., metavar="FILE", help="The packet CSV with its answer column filled in."),
    by: str = typer.Option(None, "--by", metavar="WHO",
        help="Who answered, where the file has no answered_by cell "
                           "(default: the person each question was put to)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Read answers back from a packet CSV: all of them or, if any line is wrong, none."""
    from studylog import questions

    with writing() as session:
        result: dict[str, Any] = questions.import_answers(session, str(file), by=by)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"{len(result['answered'])} answer(s) recorded from {file}"
               + (f"; {len(result['unchanged'])} already recorded" if result["unchanged"] else "")
               + (f"; {result['blank']} left blank" if result["blank"] else ""))


def register(app: typer.Typer) -> None:
    app.command("ask")(ask)
    app.command("answer")(answer)
    app.command("withdraw")(withdraw)
    app.add_typer(questions_app, name="questions")
