"""A drop end to end through the core: one pass, findings and profiles stored, nothing on bad input."""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import select

from studylog import dictionary, drops, rules
from studylog.errors import InputFileError
from studylog.store.models import Drop, Finding, Profile
from studylog.store.session import locate, transaction


@pytest.fixture
def store(study):  # type: ignore[no-untyped-def]
    with transaction(locate(), write=True) as session:
        dictionary.add_table(session, "visits", key="site,visit")
        dictionary.add_variable(session, "site", {"type": "identifier"}, table="visits")
        dictionary.add_variable(session, "visit", {"type": "integer"}, table="visits")
        dictionary.add_variable(session, "score", {"type": "number", "minimum": "0",
                                                   "missing_codes": [{"code": "-9"}]}, table="visits")
        dictionary.add_variable(session, "total", {"type": "number"}, table="visits")
        rules.add(session, "total-covers-score", "total >= score", table="visits")
    return study


DATA = ("site,visit,score,total\n"
        "A,1,3,5\n"
        "A,2,-1,5\n"
        "B,1,4,2\n"
        "A,1,-9,5\n"
        "B,2,,1\n"
        "A,2,7,9\n")


def test_tiny_batches_give_the_stored_drop_of_the_whole_file(store, tmp_path: Path) -> None:
    path = tmp_path / "visits.csv"
    path.write_text(DATA, encoding="utf-8")
    with transaction(locate(), write=True) as session:
        whole = drops.check_file(session, path, record=False)
        tiny = drops.check_file(session, path, batch_rows=1)
    assert [f.to_dict() for f in tiny.result.findings] == [f.to_dict() for f in whole.result.findings]
    with transaction(locate(), write=False) as session:
        drop = session.scalars(select(Drop)).one()
        assert (drop.rows, drop.columns, drop.errors, drop.warnings) == (6, 4, 3, 0)
        assert drop.columns_seen == ["site", "visit", "score", "total"]
        assert drop.dictionary_change is not None and drop.dictionary_version is None
        stored = {(f.variable, f.rule): f for f in session.scalars(select(Finding))}
        assert stored[("site,visit", "key")].rows == [4, 6]
        assert stored[("site,visit", "key")].keys == ["A|1", "A|2"]
        assert stored[("score", "range")].rows == [2]
        assert stored[(None, "total-covers-score")].rows == [3]
        profiles = {p.variable: p.data for p in session.scalars(select(Profile))}
        assert set(profiles) == {"site", "visit", "score", "total"}
        score = profiles["score"]
        # present values 3, -1, 4, 7 (the -9 code and the blank are missing): min -1, max 7, mean 3.25
        assert (score["rows"], score["count"], score["missing"]) == (6, 4, 2)
        assert (score["min"], score["max"], score["mean"]) == (-1, 7, 3.25)
        assert score["missing_codes"] == [{"code": "-9", "count": 1}]


def test_a_file_malformed_late_records_nothing(store, tmp_path: Path) -> None:
    path = tmp_path / "visits.csv"
    path.write_text(DATA + "C,1,2,3,4,5\n", encoding="utf-8")
    with pytest.raises(InputFileError):
        with transaction(locate(), write=True) as session:
            drops.check_file(session, path, batch_rows=1)
    with transaction(locate(), write=False) as session:
        assert list(session.scalars(select(Drop))) == []
        assert list(session.scalars(select(Finding))) == []


def test_status_section_without_drops_says_what_to_do(store) -> None:
    with transaction(locate(), write=False) as session:
        (section,) = drops.status_sections(session)
    assert section.level == "todo" and "studylog check" in section.summary
