"""``studylog rule add/list/retire``: validated at add time, retired with a reason, history kept."""

from __future__ import annotations

import json

import pytest


@pytest.fixture
def stays(cli, study):  # type: ignore[no-untyped-def]
    for args in (("table", "add", "stays", "--key", "id"),
                 ("var", "add", "id", "--type", "identifier"),
                 ("var", "add", "admitted", "--type", "date"),
                 ("var", "add", "discharged", "--type", "date")):
        result = cli(*args)
        assert result.exit_code == 0, result.output
    return study


def test_add_list_retire(cli, stays) -> None:  # type: ignore[no-untyped-def]
    added = cli("rule", "add", "order", "discharged >= admitted", "--why", "agreed with the ward", "--json")
    assert added.exit_code == 0, added.output
    assert json.loads(added.stdout)["id"] >= 1
    listed = json.loads(cli("rule", "list", "--json").stdout)
    assert [(r["name"], r["expression"], r["severity"], r["status"], r["table"]) for r in listed] == [
        ("order", "discharged >= admitted", "error", "active", "stays")]
    retired = cli("rule", "retire", "order", "--why", "the ward records discharge on the next day")
    assert retired.exit_code == 0, retired.output
    assert json.loads(cli("rule", "list", "--json").stdout)[0]["status"] == "retired"
    assert json.loads(cli("rule", "list", "--active", "--json").stdout) == []


def test_history_records_create_and_retire(cli, stays) -> None:  # type: ignore[no-untyped-def]
    from sqlalchemy import select

    from studylog.store.models import Change
    from studylog.store.session import locate, transaction

    cli("rule", "add", "order", "discharged >= admitted", "--severity", "warning")
    cli("rule", "retire", "order", "--why", "obsolete")
    with transaction(locate(), write=False) as session:
        changes = list(session.scalars(select(Change).where(Change.entity == "rule").order_by(Change.id)))
        assert [c.action for c in changes] == ["create", "retire"]
        assert changes[0].new["severity"] == "warning"
        assert (changes[1].old, changes[1].new, changes[1].why) == ("active", "retired", "obsolete")


@pytest.mark.parametrize(
    ("expression", "words"),
    [("discharged >= admited", "unknown column 'admited'"),
     ("discharged >=", "at position 14"),
     ("discharged + 1", "must be a condition")],
)
def test_bad_expressions_exit_2_and_record_nothing(cli, stays, expression, words) -> None:  # type: ignore[no-untyped-def]
    result = cli("rule", "add", "r", expression)
    assert result.exit_code == 2
    assert words in result.stderr
    assert json.loads(cli("rule", "list", "--json").stdout) == []


def test_names_severity_and_retire_need_care(cli, stays) -> None:  # type: ignore[no-untyped-def]
    assert cli("rule", "add", "range", "discharged >= admitted").exit_code == 2
    assert cli("rule", "add", "r", "discharged >= admitted", "--severity", "fatal").exit_code == 2
    assert cli("rule", "add", "r", "discharged >= admitted").exit_code == 0
    assert cli("rule", "add", "r", "admitted <= discharged").exit_code == 2
    assert cli("rule", "retire", "r").exit_code == 2
    assert cli("rule", "retire", "nope", "--why", "x").exit_code == 2
