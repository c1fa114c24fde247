"""``studylog report DOCUMENT``: the dictionary, methods, validity, conclusions, questions or write-up."""

from __future__ import annotations

from pathlib import Path

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, reading
from studylog.errors import InputFileError, InvalidValue

DOCUMENT_NAMES = ("dictionary", "questions", "methods", "validity", "conclusions", "writeup")


def _format(fmt: str | None, output: Path | None, template: Path | None) -> str:
    if fmt is not None:
        if fmt not in ("md", "html"):
            raise InvalidValue(f"unknown --format {fmt!r}; one of: md, html")
        return fmt
    for path in (template, output):
        if path is not None and path.name.lower().endswith((".html", ".htm", ".html.j2")):
            return "html"
    return "md"


def report(
    document: str = typer.Argument(..., help="One of: " + ", ".join(DOCUMENT_NAMES) + "."),
    fmt: str = typer.Option(None, "--format", help="md or html (default: from -o or --template, else md)."),
    output: Path = typer.Option(None, "-o", "--output", help="Write the document to this file."),
    template: Path = typer.Option(
        None, "--template", help="Render with your own Jinja2 template (same data; see DEVELOPERS.md)."
    ),
    min_cell: int = typer.Option(
        5, "--min-cell", help="Counts from 1 to N-1 are shown as '<N' (small cells withheld)."
    ),
    as_json: bool = JSON_OPTION,
) -> None:
    """Write a document from what the study recorded, as Markdown or self-contained HTML.

    Every document applies the privacy rules: small counts as "<N", no extremes of quasi-identifiers,
    no values of identifier, sensitive or free-text variables.
    """
    from studylog import report as documents

    if document not in DOCUMENT_NAMES:
        raise InvalidValue(f"unknown document {document!r}; one of: {', '.join(DOCUMENT_NAMES)}")
    chosen = _format(fmt, output, template)
    with reading() as session:
        text = documents.render(session, document, fmt=chosen, template=template, min_cell=min_cell)
    if output is None:
        if as_json:
            render.emit_json({"document": document, "format": chosen, "file": None, "text": text})
        else:
            typer.echo(text, nl=False)
        return
    try:
        output.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise InputFileError(str(output), f"cannot write: {exc.strerror or exc}") from exc
    size = len(text.encode("utf-8"))
    if as_json:
        render.emit_json({"document": document, "format": chosen, "file": str(output), "bytes": size})
    else:
        render.say(f"{document} written to {output} ({size:,} bytes, {chosen})")


def register(app: typer.Typer) -> None:
    app.command("report")(report)
