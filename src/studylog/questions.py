"""Questions put to the people who know the data, and their answers.

A question is open until it is answered (by the expert, or read back from the packet they filled in) or
withdrawn. Every change is in the history; a dictionary change made because of an answer links to the
question through ``changes.question_id`` (``var set --question ID``).
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from studylog import history
from studylog.clock import author, now
from studylog.errors import InvalidValue, NotFound
from studylog.journal import choice, find_variable, find_variables, link, linked_variables, require_text
from studylog.store.models import Question

PRIORITIES = ("low", "normal", "high")
STATUSES = ("open", "answered", "withdrawn")
LIST_STATUSES = (*STATUSES, "all")
_PRIORITY_ORDER = {"high": 0, "normal": 1, "low": 2}


def get_question(session: Session, question_id: int) -> Question:
    question = session.get(Question, question_id)
    if question is None:
        raise NotFound(f"no question {question_id}")
    return question


def question_dicts(session: Session, questions: list[Question]) -> list[dict[str, Any]]:
    names = linked_variables(session, "question", [q.id for q in questions])
    return [
        {
            "id": q.id,
            "text": q.text,
            "variables": names.get(q.id, []),
            "to": q.to,
            "priority": q.priority,
            "status": q.status,
            "answer": q.answer,
            "answered_by": q.answered_by,
            "answered_at": q.answered_at,
            "withdrawn_why": q.withdrawn_why,
            "author": q.author,
            "created_at": q.created_at,
        }
        for q in questions
    ]


def question_dict(session: Session, question: Question) -> dict[str, Any]:
    return question_dicts(session, [question])[0]


def ask(session: Session, text: str, *, variables: list[str] | None = None, to: str | None = None,
        priority: str | None = None) -> dict[str, Any]:
    """Put a question to someone (the data owner, the lab, the field team); it stays open until answered."""
    text = require_text(text, "the question")
    priority = choice(priority or "normal", PRIORITIES, "priority")
    linked = find_variables(session, variables)
    stamp = now()
    question = Question(text=text, to=(to.strip() or None) if to else None, priority=priority,
                        status="open", author=author(), created_at=stamp)
    session.add(question)
    session.flush()
    link(session, "question", question.id, variables=linked)
    result = question_dict(session, question)
    history.record(session, "question", question.id, "create", new=result, at=stamp)
    return result


def _answer(session: Session, question: Question, text: str, by: str | None, why: str | None = None) -> bool:
    """Set the answer; False when it is the answer already recorded (a packet read in twice)."""
    if question.status == "withdrawn":
        raise InvalidValue(f"question {question.id} was withdrawn; it cannot be answered")
    by = (by or "").strip() or question.to or author()
    if question.status == "answered" and question.answer == text and question.answered_by == by:
        return False
    stamp = now()
    history.record(session, "question", question.id, "answer", field="answer", old=question.answer,
                   new=text, why=why, at=stamp)
    if question.answered_by != by:
        history.record(session, "question", question.id, "answer", field="answered_by",
                       old=question.answered_by, new=by, at=stamp)
    if question.status != "answered":
        history.record(session, "question", question.id, "answer", field="status", old=question.status,
                       new="answered", at=stamp)
    question.answer, question.answered_by, question.answered_at = text, by, stamp
    question.status = "answered"
    return True


def answer(session: Session, question_id: int, text: str, *, by: str | None = None) -> dict[str, Any]:
    """Record the answer to a question (``by`` defaults to the person it was put to, else the author)."""
    text = require_text(text, "the answer")
    question = get_question(session, question_id)
    _answer(session, question, text, by)
    return question_dict(session, question)


def withdraw(session: Session, question_id: int, why: str | None) -> dict[str, Any]:
    why = require_text(why, "--why (why the question is withdrawn)")
    question = get_question(session, question_id)
    if question.status != "open":
        raise InvalidValue(f"question {question_id} is {question.status}; only an open question can be withdrawn")
    history.record(session, "question", question.id, "withdraw", field="status", old=question.status,
                   new="withdrawn", why=why)
    question.status = "withdrawn"
    question.withdrawn_why = why
    return question_dict(session, question)


def list_questions(session: Session, *, status: str | None = "open", to: str | None = None,
                   variable: str | None = None) -> list[dict[str, Any]]:
    """Questions by status (``all`` for every one) and addressee (matched without regard to case)."""
    status = choice(status or "open", LIST_STATUSES, "status")
    query = select(Question)
    if status != "all":
        query = query.where(Question.status == status)
    if to:
        query = query.where(func.lower(Question.to) == to.strip().lower())
    if variable:
        from studylog.journal import ids_linked_to_variable

        ids = ids_linked_to_variable(session, "question", find_variable(session, variable))
        query = query.where(Question.id.in_(ids))
    found = list(session.scalars(query.order_by(Question.id)))
    if status == "open":
        found.sort(key=lambda q: (_PRIORITY_ORDER.get(q.priority, 1), q.id))
    return question_dicts(session, found)


def import_answers(session: Session, path: str, *, by: str | None = None) -> dict[str, Any]:
    """Read answers back from a filled-in CSV packet: all of them, or (on any bad line) none.

    A line naming an unknown question, or carrying an answer to a withdrawn one, is an error naming its
    line; the caller's transaction then writes nothing.
    """
    from studylog.errors import InputFileError
    from studylog.packet import read_answers

    rows = read_answers(path)
    checked: list[tuple[Question, str, str | None]] = []
    for row in rows:
        question = session.get(Question, row.question_id)
        if question is None:
            raise InputFileError(path, f"no question {row.question_id} in this study", row.line)
        if not row.answer:
            continue
        if question.status == "withdrawn":
            raise InputFileError(path, f"question {row.question_id} was withdrawn; it takes no answer",
                                 row.line)
        checked.append((question, row.answer, row.answered_by or by))
    answered = [q.id for q, text, who in checked if _answer(session, q, text, who, why=f"answer read from {path}")]
    return {
        "file": str(path),
        "rows": len(rows),
        "answered": answered,
        "unchanged": [q.id for q, _, _ in checked if q.id not in answered],
        "blank": len(rows) - len(checked),
    }


def status_sections(session: Session) -> list[Any]:
    from studylog.status import Section

    open_questions = list_questions(session, status="open")
    items = [{"id": q["id"], "to": q["to"] or "-", "priority": q["priority"], "text": q["text"]}
             for q in open_questions]
    people = sorted({q["to"] or "-" for q in open_questions})
    summary = f"{len(items)} open" + (f" (to {', '.join(people)})" if items else "")
    return [Section("questions", "Open questions", items, "todo" if items else "ok", summary)]
