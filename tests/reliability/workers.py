"""Child processes for the reliability tests: writers and a reader that run studylog's command line.

Each child runs many commands in one process (as a notebook or a script does), through the same root
group as the ``studylog`` executable, and writes what happened to a JSON file: every command's exit
code, its stderr and, for writers, the id it printed. Running in-process keeps hundreds of commands in a
few seconds; the separate processes give real contention on the store file.

Usage: ``python workers.py writer FOLDER SECONDS NAME`` or ``python workers.py reader FOLDER SECONDS``. Each
child warms up, touches ``FOLDER/NAME.ready``, waits for ``FOLDER/go``, works for SECONDS and writes
``FOLDER/NAME.json``.
"""

from __future__ import annotations

import contextlib
import io
import json
import sys
import time
from pathlib import Path
from typing import Any


def cli(args: list[str]) -> tuple[int, str, str]:
    """Run one studylog command in this process; its exit code, stdout and stderr."""
    from studylog.cli.app import app

    out, err = io.StringIO(), io.StringIO()
    code = 0
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            app(args, prog_name="studylog")
        except SystemExit as exc:
            code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    return code, out.getvalue(), err.getvalue()


def _ready_then_wait(ready: Path, go: Path) -> None:
    """Warm up (imports, the connection, the schema check), say so, and wait for the common start."""
    cli(["var", "list", "--json"])
    ready.touch()
    while not go.exists():
        time.sleep(0.01)


def writer(name: str, duration: float) -> dict[str, Any]:
    """Decisions, questions and variables in turn until the time is up."""
    deadline = time.monotonic() + duration
    writes: list[dict[str, Any]] = []
    i = 0
    while time.monotonic() < deadline:
        kind = ("decision", "question", "variable")[i % 3]
        key = f"{name}_{i}"
        if kind == "decision":
            args = ["log", f"decision {key}: drop rows with a missing outcome", "--kind", "missing",
                    "--json"]
        elif kind == "question":
            args = ["ask", f"question {key}: is -99 a refusal?", "--to", "data owner", "--json"]
        else:
            args = ["var", "add", key, "--type", "text", "--label", f"label of {key}", "--json"]
        code, out, err = cli(args)
        record: dict[str, Any] = {"kind": kind, "key": key, "code": code, "stderr": err}
        if code == 0:
            record["id"] = json.loads(out)["id"]
        writes.append(record)
        i += 1
    return {"writes": writes}


def reader(duration: float) -> dict[str, Any]:
    """List the timeline over and over while the writers write; every listing must succeed."""
    deadline = time.monotonic() + duration
    reads: list[dict[str, Any]] = []
    while time.monotonic() < deadline:
        began = time.monotonic()
        code, out, err = cli(["timeline", "--json"])
        events = len(json.loads(out)["events"]) if code == 0 else None
        reads.append({"code": code, "stderr": err, "events": events,
                      "seconds": round(time.monotonic() - began, 3)})
    return {"reads": reads}


def main(argv: list[str]) -> None:
    role, folder, duration = argv[1], Path(argv[2]), float(argv[3])
    name = argv[4] if role == "writer" else "reader"
    _ready_then_wait(folder / f"{name}.ready", folder / "go")
    result = writer(name, duration) if role == "writer" else reader(duration)
    (folder / f"{name}.json").write_text(json.dumps(result), encoding="utf-8")


if __name__ == "__main__":
    main(sys.argv)
