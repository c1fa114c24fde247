"""The root app: a run builds only the command it runs, and still behaves as the whole app does."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import typer.main

from studylog.cli.app import COMMAND_MODULES, _command_of, build_app


def _names(app: typer.Typer) -> set[str]:
    return set(typer.main.get_command(app).commands)  # type: ignore[attr-defined]


def test_a_run_builds_only_its_top_level_command_or_group() -> None:
    assert _command_of(["--store", "x.db", "log", "text"]) == "log"
    assert _command_of(["--debug", "decision", "show", "1"]) == "decision"
    assert _command_of(["--help"]) is None and _command_of(["nonsense"]) is None
    assert _names(build_app(["studylog.cli.journal"], only="log")) == {"log"}
    decision = build_app(["studylog.cli.journal"], only="decision")
    assert _names(decision) == {"decision"}
    assert {"show", "adopt", "implement", "supersede", "revert"} <= set(
        typer.main.get_command(decision).commands["decision"].commands  # type: ignore[attr-defined]
    )
    # a name the module does not register leaves the module's commands as they are
    assert _names(build_app(["studylog.cli.journal"], only="nonsense")) == set(
        COMMAND_MODULES["studylog.cli.journal"])


def _studylog(*args: str, cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "studylog", *args], cwd=cwd, env=os.environ.copy(),
                          capture_output=True, text=True, timeout=60, check=False)


def test_errors_and_help_of_a_pruned_run_name_the_command(study: Path, tmp_path: Path) -> None:
    done = _studylog("decision", "shw", "1", cwd=tmp_path)
    assert done.returncode == 2
    assert "No such command 'shw'" in done.stderr and "decision --help" in done.stderr
    done = _studylog("log", cwd=tmp_path)
    assert done.returncode == 2 and "Missing argument 'TEXT'" in done.stderr
    assert _studylog("log", "--help", cwd=tmp_path).returncode == 0
    done = _studylog("log", "chose the median", "--kind", "other", cwd=tmp_path)
    assert done.returncode == 0 and done.stdout.startswith("decision 1 recorded")


_PROBE = """
import functools, gc, sys
import studylog.cli.journal as journal_cli

original_log, original_register = journal_cli.log, journal_cli.register

@functools.wraps(original_log)
def log(*args, **kwargs):
    print("command", gc.isenabled(), gc.get_freeze_count() > 0)
    return original_log(*args, **kwargs)

def register(app):
    print("building", gc.isenabled())
    original_register(app)

journal_cli.log, journal_cli.register = log, register
from studylog.cli.app import run
sys.argv = ["studylog", *sys.argv[1:]]
try:
    run()
except SystemExit as exc:
    print("exit", exc.code)
print("after", gc.isenabled(), gc.get_freeze_count() > 0)
"""


def _probe(*args: str, cwd: Path) -> list[str]:
    done = subprocess.run([sys.executable, "-c", _PROBE, *args], cwd=cwd, env=os.environ.copy(),
                          capture_output=True, text=True, timeout=60, check=True)
    return [line for line in done.stdout.splitlines() if line.split()[0] in ("building", "command", "exit",
                                                                             "after")]


def test_the_collector_rests_while_a_command_starts_and_runs_with_the_command(study: Path,
                                                                              tmp_path: Path) -> None:
    assert _probe("log", "a decision", cwd=tmp_path) == [
        "building False", "command True True", "exit 0", "after True True"]
    # a run that stops before its command (a usage error) leaves the collector as it found it
    assert _probe("log", cwd=tmp_path) == ["building False", "exit 2", "after True False"]


def test_the_entry_point_leaves_with_its_output_whole_its_exit_code_and_the_store_closed(
        study: Path, tmp_path: Path) -> None:
    # a profile's JSON larger than a pipe's buffer (64 KiB on Linux) arrives whole through the pipe
    # although the process leaves without the interpreter's teardown
    header = ",".join(f"x{j}" for j in range(60))
    rows = "\n".join(",".join(str((i * (j + 3)) % 101) for j in range(60)) for i in range(300))
    data = tmp_path / "wide.csv"
    data.write_text(header + "\n" + rows + "\n", encoding="utf-8")
    done = _studylog("profile", str(data), "--json", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert len(done.stdout) > 65_536
    assert json.loads(done.stdout)["rows"] == 300
    # a write leaves no SQLite log beside the store: its connection was closed before leaving (this
    # process's own connections, from making the study, closed first: the log goes with the last one)
    from studylog.store.session import dispose_engines

    dispose_engines()
    done = _studylog("log", "chose the median", "--kind", "other", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    store = study / "studylog.db" if study.is_dir() else study
    assert store.exists() and not Path(f"{store}-wal").exists()
    # a refused command keeps its exit code and its one line
    done = _studylog("profile", str(tmp_path / "missing.csv"), cwd=tmp_path)
    assert done.returncode == 2 and done.stderr.startswith("error:") and len(done.stderr.splitlines()) == 1
