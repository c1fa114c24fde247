"""Questions for experts: asking, answering, withdrawing; the packet in each format; answers read back."""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import func, select

from journal_fixtures import add_drop, add_var, tx
from studylog import packet, questions
from studylog.errors import InputFileError, InvalidValue, NotFound
from studylog.store.models import Change, Question


def _ask(text: str, **kw) -> int:  # type: ignore[no-untyped-def]
    with tx() as session:
        return questions.ask(session, text, **kw)["id"]


def test_ask_answer_withdraw_and_their_history(study: Path) -> None:
    add_var("income", type="number")
    first = _ask("Is -99 in income a refusal?", variables=["income"], to="data owner", priority="high")
    second = _ask("Which currency?", variables=["income"], to="data owner")
    with tx() as session:
        answered = questions.answer(session, first, "Yes: -99 is a refusal")
        withdrawn = questions.withdraw(session, second, "the unit is in the codebook")
    assert answered["status"] == "answered" and answered["answered_by"] == "data owner"
    assert answered["variables"] == ["income"]
    assert withdrawn["status"] == "withdrawn" and withdrawn["withdrawn_why"] == "the unit is in the codebook"
    with tx() as session:
        with pytest.raises(InvalidValue, match="withdrawn"):
            questions.answer(session, second, "late answer")
        with pytest.raises(InvalidValue):
            questions.withdraw(session, first, "answered already")
        with pytest.raises(InvalidValue):
            questions.withdraw(session, first, "")
        with pytest.raises(NotFound):
            questions.answer(session, 99, "x")
        with pytest.raises(InvalidValue):
            questions.ask(session, "x", priority="urgent")
        actions = [(c.action, c.field) for c in session.scalars(
            select(Change).where(Change.entity == "question", Change.entity_id == first).order_by(Change.id))]
    assert actions == [("create", None), ("answer", "answer"), ("answer", "answered_by"), ("answer", "status")]


def test_answer_by_someone_else_and_again(study: Path) -> None:
    q = _ask("What does code 7 mean?")
    with tx() as session:
        assert questions.answer(session, q, "unknown")["answered_by"] == "tester"
        again = questions.answer(session, q, "not recorded", by="Dr Rivera")
    assert (again["answer"], again["answered_by"]) == ("not recorded", "Dr Rivera")


def test_listing_by_status_and_person(study: Path) -> None:
    low = _ask("low one", to="Lab", priority="low")
    high = _ask("high one", to="lab", priority="high")
    other = _ask("for the field team", to="field team")
    with tx() as session:
        questions.answer(session, other, "done")
        open_for_lab = questions.list_questions(session, to="LAB")
        every = questions.list_questions(session, status="all")
        answered = questions.list_questions(session, status="answered")
        with pytest.raises(InvalidValue):
            questions.list_questions(session, status="closed")
    # highest priority first among open ones; the addressee matched without regard to case
    assert [q["id"] for q in open_for_lab] == [high, low]
    assert [q["id"] for q in every] == [low, high, other]
    assert [q["id"] for q in answered] == [other]


def test_status_lists_open_questions(study: Path) -> None:
    _ask("one", to="lab")
    closed = _ask("two", to="owner")
    with tx() as session:
        questions.withdraw(session, closed, "moot")
        [section] = questions.status_sections(session)
    assert section.name == "questions" and section.level == "todo"
    assert [i["text"] for i in section.items] == ["one"] and "lab" in section.summary


# ---- the packet ----

def _study_with_packet_material() -> dict[str, int]:
    add_var("age", label="Age at visit", description="Age in whole years", unit="years",
            missing_codes="-99=refused")
    add_var("smoker", type="categorical", label="Smoking status", levels="1=never,2=former,3=current")
    add_var("name", type="text", sensitivity="direct-identifier", label="Full name")
    add_var("postcode", type="categorical", sensitivity="quasi-identifier")
    add_drop({
        "age": {"type": "integer", "count": 95, "missing": 5, "missing_codes": [{"code": "-99", "count": 3}],
                "distinct": 60, "min": 18, "max": 97, "median": 54},
        "smoker": {"type": "categorical", "count": 100, "missing": 0, "distinct": 3,
                   "levels": [{"value": "1", "count": 70}, {"value": "2", "count": 28}, {"value": "3", "count": 2}]},
        "name": {"type": "text", "count": 100, "missing": 0, "distinct": 100,
                 "levels": [{"value": "Ada Lovelace", "count": 1}]},
        "postcode": {"type": "categorical", "count": 100, "missing": 0, "distinct": 2,
                     "levels": [{"value": "AB1", "count": 98}, {"value": "ZZ9", "count": 2}]},
    }, label="March", findings=[
        {"variable": "name", "rule": "pattern", "severity": "error", "count": 2, "rows": [4, 9],
         "keys": [], "values": ["Ada Lovelace", "Bob"], "message": "Ada Lovelace does not match"},
        {"variable": "age", "rule": "range", "severity": "error", "count": 3, "rows": [1, 2, 3],
         "keys": [], "values": ["-4", "-1", "130"], "message": "outside 0..120"},
    ])
    ids = {
        "age": _ask("Is -99 in age a refusal or unknown?", variables=["age"], to="data owner", priority="high"),
        "smoker": _ask("=HYPERLINK(\"http://x\") is code 3 current?", variables=["smoker", "age"], to="data owner"),
        "name": _ask("Why do some names fail the pattern?", variables=["name"], to="data owner"),
        "postcode": _ask("@Postcode: which vintage?", variables=["postcode"], to="data owner"),
        "general": _ask("+When was the extract taken?", to="data owner"),
        "lab": _ask("Which assay?", to="lab"),
    }
    return ids


def test_packet_groups_by_variable_with_its_facts(study: Path) -> None:
    ids = _study_with_packet_material()
    with tx() as session:
        content = packet.build(session, to="Data Owner")
    assert content["questions"] == 5
    groups = [g["variable"] for g in content["groups"]]
    assert groups == ["age", "smoker", "name", "postcode", None]
    age = content["groups"][0]
    assert (age["label"], age["unit"], age["missing_codes"]) == ("Age at visit", "years", ["-99=refused"])
    assert [q["id"] for q in age["questions"]] == [ids["age"]]
    view = age["last_drop"]
    # counts below 5 are withheld (the minimum cell size of 5 is common practice in statistical disclosure
    # control): 3 refusals, 3 range errors; 5 missing is shown
    assert view["missing"] == 5 and view["missing_codes"] == [{"code": "-99", "count": "<5"}]
    assert view["findings"][0]["count"] == "<5" and view["findings"][0]["values"] == ["-4", "-1", "130"]
    assert (view["min"], view["median"], view["max"]) == (18, 54, 97)
    smoker = content["groups"][1]
    assert smoker["levels"] == ["1=never", "2=former", "3=current"]
    assert smoker["questions"][0]["also_about"] == ["age"]
    assert smoker["last_drop"]["levels"][2] == {"value": "3", "count": "<5"}
    name = content["groups"][2]["last_drop"]
    assert name["values_masked"] is True and "levels" not in name
    assert name["findings"][0]["values"] == ["[masked]", "[masked]"] and name["findings"][0]["message"] is None
    postcode = content["groups"][3]["last_drop"]
    # a quasi-identifier's rare value and its extremes are withheld
    assert [lv["value"] for lv in postcode["levels"]] == ["AB1", "[masked]"]
    assert content["groups"][4]["title"] == packet.GENERAL


@pytest.mark.parametrize("fmt", ["md", "csv", "html"])
def test_packet_formats_are_masked_and_complete(study: Path, fmt: str) -> None:
    ids = _study_with_packet_material()
    with tx() as session:
        _content, text = packet.export(session, to="data owner", fmt=fmt)
    assert "Ada Lovelace" not in text and "ZZ9" not in text
    assert "Which assay?" not in text
    assert "Age at visit" in text and "-99=refused" in text
    assert ("&lt;5" if fmt == "html" else "<5") in text
    if fmt == "csv":
        rows = list(csv.DictReader(io.StringIO(text)))
        assert [int(r["id"]) for r in rows] == [ids["age"], ids["smoker"], ids["name"], ids["postcode"],
                                                ids["general"]]
        assert all(r["answer"] == "" for r in rows)
        assert rows[0]["variable"] == "age" and "3 rows" not in rows[0]["last_drop"]
    if fmt == "md":
        assert text.index("## age - Age at visit") < text.index("## smoker") < text.index("## General")
    if fmt == "html":
        assert "<style>" in text
        assert "=HYPERLINK(&#34;http://x&#34;)" in text or "=HYPERLINK(&quot;http://x&quot;)" in text


def test_html_packet_escapes_markup(study: Path) -> None:
    _ask("<script>alert(1)</script> & more?", to="x")
    with tx() as session:
        _content, text = packet.export(session, fmt="html")
    assert "<script>alert" not in text and "&lt;script&gt;" in text


def test_formula_cells_come_back_as_text(study: Path) -> None:
    """OWASP "CSV Injection": a cell starting with = + - @ is prefixed so a spreadsheet shows it as text."""
    ids = _study_with_packet_material()
    minus = _ask("-1 in age: a typo?", to="data owner")
    with tx() as session:
        _content, text = packet.export(session, to="data owner", fmt="csv")
    rows = {int(r["id"]): r for r in csv.DictReader(io.StringIO(text))}
    for key in ("smoker", "postcode", "general"):
        cell = rows[ids[key]]["question"]
        assert cell.startswith("'") and cell[1] in "=+-@"
    assert rows[minus]["question"] == "'-1 in age: a typo?"
    # read as data (here by pandas, as an analyst would) the cells are strings, never numbers or formulas
    import pandas as pd

    frame = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False)
    assert frame.loc[frame["id"] == str(minus), "question"].item() == "'-1 in age: a typo?"


def _fill(text: str, answers: dict[int, str], *, by: str = "") -> str:
    reader = csv.DictReader(io.StringIO(text))
    out = io.StringIO()
    writer = csv.DictWriter(out, fieldnames=reader.fieldnames or [])
    writer.writeheader()
    for row in reader:
        qid = int(row["id"])
        if qid in answers:
            row["answer"] = packet.safety.neutralise_cell(answers[qid])
            row["answered_by"] = by
        writer.writerow(row)
    return out.getvalue()


def test_answers_round_trip(study: Path, tmp_path: Path) -> None:
    ids = _study_with_packet_material()
    with tx() as session:
        _content, text = packet.export(session, to="data owner", fmt="csv")
    filled = tmp_path / "answers.csv"
    filled.write_text(_fill(text, {ids["age"]: "-99 is a refusal", ids["general"]: "=on 1 March"}, by="Dr Rivera"),
                      encoding="utf-8-sig")
    with tx() as session:
        result = questions.import_answers(session, str(filled))
    assert result["answered"] == [ids["age"], ids["general"]] and result["blank"] == 3
    with tx() as session:
        age = session.get(Question, ids["age"])
        general = session.get(Question, ids["general"])
        # the neutralised cells are restored
        assert (age.answer, age.answered_by, age.status) == ("-99 is a refusal", "Dr Rivera", "answered")
        assert general.answer == "=on 1 March"
    with tx() as session:
        again = questions.import_answers(session, str(filled))
    assert again["answered"] == [] and again["unchanged"] == [ids["age"], ids["general"]]


def _answers_state() -> list[tuple]:
    with tx() as session:
        return [(q.id, q.status, q.answer) for q in session.scalars(select(Question).order_by(Question.id))] + [
            ("changes", session.scalar(select(func.count(Change.id))))]


def test_an_unknown_id_changes_nothing_and_names_the_line(study: Path, tmp_path: Path) -> None:
    ids = _study_with_packet_material()
    with tx() as session:
        _content, text = packet.export(session, to="data owner", fmt="csv")
    filled = _fill(text, {ids["age"]: "a refusal", ids["smoker"]: "yes"})
    bad = tmp_path / "bad.csv"
    bad.write_text(filled.rstrip("\r\n") + "\r\n999,data owner,normal,made up,,,,,,,,,,an answer,\r\n")
    before = _answers_state()
    with pytest.raises(InputFileError, match=r"line 7: no question 999"):
        with tx() as session:
            questions.import_answers(session, str(bad))
    assert _answers_state() == before


def test_a_withdrawn_question_with_an_answer_is_refused(study: Path, tmp_path: Path) -> None:
    ids = _study_with_packet_material()
    with tx() as session:
        _content, text = packet.export(session, to="data owner", fmt="csv")
        questions.withdraw(session, ids["name"], "asked elsewhere")
    blank = tmp_path / "blank.csv"
    blank.write_text(_fill(text, {ids["age"]: "refusal"}))
    with tx() as session:
        assert questions.import_answers(session, str(blank))["answered"] == [ids["age"]]
    answered = tmp_path / "answered.csv"
    answered.write_text(_fill(text, {ids["smoker"]: "yes", ids["name"]: "typos"}))
    before = _answers_state()
    with pytest.raises(InputFileError, match=r"line 4: question \d+ was withdrawn"):
        with tx() as session:
            questions.import_answers(session, str(answered))
    assert _answers_state() == before


@pytest.mark.parametrize("content, message", [
    ("question,reply\n1,x\n", "no 'id' and 'answer' columns"),
    ("id,answer\nQ1,x\n", "line 2: the id 'Q1'"),
    ("id,answer\n1,yes\n1,no\n", "line 3: question 1 is answered differently"),
])
def test_malformed_answer_files(study: Path, tmp_path: Path, content: str, message: str) -> None:
    _ask("one")
    path = tmp_path / "f.csv"
    path.write_text(content)
    with pytest.raises(InputFileError, match=message):
        packet.read_answers(path)


def test_semicolon_csv_from_a_spreadsheet(study: Path, tmp_path: Path) -> None:
    q = _ask("one")
    path = tmp_path / "f.csv"
    path.write_text(f"id;question;answer\n{q};one;\"yes; it is\"\n", encoding="utf-8-sig")
    with tx() as session:
        questions.import_answers(session, str(path))
        assert session.get(Question, q).answer == "yes; it is"


ANSWER_TEXT = st.text(
    alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00"), min_size=1, max_size=60,
).filter(lambda t: t.strip() != "")


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(question=ANSWER_TEXT, answer=ANSWER_TEXT)
def test_any_question_and_answer_survive_the_packet(study: Path, tmp_path: Path, question: str,
                                                     answer: str) -> None:
    with tx() as session:
        qid = questions.ask(session, question, to="hypothesis")["id"]
        _content, text = packet.export(session, to="hypothesis", fmt="csv")
    rows = list(csv.DictReader(io.StringIO(text)))
    mine = [r for r in rows if int(r["id"]) == qid]
    assert packet.safety.restore_cell(mine[0]["question"]) == question.strip()
    assert not mine[0]["question"].startswith(("=", "+", "-", "@", "\t", "\r"))
    path = tmp_path / f"a{qid}.csv"
    path.write_text(_fill(text, {qid: answer}), encoding="utf-8-sig", newline="")
    with tx() as session:
        questions.import_answers(session, str(path))
        assert session.get(Question, qid).answer == answer.strip()


def test_an_answer_file_with_a_quote_left_open_is_refused(tmp_path) -> None:  # type: ignore[no-untyped-def]
    import pytest

    from studylog.errors import InputFileError
    from studylog.packet import read_answers

    path = tmp_path / "answers.csv"
    path.write_text('id,answer\n1,"fine"\n2,"never closed\n3,swallowed\n', encoding="utf-8")
    with pytest.raises(InputFileError) as caught:
        read_answers(path)
    assert caught.value.line == 3
