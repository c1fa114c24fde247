"""``studylog draft FILE``: propose dictionary entries from a data file, and write them with --apply."""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, reading, split_list, writing

RULES = """\
Types are proposed when at least 95% of the non-missing values parse (all of them below 20 values);
parsing is strict: ASCII digits only, no overflow to infinity, dates that match the whole format and
exist. Missing codes: usual missing words (NA, n/a, unknown, ., ...), sentinels such as -99 or 999 that
lie outside the rest of the column (below a never-negative column, or beyond Tukey's outer fence of the
rest), placeholder dates. Observed minimum and maximum are evidence only, never written as limits."""


@contextmanager
def progress_bar(label: str) -> Iterator[Callable[[int, int], None] | None]:
    """A progress callback drawing on stderr when it is a terminal, else None (nothing drawn)."""
    if not sys.stderr.isatty():
        yield None
        return
    from rich.progress import BarColumn, DownloadColumn, Progress, TextColumn, TimeRemainingColumn

    bar = Progress(TextColumn("{task.description}"), BarColumn(), DownloadColumn(), TimeRemainingColumn(),
                   console=render.rich_console(stderr=True), transient=True)
    task = bar.add_task(label, total=None)

    def update(done: int, total: int) -> None:
        bar.update(task, completed=done, total=total)

    with bar:
        yield update


def draft(
    file: str = typer.Argument(..., help="The data file (CSV, TSV, Parquet, Excel .xlsx)."),
    table: str = typer.Option(None, "--table", help="The dictionary table (default: the file's name)."),
    target: str = typer.Option(None, "--target", help="The outcome column: role 'target' (and the study's "
                               "target if none is set)."),
    key: str = typer.Option(None, "--key", help="The table's key columns, comma-separated (default: "
                            "proposed from the data)."),
    apply: bool = typer.Option(False, "--apply", help="Write the proposals as draft entries (confirmed "
                               "entries are never changed)."),
    encoding: str = typer.Option(None, "--encoding", help="Text encoding of a CSV (default UTF-8)."),
    sheet: str = typer.Option(None, "--sheet", help="Excel sheet (default: the first)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Propose a dictionary entry for every column of FILE, with the evidence; --apply writes them.

    Shows where the file disagrees with entries already in the dictionary. No study is needed to look.
    """
    from studylog import draft as core
    from studylog.errors import NoStudyFound

    with progress_bar(f"reading {file}") as progress:
        proposed = core.propose(file, key=split_list(key), target=target, encoding=encoding, sheet=sheet,
                                progress=progress)
    if apply:
        with writing() as session:
            document = core.reconcile(session, proposed, table=table, write=True)
    else:
        try:
            with reading() as session:
                document = core.reconcile(session, proposed, table=table)
        except NoStudyFound:
            document = core.reconcile(None, proposed, table=table)
    if as_json:
        render.emit_json(document)
        return
    _show(document)


def _details(row: dict[str, Any]) -> str:
    if row["sensitivity"]:
        return row["sensitivity"]
    if row["levels"]:
        return "levels: " + ", ".join(str(level["code"]) for level in row["levels"][:12]) + (
            ", ..." if len(row["levels"]) > 12 else "")
    if row["true_values"]:
        return f"true: {', '.join(row['true_values'])}; false: {', '.join(row['false_values'])}"
    if row["date_format"]:
        return f"format {row['date_format']}"
    return ""


def _when(value: Any) -> Any:
    """An ISO date-time for the screen: a space for the 'T', whole minutes without ':00' seconds."""
    if not isinstance(value, str) or "T" not in value:
        return value
    text = value.replace("T", " ", 1)
    return text[:-3] if len(text) == 19 and text.endswith(":00") else text


def _shortened(values: list[str], limit: int = 36) -> str:
    text = ", ".join(values[:3])
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _show(document: dict[str, Any]) -> None:
    shape = f"{document['rows']} rows, {document['columns']} columns"
    where = "existing" if document["table_exists"] else "new"
    render.say(f"{document['file']} ({document['format']}, {shape}) -> {where} table '{document['table']}'")
    entries, evidence_rows = [], []
    for row in document["variables"]:
        evidence = row["evidence"]
        share = evidence["share_parsed"]
        extremes = f"{_when(row['minimum'])} .. {_when(row['maximum'])}" if row["minimum"] is not None else ""
        role = f" ({row['role']})" if row["role"] and row["role"] != row["type"] else ""
        codes = ", ".join(f"{c['code']} ×{c['count']}" for c in row["missing_codes"])
        entries.append([row["name"], row["type"] + role, _details(row), codes, row["action"]])
        evidence_rows.append([
            row["name"], f"{share:.1%}" if share is not None else "", evidence["distinct"], evidence["empty"],
            extremes, _shortened(evidence["examples"]), _shortened(evidence["not_parsed"]),
        ])
    name = render.Column("column", wrap=False)
    render.compact_table([name, render.Column("type", wrap=False), render.Column("details"),
                          render.Column("missing codes"), render.Column("action", wrap=False)],
                         entries, title="Proposed entries")
    render.compact_table([name, render.Column("parsed", numeric=True), render.Column("distinct", numeric=True),
                          render.Column("empty", numeric=True), render.Column("observed range"),
                          render.Column("examples"), render.Column("not parsed")],
                         evidence_rows, title="Evidence")
    notes = [(row["name"], note) for row in document["variables"] for note in row["evidence"]["notes"]]
    for name, note in notes:
        render.say(f"  {name}: {note}")
    if document["key"]:
        render.say(f"key: {', '.join(document['key'])} ({document['key_evidence']})")
    else:
        render.say("key: no column or pair of columns is complete and unique")
    if document["disagreements"]:
        render.compact_table(
            ["variable", "field", "dictionary", "file", "status", "note"],
            [[d["variable"] or "(table)", d["field"], d["dictionary"], d["file"], d["status"], d["note"]]
             for d in document["disagreements"]],
            title="Where the file disagrees with the dictionary",
        )
    for refused in document["refused"]:
        render.warn(f"column {refused['variable']!r} not written: {refused['why']}")
    counts = {action: sum(r["action"] == action for r in document["variables"])
              for action in ("add", "update", "keep", "same", "refuse")}
    if document["applied"]:
        render.say(f"written as drafts: {counts['add']} added, {counts['update']} updated; "
                   f"{counts['keep']} kept as they are, {counts['same']} unchanged")
        if document.get("study_target_set"):
            render.say(f"the study's target is now '{document['target']}'")
    else:
        render.say(f"would add {counts['add']} and update {counts['update']} draft entries; "
                   "run again with --apply to write them")


draft.__doc__ = f"{draft.__doc__}\n\n{RULES}"


def register(app: typer.Typer) -> None:
    app.command("draft")(draft)
