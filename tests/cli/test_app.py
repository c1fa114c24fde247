"""The root app: a run builds only the command it runs, and still behaves as the whole app does."""

from __future__ import annotations

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
