"""``studylog check FILE``: check a data drop against the dictionary, record it, exit 1 on problems."""

from __future__ import annotations

import sys
from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, reading, writing
from studylog.safety import MASK

SEVERITY_STYLE = {"error": "red", "warning": "yellow", "info": "dim"}
SEVERITY_ORDER = {"error": 0, "warning": 1, "info": 2}
SHOWN_ROWS = 3
SHOWN_LEVELS = 4
MESSAGE_LIMIT = 160


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
    from studylog.data import runtime

    runtime.one_blas_thread()
    from studylog import drops
    from studylog.errors import ChecksFailed, UsageError

    runtime.prefer_jemalloc(decay_ms=runtime.CHECK_DECAY_MS)
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
    drop = document["drop"]
    against = f"dictionary version {drop['dictionary']}" if drop["dictionary"] else (
        f"the current dictionary (change {drop['dictionary_change']})" if drop["dictionary_change"]
        else "the current dictionary")
    head = f"{drop['file']}: {drop['rows']} rows x {drop['columns']} columns, table {drop['table']}, " \
           f"checked against {against}"
    if document["recorded"]:
        head = f"drop {drop['id']} recorded; " + head
    render.say(head)
    findings = sorted(document["findings"], key=lambda f: SEVERITY_ORDER.get(f["severity"], 3))
    if findings:
        findings_view(findings)
    else:
        render.say("no findings: the file agrees with the dictionary")
    _comparison(document)
    render.say(f"{document['errors']} error(s), {document['warnings']} warning(s)")


def findings_view(findings: list[dict[str, Any]]) -> None:
    """One line per finding (the message shortened for the screen), then a few example rows of each."""
    from rich.text import Text

    render.compact_table(
        [render.Column("severity", wrap=False), render.Column("variable", wrap=False),
         render.Column("rule", wrap=False), render.Column("count", numeric=True), render.Column("message")],
        ([Text(f["severity"], style=SEVERITY_STYLE.get(f["severity"], "")), f["variable"] or "(rows)",
          f["rule"], f["count"], short_message(f["message"])] for f in findings),
    )
    examples = [(f"{f['variable'] or '(rows)'} {f['rule']}", _examples(f)) for f in findings if f["rows"]]
    if examples:
        render.say(f"examples (data rows, the header not counted; first {SHOWN_ROWS} of each):")
        render.fields(("  " + name, text) for name, text in examples)


def short_message(message: str) -> str:
    """The message for the screen: bracketed lists of more than a few items cut (--json keeps it whole)."""
    import re

    def cut(match: re.Match[str]) -> str:
        items = [i.strip() for i in match.group(1).split(",")]
        items = [i for i in items if i not in ("...", "…")]
        if len(items) <= SHOWN_LEVELS + 1:
            return match.group(0)
        return f"[{', '.join(items[:SHOWN_LEVELS])}, ...]"

    text = re.sub(r"\[([^\[\]]*,[^\[\]]*)\]", cut, message)
    return text if len(text) <= MESSAGE_LIMIT else text[: MESSAGE_LIMIT - 3].rstrip() + "..."


def _value(value: Any) -> str:
    if value is None:
        return "(empty)"
    text = str(value)
    return text if text == MASK else repr(text)


def _examples(finding: dict[str, Any]) -> str:
    """``row 12 V-0012: '-4'`` for the first rows; the value is left out where it is the key itself."""
    rows, keys, values = finding["rows"], finding["keys"] or [], finding["values"] or []
    shown = []
    for i, row in enumerate(rows[:SHOWN_ROWS]):
        key = keys[i] if i < len(keys) else None
        value = values[i] if i < len(values) else None
        text = f"row {row}" + (f" {key}" if key is not None else "")
        if i < len(values) and not (key is not None and str(value) == str(key)):
            text += f": {_value(value)}"
        shown.append(text)
    more = finding["count"] - len(shown)
    return "; ".join(shown) + (f"; ... {more} more" if more > 0 else "")


def _comparison(document: dict[str, Any]) -> None:
    """Drift (only the variables that moved) and the record comparison, or one line when there is none."""
    from studylog.cli.drops import drift_view, records_view

    records = document.get("records")
    against = document["drop"].get("against") or (records or {}).get("against")
    if against is None and not document.get("drift"):
        render.say("no earlier drop of this table to compare with")
        return
    render.say(f"compared with the earlier drop {against}:" if against is not None
               else "compared with the table's latest drop:")
    drift_view(document.get("drift") or [], only_notable=True, detail=False)
    records_view(records, examples=3)


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

        self.bar = Progress(console=render.rich_console(stderr=True), transient=True)
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
