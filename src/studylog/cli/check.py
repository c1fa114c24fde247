"""``studylog check FILE``: check a data drop against the dictionary, record it, exit 1 on problems."""

from __future__ import annotations

import sys
from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, reading, writing

SEVERITY_STYLE = {"error": "red", "warning": "yellow", "info": "dim"}
SHOWN_ROWS = 5


def check(
    file: str = typer.Argument(..., help="The data file: CSV/TSV, Parquet or Excel (.xlsx)."),
    table: str = typer.Option(None, "--table", help="The table the file is a drop of (default: the only table)."),
    label: str = typer.Option(None, "--label", help="A name for this drop, e.g. 'April extract'."),
    version: str = typer.Option(None, "--dictionary", help="Check against a named dictionary version "
                                "(see 'studylog var versions') instead of the current dictionary."),
    against: int = typer.Option(None, "--against", help="Compare with this earlier drop (default: the "
                                "previous drop of the table)."),
    analysis: bool = typer.Option(False, "--analysis", help="Mark this drop as the analysed data set."),
    fail_on: str = typer.Option("error", "--fail-on", help="Exit 1 when a finding is at or above this "
                                "severity: error, warning or never."),
    no_record: bool = typer.Option(False, "--no-record", help="Check only; record nothing."),
    encoding: str = typer.Option(None, "--encoding", help="The text encoding of a CSV file (default: "
                                 "UTF-8, with a clear error when it is not)."),
    sheet: str = typer.Option(None, "--sheet", help="The Excel sheet (default: the first)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Check FILE against the dictionary: every deviation with counts, example rows and their keys.

    Rows are 1-based data rows (the header is not counted); values of direct-identifier, sensitive and
    free-text variables are masked, also in the store. Missing codes count as missing, never as type,
    level or range failures. Unless --no-record, the drop is recorded with its findings and a profile of
    every column. A file already recorded for the table is checked but not recorded again, unless a
    different --label is given. Exit codes: 0 no finding at or above --fail-on, 1 there is one,
    2 bad input (nothing recorded).
    """
    from studylog import drops
    from studylog.errors import ChecksFailed, UsageError

    if fail_on not in drops.FAIL_ON:
        raise UsageError(f"--fail-on must be one of {', '.join(drops.FAIL_ON)}, not '{fail_on}'")
    unit = reading() if no_record else writing()
    with _progress(enabled=not as_json) as progress, unit as session:
        outcome = drops.check_file(
            session, file, table=table, label=label, version=version, against=against,
            analysis=analysis, record=not no_record, encoding=encoding, sheet=sheet, progress=progress,
        )
    document = outcome.document
    if outcome.already_recorded is not None:
        again = " and recorded again under its new label" if document["recorded"] else \
            "; not recorded again (give a different --label to record it as a new drop)"
        render.warn(f"this file (sha256 {document['drop']['sha256'][:12]}...) is already recorded as drop "
                    f"{outcome.already_recorded}{again}")
    if as_json:
        render.emit_json(document)
    else:
        _show(document)
    if outcome.failed(fail_on):
        raise ChecksFailed(f"checks failed: {document['errors']} error(s), {document['warnings']} "
                           f"warning(s) (--fail-on {fail_on})")


def _show(document: dict[str, Any]) -> None:
    from rich.markup import escape

    drop = document["drop"]
    against = f"dictionary version {drop['dictionary']}" if drop["dictionary"] else (
        f"the current dictionary (change {drop['dictionary_change']})" if drop["dictionary_change"]
        else "the current dictionary")
    head = f"{drop['file']}: {drop['rows']} rows x {drop['columns']} columns, table {drop['table']}, " \
           f"checked against {against}"
    if document["recorded"]:
        head = f"drop {drop['id']} recorded; " + head
    render.say(head)
    findings = document["findings"]
    if findings:
        from rich.table import Table

        grid = Table(show_lines=False)
        for name in ("severity", "variable", "rule", "count", "rows", "keys", "values", "message"):
            grid.add_column(name, overflow="fold")
        for f in findings:
            style = SEVERITY_STYLE.get(f["severity"], "")
            grid.add_row(
                f"[{style}]{f['severity']}[/{style}]" if style else f["severity"],
                escape(f["variable"] or ""), escape(f["rule"]), str(f["count"]),
                escape(_few(f["rows"])), escape(_few(f["keys"])), escape(_few(f["values"])),
                escape(f["message"]),
            )
        render.console.print(grid)
    else:
        render.say("no findings: the file agrees with the dictionary")
    for part in ("drift", "records"):
        if part in document:
            render.say(f"{part}: {render.cell(document[part])}")
    render.say(f"{document['errors']} error(s), {document['warnings']} warning(s)")


def _few(items: list[Any]) -> str:
    shown = ["" if i is None else str(i) for i in items[:SHOWN_ROWS]]
    more = f" (+{len(items) - SHOWN_ROWS})" if len(items) > SHOWN_ROWS else ""
    return ", ".join(shown) + more


class _progress:
    """A progress bar on stderr while a long file is read (only on a terminal, never with --json)."""

    def __init__(self, enabled: bool) -> None:
        self.enabled = enabled and sys.stderr.isatty()
        self.bar: Any = None
        self.task: Any = None

    def __enter__(self) -> Any:
        if not self.enabled:
            return None
        from rich.progress import Progress

        self.bar = Progress(console=render.err_console, transient=True)
        self.bar.start()
        self.task = self.bar.add_task("checking", total=None)
        return self.update

    def update(self, done: int, total: int) -> None:
        self.bar.update(self.task, completed=done, total=total)

    def __exit__(self, *exc: object) -> None:
        if self.bar is not None:
            self.bar.stop()


def register(app: typer.Typer) -> None:
    app.command("check")(check)
