"""The demo end to end: its findings are exactly the faults the scenario's generator planted."""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import select

from studylog.cli.demo import build
from studylog.examples import bikeshare
from studylog.store.models import Decision, Drop, Finding
from studylog.store.session import StoreLocation, transaction


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("demo") / "study"
    build(folder, quiet=True)
    return folder


def _location(folder: Path) -> StoreLocation:
    path = folder / "studylog.db"
    return StoreLocation(f"sqlite:///{path}", path)


def _findings(folder: Path, table_file: str) -> tuple[Drop, dict[tuple[str, str | None], int]]:
    with transaction(_location(folder), write=False) as session:
        drop = session.scalars(select(Drop).where(Drop.file_name == table_file)).one()
        found = {(f.rule, f.variable): f.count
                 for f in session.scalars(select(Finding).where(Finding.drop_id == drop.id))}
        return drop, found


def test_second_drops_find_exactly_what_was_planted(demo_folder: Path, tmp_path: Path) -> None:
    planted = bikeshare.write_drops(tmp_path / "again")  # same seed: the same faults
    for table, file in (("members", "members-2026-02.csv"), ("rides", "rides-2026-02.csv")):
        _drop, found = _findings(demo_folder, file)
        expected = {(rule, variable): count
                    for rule, by_variable in planted.faults[table].items()
                    for variable, count in by_variable.items()}
        assert found == expected, table


def test_first_drops_are_clean_and_record_changes_equal_the_planted_ones(demo_folder: Path) -> None:
    planted = bikeshare.write_drops(demo_folder / "again")
    for table in ("members", "rides"):
        first, found = _findings(demo_folder, f"{table}-2026-01.csv")
        assert found == {}, table
        second, _ = _findings(demo_folder, f"{table}-2026-02.csv")
        records = second.comparison["records"]
        assert records["against"] == first.id
        assert {k: records[k] for k in ("new", "vanished", "changed")} == planted.records[table]


def test_the_shifted_distribution_is_shifted_and_the_analysed_set_is_marked(demo_folder: Path) -> None:
    rides, _ = _findings(demo_folder, "rides-2026-02.csv")
    bands = {d["variable"]: d["band"] for d in rides.comparison["drift"]}
    assert bands["duration_min"] == "shifted"
    assert bands["bike_type"] == "stable"
    analysed, found = _findings(demo_folder, "members-analysed.csv")
    assert analysed.analysis is True
    assert found == {}


def test_every_report_exists_and_names_the_decisions(demo_folder: Path) -> None:
    reports = demo_folder / "reports"
    for kind in ("dictionary", "methods", "validity", "conclusions", "questions", "writeup"):
        for fmt in ("md", "html"):
            assert (reports / f"{kind}.{fmt}").stat().st_size > 500, (kind, fmt)
    with transaction(_location(demo_folder), write=False) as session:
        in_force = [d for d in session.scalars(select(Decision)) if d.status in ("adopted", "implemented")]
    methods = (reports / "methods.md").read_text(encoding="utf-8")
    for decision in in_force:
        assert decision.text in methods
    assert (demo_folder / "packets" / "membership-office.csv").exists()
    assert (reports / "dictionary.csvw.json").exists()


def test_the_demo_refuses_a_folder_that_is_not_empty(tmp_path: Path, cli) -> None:  # type: ignore[no-untyped-def]
    (tmp_path / "busy").mkdir()
    (tmp_path / "busy" / "notes.txt").write_text("mine")
    result = cli("demo", str(tmp_path / "busy"))
    assert result.exit_code == 2
    assert "not empty" in result.stderr
