"""``studylog table add/set/list/show`` through the command line."""

from __future__ import annotations

import json
from pathlib import Path


def test_add_list_show_and_set_a_table(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    added = cli("table", "add", "members", "--key", "member_id", "--grain", "one row per member", "--json")
    assert added.exit_code == 0, added.stderr
    assert json.loads(added.stdout) == {"id": 1, "name": "members", "key": ["member_id"]}
    plain = cli("table", "add", "visits", "--key", "visit_id", "--description", "clinic visits")
    assert plain.exit_code == 0
    assert plain.stdout.strip() == "table 2 recorded"
    linked = cli("var", "add", "member_id", "--type", "identifier", "--table", "visits",
                 "--references", "members.member_id")
    assert linked.exit_code == 0, linked.stderr

    listed = json.loads(cli("table", "list", "--json").stdout)
    assert [(t["name"], t["key"], t["variables"]) for t in listed] == [
        ("members", ["member_id"], 0), ("visits", ["visit_id"], 1)
    ]
    shown = json.loads(cli("table", "show", "members", "--json").stdout)
    assert shown["grain"] == "one row per member"
    assert shown["referred_by"] == [{"table": "visits", "variable": "member_id"}]
    human = cli("table", "show", "visits")
    assert "member_id -> members.member_id" in human.stdout

    changed = cli("table", "set", "visits", "--grain", "one row per visit", "--json")
    assert changed.exit_code == 0
    assert json.loads(changed.stdout)["grain"] == "one row per visit"
    history = json.loads(cli("var", "history", "--json").stdout)
    assert any(c.get("table") == "visits" and c["field"] == "grain" and c["new"] == "one row per visit"
               for c in history)


def test_table_errors_are_one_line_exit_2(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    assert cli("table", "add", "visits").exit_code == 0
    for args, message in [
        (("table", "add", "visits"), "table 'visits' already exists"),
        (("table", "show", "lab"), "no table 'lab'"),
        (("table", "set", "lab", "--grain", "x"), "no table 'lab'"),
        (("table", "set", "visits"), "give --grain, --key or --description"),
    ]:
        result = cli(*args)
        assert result.exit_code == 2, args
        assert result.stdout == ""
        lines = result.stderr.strip().splitlines()
        assert len(lines) == 1 and message in lines[0], result.stderr
    assert [t["name"] for t in json.loads(cli("table", "list", "--json").stdout)] == ["visits"]


def test_table_with_confirmed_variables_changes_only_with_a_reason(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("table", "add", "visits", "--key", "visit_id")
    cli("var", "add", "visit_id", "--type", "identifier", "--status", "confirmed")
    refused = cli("table", "set", "visits", "--grain", "one row per visit")
    assert refused.exit_code == 2
    assert "give --why" in refused.stderr
    assert json.loads(cli("table", "show", "visits", "--json").stdout)["grain"] is None
    done = cli("table", "set", "visits", "--grain", "one row per visit", "--why", "agreed with the owner")
    assert done.exit_code == 0


def test_empty_table_list(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    assert json.loads(cli("table", "list", "--json").stdout) == []
    assert "no tables yet" in cli("table", "list").stdout
