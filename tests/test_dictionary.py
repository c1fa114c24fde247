"""The dictionary's core operations: tables, entries, validation, history, table_spec."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from studylog import dictionary, history
from studylog.data.spec import Code, TableSpec
from studylog.errors import AlreadyExists, InvalidValue, NotFound, UsageError
from studylog.store.models import Change, DataTable, Question, Rule, Variable
from studylog.store.session import locate, transaction


@pytest.fixture
def session(study: Path) -> Iterator[Session]:
    with transaction(locate(), write=True) as session:
        yield session


def test_first_variable_creates_the_default_table(session: Session) -> None:
    assert dictionary.will_create_default_table(session, None)
    variable = dictionary.add_variable(session, "age", {"type": "integer", "unit": "years"})
    assert variable.table.name == dictionary.DEFAULT_TABLE
    assert dictionary.resolve_table(session, None).name == "data"
    assert not dictionary.will_create_default_table(session, None)


def test_resolve_table_needs_a_name_when_several(session: Session) -> None:
    with pytest.raises(NotFound, match="no tables yet"):
        dictionary.resolve_table(session, None)
    dictionary.add_table(session, "members", key="member_id")
    dictionary.add_table(session, "visits", key=["visit_id"], grain="one row per visit")
    with pytest.raises(UsageError, match="say which with --table"):
        dictionary.resolve_table(session, None)
    assert dictionary.resolve_table(session, "visits").key == ["visit_id"]
    with pytest.raises(NotFound, match="no table 'lab'"):
        dictionary.resolve_table(session, "lab")
    with pytest.raises(AlreadyExists):
        dictionary.add_table(session, "visits")


def test_fields_are_normalised_and_ordinal_levels_take_their_position(session: Session) -> None:
    variable = dictionary.add_variable(session, "severity", {
        "type": "Ordinal", "levels": "1=mild,2=moderate,3=severe",
        "missing_codes": ["-99=refused", {"code": "-98", "label": "don't know"}],
        "derived_from": "a, b", "required": "yes", "max_missing": "0.1", "precision": "0",
    })
    assert variable.type == "ordinal"
    assert variable.levels == [
        {"code": "1", "label": "mild", "order": 1},
        {"code": "2", "label": "moderate", "order": 2},
        {"code": "3", "label": "severe", "order": 3},
    ]
    assert variable.missing_codes == [{"code": "-99", "label": "refused"}, {"code": "-98", "label": "don't know"}]
    assert variable.derived_from == ["a", "b"]
    assert variable.required is True and variable.max_missing == 0.1 and variable.precision == 0


def test_escaped_commas_and_equals_in_codes(session: Session) -> None:
    variable = dictionary.add_variable(
        session, "answer", {"type": "categorical", "levels": r"y=yes\, always,a\=b=equal,n"}
    )
    assert [(c["code"], c["label"]) for c in variable.levels] == [
        ("y", "yes, always"), ("a=b", "equal"), ("n", None)
    ]


@pytest.mark.parametrize(
    ("fields", "message"),
    [
        ({"type": "float"}, "unknown type 'float'; allowed: integer, number"),
        ({"type": "integer", "role": "outcome"}, "unknown role 'outcome'"),
        ({"type": "integer", "source": "guessed"}, "unknown source"),
        ({"type": "integer", "sensitivity": "secret"}, "unknown sensitivity"),
        ({"type": "integer", "availability": "later"}, "unknown availability"),
        ({"type": "integer", "status": "done"}, "unknown status"),
        ({"type": "integer", "minimum": "10", "maximum": "1"}, "minimum 10 is above maximum 1"),
        ({"type": "integer", "minimum": "0", "maximum": "100", "plausible_max": "150"},
         "outside the possible range"),
        ({"type": "integer", "minimum": "0", "plausible_min": "-5"}, "outside the possible range"),
        ({"type": "integer", "plausible_min": "9", "plausible_max": "3"}, "plausible minimum 9 is above"),
        ({"type": "number", "levels": "1=a"}, "not to a numeric variable"),
        ({"type": "text", "pattern": "([a-z"}, "not a valid regular expression"),
        ({"type": "integer", "minimum": "ten"}, "must be a number, not 'ten'"),
        ({"type": "date", "minimum": "03/01/2020"}, "does not match the date format %Y-%m-%d"),
        ({"type": "date", "date_format": "%d/%m/%Y", "maximum": "2020-01-03"}, "does not match"),
        ({"type": "integer", "max_missing": "1.5"}, "between 0 and 1"),
        ({"type": "integer", "max_missing": "-0.1"}, "between 0 and 1"),
        ({"type": "integer", "precision": "-1"}, "0 or more decimals"),
        ({"type": "integer", "precision": "two"}, "whole number"),
        ({"type": "integer", "true_values": "1"}, "apply to boolean"),
        ({"type": "boolean", "true_values": "1", "false_values": "1"}, "both a true and a false"),
        ({"type": "categorical", "levels": "1,2", "missing_codes": "2"}, "both a level and a missing code"),
        ({"type": "categorical", "levels": "1,1"}, "twice"),
        ({"type": "text", "minimum": "a"}, "ranges apply to numeric and date types"),
        ({"type": "datetime", "timezone": "Mars/Olympus"}, "unknown timezone"),
        ({"type": "date", "date_format": "YYYY"}, "no strftime code"),
        ({"type": "integer", "colour": "red"}, "unknown field 'colour'"),
        ({}, "needs a type"),
    ],
)
def test_bad_fields_are_refused_with_one_clear_message(
    session: Session, fields: dict[str, str], message: str
) -> None:
    with pytest.raises(InvalidValue) as caught:
        dictionary.add_variable(session, "x", fields)
    assert message in str(caught.value)
    assert str(caught.value).startswith("x: ") or "unknown field" in str(caught.value)
    assert "\n" not in str(caught.value)
    assert session.scalar(select(func.count()).select_from(Variable)) == 0


def test_date_ranges_parse_with_the_variable_format(session: Session) -> None:
    variable = dictionary.add_variable(session, "visit_date", {
        "type": "date", "date_format": "%d/%m/%Y", "minimum": "01/01/2020", "maximum": "31/12/2025",
    })
    assert variable.minimum == "01/01/2020"
    with pytest.raises(InvalidValue, match="above maximum"):
        dictionary.update_variable(session, "visit_date", {"minimum": "01/01/2030"})


def test_references_must_name_a_single_column_key(session: Session) -> None:
    dictionary.add_table(session, "members", key="member_id")
    dictionary.add_table(session, "pairs", key="a,b")
    dictionary.add_table(session, "visits", key="visit_id")
    ok = dictionary.add_variable(
        session, "member_id", {"type": "identifier", "references": "members.member_id"}, table="visits"
    )
    assert ok.references == "members.member_id"
    with pytest.raises(InvalidValue, match="'name' is not the key of table 'members'"):
        dictionary.add_variable(session, "x", {"type": "text", "references": "members.name"}, table="visits")
    with pytest.raises(InvalidValue, match="not the key of table 'pairs'"):
        dictionary.add_variable(session, "y", {"type": "text", "references": "pairs.a"}, table="visits")
    with pytest.raises(InvalidValue, match="no such table"):
        dictionary.add_variable(session, "z", {"type": "text", "references": "nowhere.id"}, table="visits")
    with pytest.raises(InvalidValue, match="refers to members.member_id"):
        dictionary.update_table(session, "members", {"key": "other"})


def test_duplicates_and_unknown_names(session: Session) -> None:
    dictionary.add_variable(session, "age", {"type": "integer"})
    with pytest.raises(AlreadyExists, match="'age' already exists in table 'data'"):
        dictionary.add_variable(session, "age", {"type": "number"})
    with pytest.raises(NotFound, match="no variable 'agee'"):
        dictionary.get_variable(session, "agee")
    with pytest.raises(InvalidValue, match="leading or trailing"):
        dictionary.add_variable(session, " age", {"type": "number"})


def test_every_change_is_in_the_history_and_confirmed_needs_a_reason(session: Session) -> None:
    dictionary.add_variable(session, "income", {"type": "number", "unit": "EUR"})
    dictionary.update_variable(session, "income", {"unit": "USD"})  # a draft changes freely
    dictionary.confirm(session, "income", by="data owner")
    variable = dictionary.get_variable(session, "income")
    assert variable.confirmed_by == "data owner" and variable.confirmed_at
    with pytest.raises(InvalidValue, match="is confirmed; give --why"):
        dictionary.update_variable(session, "income", {"unit": "GBP"})
    question = Question(text="Which currency?", author="t", created_at="2026-01-01T00:00:00Z")
    session.add(question)
    session.flush()
    dictionary.update_variable(session, "income", {"unit": "GBP", "plausible_max": "1e6"},
                               why="the owner said so", question_id=question.id)
    with pytest.raises(NotFound, match="no question 999"):
        dictionary.update_variable(session, "income", {"unit": "EUR"}, why="x", question_id=999)
    changes = history.for_entity(session, "variable", variable.id)
    assert [c.action for c in changes] == ["create", "update", "confirm", "update", "update"]
    unit_changes = [(c.old, c.new, c.why) for c in changes if c.field == "unit"]
    assert unit_changes == [("EUR", "USD", None), ("USD", "GBP", "the owner said so")]
    assert all(c.author == "tester" for c in changes if c.action == "update")
    assert changes[-1].question_id == question.id
    # no change, no history row
    dictionary.update_variable(session, "income", {"unit": "GBP"})
    assert len(history.for_entity(session, "variable", variable.id)) == 5


def test_deprecate_and_rename_keep_everything(session: Session) -> None:
    dictionary.add_variable(session, "bmi_raw", {"type": "number"})
    dictionary.add_variable(session, "bmi_z", {"type": "number", "derived_from": "bmi_raw", "source": "derived"})
    dictionary.rename(session, "bmi_raw", "bmi", why="shorter name agreed")
    renamed = dictionary.get_variable(session, "bmi")
    assert renamed.aliases == ["bmi_raw"]
    assert dictionary.get_variable(session, "bmi_z").derived_from == ["bmi"]
    with pytest.raises(NotFound, match="renamed to 'bmi'"):
        dictionary.get_variable(session, "bmi_raw")
    with pytest.raises(InvalidValue, match="why"):
        dictionary.deprecate(session, "bmi_z", why=" ")
    dictionary.deprecate(session, "bmi_z", why="not used")
    assert session.scalar(select(func.count()).select_from(Variable)) == 2
    assert dictionary.get_variable(session, "bmi_z").status == "deprecated"
    with pytest.raises(InvalidValue, match="deprecated"):
        dictionary.confirm(session, "bmi_z")


def test_table_changes_are_recorded(session: Session) -> None:
    dictionary.add_table(session, "visits")
    table = dictionary.update_table(session, "visits", {"grain": "one row per visit", "key": "visit_id"})
    assert table.key == ["visit_id"]
    fields = [c.field for c in history.for_entity(session, "table", table.id)]
    assert fields == [None, "grain", "key"]
    dictionary.add_variable(session, "visit_id", {"type": "identifier", "status": "confirmed"}, table="visits")
    with pytest.raises(InvalidValue, match="confirmed variables; give --why"):
        dictionary.update_table(session, "visits", {"grain": "one row per visit and day"})


def test_table_spec_now_carries_codes_and_active_rules(session: Session) -> None:
    table = dictionary.add_table(session, "visits", key="visit_id")
    dictionary.add_variable(session, "visit_id", {"type": "identifier", "unique": True}, table="visits")
    dictionary.add_variable(session, "smoker", {
        "type": "categorical", "levels": "y=yes,n=no", "missing_codes": "-9=unknown",
    }, table="visits")
    for name, status in (("dates_in_order", "active"), ("old_rule", "retired")):
        session.add(Rule(table_id=table.id, name=name, expression="a <= b", severity="warning",
                         status=status, author="t", created_at="2026-01-01T00:00:00Z"))
    session.flush()
    spec = dictionary.table_spec(session)
    assert isinstance(spec, TableSpec)
    assert spec.key == ("visit_id",) and spec.version is None
    smoker = spec.variable("smoker")
    assert smoker is not None
    assert smoker.levels == (Code("y", "yes", None), Code("n", "no", None))
    assert smoker.missing_codes == (Code("-9", "unknown"),)
    assert [r.name for r in spec.rules] == ["dates_in_order"]


def test_table_spec_of_a_version_is_what_was_frozen(session: Session) -> None:
    from studylog import versions

    dictionary.add_variable(session, "age", {"type": "integer", "maximum": "120"})
    versions.freeze(session, "v1", note="agreed")
    dictionary.update_variable(session, "age", {"maximum": "110"})
    dictionary.add_variable(session, "sex", {"type": "categorical", "levels": "f,m"})
    old = dictionary.table_spec(session, version="v1")
    assert old.version == "v1"
    assert [v.name for v in old.variables] == ["age"]
    assert old.variables[0].maximum == "120"
    assert dictionary.table_spec(session).variable("age").maximum == "110"  # type: ignore[union-attr]
    with pytest.raises(NotFound, match="no dictionary version 'v9'"):
        dictionary.table_spec(session, version="v9")


def test_nothing_is_deleted_by_any_operation(session: Session) -> None:
    dictionary.add_variable(session, "a", {"type": "integer"})
    dictionary.add_variable(session, "b", {"type": "integer"})
    dictionary.deprecate(session, "a", why="gone")
    dictionary.rename(session, "b", "c", why="clearer")
    assert session.scalar(select(func.count()).select_from(Variable)) == 2
    assert session.scalar(select(func.count()).select_from(DataTable)) == 1
    assert session.scalar(select(func.count()).select_from(Change)) >= 5


def test_names_longer_than_the_store_holds_are_refused(study) -> None:  # type: ignore[no-untyped-def]
    import pytest

    from studylog import dictionary
    from studylog.errors import InvalidValue
    from studylog.store.session import locate, transaction

    with transaction(locate(), write=True) as session:
        with pytest.raises(InvalidValue, match="longer than 255"):
            dictionary.add_variable(session, "x" * 256, {"type": "text"})
        dictionary.add_variable(session, "y" * 255, {"type": "text"})
