"""``threat add``, ``threat set`` and ``threats`` through the command line."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from journal_fixtures import add_var


def _json(result):  # type: ignore[no-untyped-def]
    assert result.exit_code == 0, (result.stdout, result.stderr)
    return json.loads(result.stdout)


def test_add_set_and_list_by_kind(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    add_var("age")
    cli("log", "exclude under-18s", "--kind", "exclude-cases", "--removed", "12")
    first = cli("threat", "add", "renewals recorded only online", "--kind", "internal", "--var", "age",
                "--decision", "1", "--severity", "high")
    assert first.exit_code == 0 and first.stdout.startswith("threat 1 recorded")
    doc = _json(cli("threat", "add", "one city", "--kind", "external", "--mitigation", "stated", "--json"))
    assert doc["id"] == 2 and doc["mitigation"] == "stated"
    internal = _json(cli("threats", "--kind", "internal", "--json"))["threats"]
    assert [(t["id"], t["variables"], t["decisions"]) for t in internal] == [(1, ["age"], [1])]
    assert [t["id"] for t in _json(cli("threats", "--kind", "external", "--json"))["threats"]] == [2]
    changed = _json(cli("threat", "set", "1", "--mitigation", "sensitivity analysis on phone renewals",
                        "--status", "mitigated", "--why", "analysis done", "--json"))
    assert changed["status"] == "mitigated"
    assert [t["id"] for t in _json(cli("threats", "--status", "open", "--json"))["threats"]] == [2]
    listing = cli("threats")
    assert listing.exit_code == 0 and "one city" in listing.stdout
    status = _json(cli("status", "--json"))
    section = next(s for s in status["sections"] if s["name"] == "threats")
    assert section["items"] == []


@pytest.mark.parametrize("args, message", [
    (["threat", "add", "x"], "--kind is required"),
    (["threat", "add", "x", "--kind", "causal"], "unknown threat kind 'causal'"),
    (["threat", "add", "x", "--kind", "internal", "--decision", "5"], "no decision 5"),
    (["threat", "set", "1", "--status", "accepted"], "--why"),
    (["threat", "set", "9", "--status", "accepted", "--why", "x"], "no threat 9"),
    (["threats", "--kind", "causal"], "unknown threat kind"),
])
def test_bad_input_is_one_line_exit_2(cli, study: Path, args: list[str], message: str) -> None:  # type: ignore[no-untyped-def]
    cli("threat", "add", "a threat", "--kind", "construct")
    result = cli(*args)
    assert result.exit_code == 2, (result.stdout, result.stderr)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0], result.stderr
