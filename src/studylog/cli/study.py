"""``studylog init`` and ``studylog status``."""

from __future__ import annotations

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, options, reading


def init(
    directory: str = typer.Argument(None, help="Folder for the study's studylog.db (default: here)."),
    title: str = typer.Option(None, "--title", help="The study's title (default: the folder's name)."),
    target: str = typer.Option(None, "--target", help="The outcome variable the study is about."),
    index_time: str = typer.Option(
        None, "--index-time", help="When a prediction is made, e.g. 'membership renewal date'."
    ),
    as_json: bool = JSON_OPTION,
) -> None:
    """Create a new study: a studylog.db in DIR (or the current folder)."""
    from studylog import study
    from studylog.store.session import location_for_new

    location = location_for_new(directory, options.store)
    result = study.create(location, title=title, target=target, index_time=index_time)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"created study '{result['title']}' in {location.path or location.url}")
    if not target:
        render.say("no target set yet: variables can be given --role target later")


def status(as_json: bool = JSON_OPTION) -> None:
    """The study at a glance: tables, variables, open items of every part of the study."""
    from studylog import status as status_core

    with reading() as session:
        result = status_core.gather(session)
    if as_json:
        render.emit_json(result)
        return
    study = result["study"]
    render.console.print(f"[bold]{render_escape(study['title'])}[/bold]")
    for section in result["sections"]:
        marker = {"ok": "", "todo": " (to do)", "warning": " (warning)"}.get(section["level"], "")
        header = f"{section['title']}{marker}"
        if section["summary"]:
            header += f": {section['summary']}"
        render.say(header)
        for item in section["items"]:
            render.say("  - " + "; ".join(f"{k}: {render.cell(v)}" for k, v in item.items()))


def render_escape(text: str) -> str:
    from rich.markup import escape

    return escape(text)


def register(app: typer.Typer) -> None:
    app.command("init")(init)
    app.command("status")(status)
