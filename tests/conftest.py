"""Shared fixtures: every test gets its own store folder, so no test can touch a real store."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from typer.testing import CliRunner

from studylog.cli.app import app
from studylog.cli.common import options
from studylog.store import schema
from studylog.store.session import dispose_engines


@pytest.fixture(autouse=True)
def isolated_store(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[Path]:
    """Point STUDYLOG_STORE at a temporary folder and work from another temporary folder."""
    store_dir = tmp_path / "study"
    store_dir.mkdir()
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.setenv("STUDYLOG_STORE", str(store_dir / "studylog.db"))
    monkeypatch.setenv("STUDYLOG_AUTHOR", "tester")
    monkeypatch.setenv("NO_COLOR", "1")
    monkeypatch.setenv("COLUMNS", "200")
    monkeypatch.chdir(work)
    options.store = None
    options.debug = False
    yield store_dir / "studylog.db"
    dispose_engines()
    schema.forget_checked()


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


@pytest.fixture
def cli(runner: CliRunner):  # type: ignore[no-untyped-def]
    """Run studylog with arguments; returns the result (exit_code, stdout, stderr)."""

    def invoke(*args: str, input: str | None = None):  # type: ignore[no-untyped-def]
        return runner.invoke(app, list(args), input=input)

    return invoke


@pytest.fixture
def study(cli) -> Path:  # type: ignore[no-untyped-def]
    """A fresh study in the isolated store."""
    result = cli("init", "--title", "Test study")
    assert result.exit_code == 0, result.output
    import os

    return Path(os.environ["STUDYLOG_STORE"])
