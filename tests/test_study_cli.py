"""``init`` and ``status`` through the command line."""

from __future__ import annotations

import json
from pathlib import Path


def test_init_creates_a_store_and_refuses_a_second(cli, isolated_store: Path) -> None:  # type: ignore[no-untyped-def]
    result = cli("init", "--title", "Renewals", "--target", "renewed", "--index-time", "renewal date")
    assert result.exit_code == 0, result.output
    assert isolated_store.is_file()
    again = cli("init")
    assert again.exit_code == 2
    assert "already exists" in again.stderr


def test_status_json_is_one_document(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    result = cli("status", "--json")
    assert result.exit_code == 0
    document = json.loads(result.stdout)
    assert document["study"]["title"] == "Test study"
    names = [s["name"] for s in document["sections"]]
    assert "study" in names
    study_section = next(s for s in document["sections"] if s["name"] == "study")
    assert study_section["level"] == "warning"


def test_status_without_a_study_is_exit_2_one_line(cli) -> None:  # type: ignore[no-untyped-def]
    result = cli("status")
    assert result.exit_code == 2
    assert "studylog init" in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1


def test_usage_errors_are_one_line_exit_2(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    result = cli("status", "--no-such-option")
    assert result.exit_code == 2
    assert len(result.stderr.strip().splitlines()) == 1
