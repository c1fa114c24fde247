"""The context the templates receive: complete, JSON-able, and already safe."""

from __future__ import annotations

import json
from pathlib import Path

from report_study import AGE_MAX, AGE_MIN, MEMBER_ID_VALUE, SECRET_LEVEL, build_in_store
from studylog import journal, report, report_context
from studylog.store.models import Decision
from studylog.store.session import locate, transaction


def _context(document: str, **options) -> dict:  # type: ignore[no-untyped-def]
    with transaction(locate(), write=False) as session:
        return report.context(session, document, **options)


def test_every_journal_kind_has_a_methods_section() -> None:
    placed = [kind for _, _, kinds in report_context.METHOD_SECTIONS for kind in kinds]
    assert sorted(placed) == sorted(journal.KINDS)
    assert len(placed) == len(set(placed))


def test_the_writeup_context_is_json_and_holds_nothing_private(study: Path) -> None:
    build_in_store()
    text = json.dumps(_context("writeup"), ensure_ascii=False)
    for private in (SECRET_LEVEL, MEMBER_ID_VALUE, "987123", "Mr Example", '"min": 17', '"max": 103'):
        assert private not in text
    # the quasi-identifier's extremes are neither in its summary nor in its chart
    context = _context("dictionary")
    members = context["dictionary"]["tables"][0]
    age = next(v for g in members["groups"] for v in g["variables"] if v["name"] == "age")
    assert "min" not in [s["name"] for s in age["profile"]["summary"]]
    assert f">{AGE_MIN}<" not in age["profile"]["chart"] and f">{AGE_MAX}<" not in age["profile"]["chart"]


def test_record_flow_and_small_counts(study: Path) -> None:
    ids = build_in_store().ids
    methods = _context("methods")["methods"]
    (flow,) = methods["flows"]
    assert flow["table"] == "visits" and flow["drop"]["id"] == ids["drop3"]
    assert flow["received"] == 1250 and flow["analysed"] == 1250 - 40 - 3
    assert [(s["ref"], s["removed"]) for s in flow["steps"]] == [(f"D{ids['d3']}", 40),
                                                                 (f"D{ids['d4']}", "<5")]
    # steps of the flow are not told again in the sections
    in_sections = {d["id"] for s in methods["sections"] for d in s["decisions"]}
    assert ids["d3"] not in in_sections and ids["d1"] in in_sections
    drops = {d["id"]: d for d in methods["drops"]}
    assert drops[ids["drop3"]]["records"] == {"new": 52, "vanished": "<5", "changed": 40}
    assert drops[ids["drop1"]]["records"] is None
    age_finding = drops[ids["drop1"]]["findings"][0]
    assert age_finding["count"] == "<5" and "values outside" in age_finding["message"]
    diagnosis = next(f for f in drops[ids["drop2"]]["findings"] if f["variable"] == "diagnosis")
    assert diagnosis["message"] == "values not among the declared levels"  # the message named a value
    income = next(f for f in drops[ids["drop2"]]["findings"] if f["variable"] == "income")
    assert income["resolved_by"] == [ids["d2"]]  # D2 names income and drop 2


def test_post_hoc_follows_the_plan_freeze_when_the_flag_is_missing(study: Path) -> None:
    ids = build_in_store().ids
    with transaction(locate(), write=True) as session:
        # a decision taken after the freeze (2026-03-10) whose flag was never set is still post hoc
        late = session.get(Decision, ids["d10"])
        assert late is not None
        late.post_hoc = False
        early = session.get(Decision, ids["d5"])
        assert early is not None and not early.post_hoc
    sections = _context("methods")["methods"]["sections"]
    by_id = {d["id"]: d for s in sections for d in s["decisions"]}
    assert by_id[ids["d10"]]["post_hoc"] is True and by_id[ids["d5"]]["post_hoc"] is False


def test_conclusions_link_threats_through_variables_and_decisions(study: Path) -> None:
    ids = build_in_store().ids
    conclusions = _context("conclusions")["conclusions"]
    by_id = {c["id"]: c for c in conclusions["conclusions"]}
    bp = [t["ref"] for t in by_id[ids["conclusion_bp"]]["threats"]]
    # T3 names systolic_bp; T4 names D10, which is about systolic_bp
    assert bp == [f"T{ids['t3']}", f"T{ids['t4']}"]
    assert [t["ref"] for t in by_id[ids["conclusion_income"]]["threats"]] == [f"T{ids['t1']}"]
    assert [t["ref"] for t in conclusions["study_wide_threats"]] == [f"T{ids['t2']}"]
