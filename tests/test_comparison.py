"""Drops compared from the store: earlier drop, --against, record changes, orphans across two tables,
the analysed mark, and the drop history."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from studylog import comparison, dictionary
from studylog.clock import now
from studylog.data.check import check
from studylog.data.read import open_source
from studylog.data.summary import ColumnSummary
from studylog.errors import NotFound, UsageError
from studylog.store.models import DigestChunk, Drop, Profile
from studylog.store.session import locate, transaction


def record(path: Path, table: str, *, against: int | None = None, store: bool = True) -> comparison.Outcome:
    """What the check pipeline does around its one pass (studylog.drops), in miniature."""
    with transaction(locate(None), write=True) as session:
        owner = dictionary.resolve_table(session, table)
        spec = dictionary.table_spec(session, table)
        source = open_source(path, batch_rows=37)
        tracker = comparison.start(session, owner, spec, source.columns, against=against)
        summaries = {c: ColumnSummary(spec.variable(c), name=c) for c in source.columns}

        def summarise(context):  # type: ignore[no-untyped-def]
            for name, summary in summaries.items():
                summary.update(context.column(name))

        result = check(spec, source.columns, source.batches(), observers=[summarise, tracker.observe])
        profiles = {name: s.to_dict() for name, s in summaries.items()}
        drop = None
        if store:
            drop = Drop(table_id=owner.id, file_name=path.name, sha256="0" * 64, size=1,
                        rows=result.rows, columns=len(source.columns), columns_seen=source.columns,
                        checked_at=now(), author="tester")
            session.add(drop)
            session.flush()
            session.add_all(Profile(drop_id=drop.id, variable=k, data=v) for k, v in profiles.items())
        outcome = tracker.finish(session, drop, profiles)
        outcome.drop_id = drop.id if drop else None  # type: ignore[attr-defined]
        return outcome


@pytest.fixture
def two_tables(cli, study, tmp_path: Path):  # type: ignore[no-untyped-def]
    for args in (
        ("table", "add", "members", "--key", "member_id"),
        ("var", "add", "member_id", "--type", "identifier", "--table", "members"),
        ("var", "add", "age", "--type", "integer", "--table", "members", "--missing-codes", "-99"),
        ("table", "add", "visits", "--key", "site,visit"),
        ("var", "add", "site", "--type", "categorical", "--table", "visits", "--levels", "north,south,east"),
        ("var", "add", "visit", "--type", "integer", "--table", "visits"),
        ("var", "add", "member_id", "--type", "identifier", "--table", "visits",
         "--references", "members.member_id"),
        ("var", "add", "minutes", "--type", "number", "--table", "visits"),
    ):
        result = cli(*args)
        assert result.exit_code == 0, result.output
    return tmp_path


def members_file(folder: Path, name: str, ids: list[str], seed: int = 0) -> Path:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"member_id": ids, "age": rng.integers(18, 90, len(ids)).astype(str)})
    path = folder / name
    frame.to_csv(path, index=False)
    return path


def visits_frame(n: int, seed: int, shift: float = 0.0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "site": np.where(np.arange(n) % 2 == 0, "north", "south"),
        "visit": (np.arange(n) // 2).astype(str),
        "member_id": [f"M{i % 50:03d}" for i in range(n)],
        "minutes": np.round(rng.normal(30 + shift, 5, n), 2).astype(str),
    })


def test_first_drop_has_nothing_to_compare_and_second_is_compared(two_tables: Path) -> None:
    folder = two_tables
    members = [f"M{i:03d}" for i in range(50)]
    record(members_file(folder, "m1.csv", members), "members")
    first = visits_frame(400, 1)
    first.to_csv(folder / "v1.csv", index=False)
    outcome = record(folder / "v1.csv", "visits")
    assert outcome.against_id is None and outcome.drift == []
    assert outcome.records["against"] is None and outcome.records["new"] is None
    # planted: minutes drawn anew and shifted by 2 sd (every kept record changes), rows 11 and 12
    # vanish, 4 records of a new site arrive
    second = visits_frame(400, 2, shift=10.0)
    assert not (second["minutes"] == first["minutes"]).any()
    second = pd.concat([second.drop(index=[10, 11]),
                        pd.DataFrame({"site": ["east"] * 4, "visit": ["1", "2", "3", "4"],
                                      "member_id": ["M001"] * 4, "minutes": ["30"] * 4})])
    second.to_csv(folder / "v2.csv", index=False)
    later = record(folder / "v2.csv", "visits")
    assert later.against_id == outcome.drop_id
    records = later.records
    assert records["against"] == outcome.drop_id
    assert (records["new"], records["vanished"]) == (4, 2)
    assert records["changed"] == 398 and records["unchanged"] == 0
    assert records["changed_columns"] == {"minutes": 398}
    assert records["changed_examples"][0] == {"row": 1, "key": "north|0", "columns": ["minutes"]}
    assert [e["key"] for e in records["new_examples"]] == ["east|1", "east|2", "east|3", "east|4"]
    assert [e["key"] for e in records["vanished_examples"]] == ["north|5", "south|5"]
    assert records["vanished_examples"][0]["row"] == 11  # a row of the earlier drop
    by_name = {d["variable"]: d for d in later.drift}
    assert by_name["minutes"]["band"] == "shifted"
    assert by_name["site"]["new_levels"] == ["east"]
    assert by_name["site"]["n_earlier"] == 400 and by_name["site"]["n_later"] == 402
    with transaction(locate(None), write=False) as session:
        stored = session.get(Drop, later.drop_id)
        assert stored.against_id == outcome.drop_id
        assert stored.comparison["records"]["new"] == 4
        assert stored.comparison["drift"][0]["measure"] == "psi"
        kinds = [c.kind for c in session.query(DigestChunk).filter_by(drop_id=later.drop_id)]
        assert sorted(kinds) == ["columns", "keys", "meta", "records"]


def test_against_names_the_earlier_drop(two_tables: Path) -> None:
    folder = two_tables
    record(members_file(folder, "m1.csv", [f"M{i:03d}" for i in range(50)]), "members")
    frames = [visits_frame(100, 1), visits_frame(100, 1, shift=20.0), visits_frame(100, 1)]
    ids = []
    for i, frame in enumerate(frames):
        frame.to_csv(folder / f"v{i}.csv", index=False)
        ids.append(record(folder / f"v{i}.csv", "visits").drop_id)
    # against its predecessor the third drop has all minutes changed; against the first, none
    again = record(folder / "v2.csv", "visits", against=ids[0], store=False)
    assert again.against_id == ids[0] and again.records["changed"] == 0
    assert {d["variable"]: d["value"] for d in again.drift}["minutes"] == pytest.approx(0.0)
    with pytest.raises(UsageError, match="another table"):
        record(folder / "v2.csv", "visits", against=1, store=False)
    with pytest.raises(NotFound):
        record(folder / "v2.csv", "visits", against=999, store=False)


def test_orphans_across_two_tables(two_tables: Path) -> None:
    folder = two_tables
    visits = visits_frame(60, 3)
    visits.loc[[4, 9], "member_id"] = ["M900", "M901"]
    visits.to_csv(folder / "v.csv", index=False)
    # no drop of members yet: the check says so instead of guessing
    before = record(folder / "v.csv", "visits", store=False)
    assert [(f.rule, f.severity) for f in before.findings] == [("orphan", "info")]
    assert "no recorded drop" in before.findings[0].message
    record(members_file(folder, "m.csv", [f"M{i:03d}" for i in range(40)]), "members")
    outcome = record(folder / "v.csv", "visits", store=False)
    orphan = [f for f in outcome.findings if f.rule == "orphan"]
    assert len(orphan) == 1 and orphan[0].severity == "error"
    # members M040..M049 are not in the members drop (rows 41-50, 91-100 ...), plus the two planted
    expected = [i for i in range(60) if i in (4, 9) or 40 <= i % 50 < 50]
    assert orphan[0].count == len(expected)
    assert list(orphan[0].rows) == [i + 1 for i in expected][:20]
    assert orphan[0].keys[0] == f"{visits.site[4]}|{visits.visit[4]}"
    assert orphan[0].values[:2] == ("M900", "M901")


def test_analysed_mark_moves_and_history(two_tables: Path) -> None:
    folder = two_tables
    first = record(members_file(folder, "m1.csv", ["M1", "M2"]), "members").drop_id
    second = record(members_file(folder, "m2.csv", ["M1", "M2", "M3"]), "members").drop_id
    with transaction(locate(None), write=True) as session:
        assert comparison.mark_analysed(session, session.get(Drop, first)) == []
        assert comparison.mark_analysed(session, session.get(Drop, second)) == [first]
    with transaction(locate(None), write=False) as session:
        listed = comparison.list_drops(session, "members")
        assert [(d["id"], d["analysis"]) for d in listed] == [(first, False), (second, True)]
        assert listed[1]["records"]["new"] == 1
        shown = comparison.show_drop(session, second)
        assert shown["comparison"]["against"] == first
        assert {p["name"] for p in shown["profile"]} == {"member_id", "age"}
        between = comparison.drift_between(session)
        assert between["earlier"]["id"] == first and between["later"]["id"] == second
        assert between["records"]["new"] == 1 and between["records"]["vanished"] == 0
        sections = comparison.drop_sections(session)
        assert sections[0].items[0]["analysed_drop"] == second
    assert os.environ["STUDYLOG_STORE"]
