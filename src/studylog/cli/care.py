"""``studylog doctor``, ``backup``, ``restore``, ``dump`` and ``load``: care of the store."""

from __future__ import annotations

from pathlib import Path

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, location, options

_MARK = {"ok": "ok", "warning": "warning", "problem": "PROBLEM"}


def doctor(as_json: bool = JSON_OPTION) -> None:
    """Check the store: SQLite integrity and foreign keys, schema version, size, journal mode,
    network filesystem, orphaned links, and whether every record's history replays to its current
    value. Exits 0 when healthy, 3 when not (each problem says what to do)."""
    from studylog import care
    from studylog.errors import StoreError

    report = care.doctor(location())
    if as_json:
        render.emit_json(report)
    else:
        fs = report["filesystem"] or {}
        render.fields(
            [
                ("store", report["store"]),
                ("schema version", report["schema_version"]),
                ("size", f"{report['size_bytes']:,} bytes" if report["size_bytes"] is not None else None),
                ("journal mode", report["journal_mode"]),
                ("filesystem", f"{fs.get('type')} at {fs.get('mount')}" if fs.get("type") else None),
            ],
            title="studylog doctor",
        )
        for check in report["checks"]:
            render.say(f"{_MARK[check['status']]:>8}  {check['name']}: {check['message']}")
            for problem in check["problems"][:5]:
                render.say(f"          - {render.cell(problem)}")
            if check["status"] != "ok" and check["hint"]:
                render.say(f"          what to do: {check['hint']}")
        if report["healthy"]:
            render.say("the store is healthy")
    if not report["healthy"]:
        names = ", ".join(c["name"] for c in report["checks"] if c["status"] == "problem")
        raise StoreError(f"the store is not healthy: {report['problems']} problem(s) ({names})")


def backup(
    file: Path = typer.Argument(..., help="The backup file to write (a complete SQLite store)."),
    force: bool = typer.Option(False, "--force", help="Replace FILE if it exists."),
    as_json: bool = JSON_OPTION,
) -> None:
    """A consistent copy of the store, taken with SQLite's online backup API (safe while others write)."""
    from studylog import care

    result = care.backup(location(), file, force=force)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"backed up to {result['file']} ({result['size_bytes']:,} bytes, "
               f"schema {result['schema_version']}, integrity {result['integrity']})")


def restore(
    file: Path = typer.Argument(..., help="A backup written by 'studylog backup'."),
    force: bool = typer.Option(False, "--force", help="Replace the current store (a copy is kept)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Replace the store by a backup. The backup is checked first (a studylog store, intact, not newer);
    an existing store is replaced only with --force, and a copy of it is kept beside it."""
    from studylog import care
    from studylog.store.session import location_for_new

    result = care.restore(location_for_new(None, options.store), file, force=force)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"restored {result['store']} from {result['restored_from']}")
    if result["kept"]:
        render.say(f"the replaced store is kept as {result['kept']}")


def dump(
    directory: Path = typer.Argument(..., help="Folder for the dump (new, empty, or an earlier dump)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Write the whole store as sorted text files (one .jsonl per kind of record) for git and review."""
    from studylog import dump as dumping

    result = dumping.dump(location(), directory)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"dumped {result['records']:,} records of {len(result['tables'])} tables to "
               f"{result['directory']}")


def load(
    directory: Path = typer.Argument(..., help="A folder written by 'studylog dump'."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Fill a new, empty store from a dump (ids preserved); refuses a store that holds records."""
    from studylog import dump as dumping
    from studylog.store.session import location_for_new

    result = dumping.load(location_for_new(None, options.store), directory)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"loaded {result['records']:,} records into {result['store']}")


def register(app: typer.Typer) -> None:
    app.command("doctor")(doctor)
    app.command("backup")(backup)
    app.command("restore")(restore)
    app.command("dump")(dump)
    app.command("load")(load)
