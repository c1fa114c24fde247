"""The audited redaction of personal data pasted into the journal by mistake.

The record's free text (or only the pieces named) is replaced by ``[redacted]`` in the record and in every
earlier change row of that record, reasons included (and, for a question, in the changes its answer
caused); a ``redact`` change keeps that a redaction happened, by whom, why and of which fields, never what
was removed. Nothing else is ever removed from the store.

Replacing a value is not enough to make it gone from a SQLite file: the old bytes stay in free space of
the page, in pages put on the free list, and in frames of the write-ahead log. So the redaction runs with
``PRAGMA secure_delete=ON`` (freed content is overwritten with zeros), and after it commits the store is
rebuilt with ``VACUUM`` (which cannot run inside a transaction) and the log is checkpointed and truncated
(``PRAGMA wal_checkpoint(TRUNCATE)``). If another process holds the store open, the checkpoint may not
finish; the result says so. Backup copies made earlier are separate files: the result lists them.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from studylog import history
from studylog.errors import InvalidValue, NotFound
from studylog.journal import require_text
from studylog.store.models import Change, Decision, Entry, Question, Threat
from studylog.store.session import StoreLocation, engine_for, transaction

REDACTED = "[redacted]"
# kind on the command line -> (model, entity in the history, its free-text fields)
REDACTABLE: dict[str, tuple[type, str, tuple[str, ...]]] = {
    "decision": (Decision, "decision", ("text", "why", "evidence", "alternatives")),
    "question": (Question, "question", ("text", "answer", "withdrawn_why")),
    "threat": (Threat, "threat", ("text", "mitigation")),
    "note": (Entry, "entry", ("text",)),
    "conclusion": (Entry, "entry", ("text",)),
    "next": (Entry, "entry", ("text",)),
    "entry": (Entry, "entry", ("text",)),
}


def _scrub(value: Any, texts: list[str]) -> Any:
    """``value`` with every occurrence of the texts replaced, through nested JSON."""
    if isinstance(value, str):
        for text in texts:
            if text in value:
                value = value.replace(text, REDACTED)
        return value
    if isinstance(value, list):
        return [_scrub(v, texts) for v in value]
    if isinstance(value, dict):
        return {k: _scrub(v, texts) for k, v in value.items()}
    return value


def _scrub_fields(value: Any, fields: tuple[str, ...]) -> Any:
    if isinstance(value, dict):
        return {k: (REDACTED if k in fields and v is not None else v) for k, v in value.items()}
    return value


def redact_in(session: Session, kind: str, record_id: int, why: str | None,
              texts: list[str] | None = None) -> dict[str, Any]:
    """Redact a record inside the open transaction.

    Without ``texts``: every free-text field of the record and the reasons given for its earlier changes
    are replaced. With ``texts``: only those pieces (a name, a number) are replaced, wherever they appear
    in the record and its history.
    """
    why = require_text(why, "--why (why the text is redacted)")
    if kind not in REDACTABLE:
        raise InvalidValue(f"cannot redact a {kind!r}; one of: {', '.join(REDACTABLE)}")
    model, entity, text_fields = REDACTABLE[kind]
    record = session.get(model, record_id)
    if record is None or (model is Entry and kind != "entry" and record.kind != kind):
        raise NotFound(f"no {kind} {record_id}")
    pieces = [t for t in (texts or []) if t and t.strip()]
    whole = not pieces
    if whole:
        pieces = [getattr(record, f) for f in text_fields if getattr(record, f) not in (None, "", REDACTED)]
        if not pieces:
            raise InvalidValue(f"{kind} {record_id} has no text left to redact")
    # the longest first, so that a text containing another is replaced whole
    pieces.sort(key=len, reverse=True)
    if session.get_bind().dialect.name == "sqlite":
        # overwrite freed content with zeros rather than leave it in the page's free space
        session.connection().exec_driver_sql("PRAGMA secure_delete = ON")
    fields: list[str] = []
    for field in text_fields:
        value = getattr(record, field)
        if value in (None, "", REDACTED):
            continue
        replaced = REDACTED if whole else _scrub(value, pieces)
        if replaced != value:
            setattr(record, field, replaced)
            fields.append(field)
    scope = [(Change.entity == entity) & (Change.entity_id == record_id)]
    if entity == "question":
        scope.append(Change.question_id == record_id)
    scrubbed = 0
    for change in session.scalars(select(Change).where(or_(*scope)).order_by(Change.id)):
        if change.action == "redact":
            continue
        own = change.entity == entity and change.entity_id == record_id
        old, new, reason = change.old, change.new, change.why
        if whole and own:
            if change.field in text_fields:
                old = REDACTED if old is not None else None
                new = REDACTED if new is not None else None
            old, new = _scrub_fields(old, text_fields), _scrub_fields(new, text_fields)
            reason = REDACTED if reason else reason
        if own:
            old, new = _scrub(old, pieces), _scrub(new, pieces)
        # a dictionary change caused by the answer keeps its values (they are the dictionary's, and are
        # redacted there if need be); the reason given for it may quote the answer
        reason = _scrub(reason, pieces)
        if (old, new, reason) != (change.old, change.new, change.why):
            change.old, change.new, change.why = old, new, reason
            scrubbed += 1
    if not fields and not scrubbed:
        raise InvalidValue(f"the text to redact does not appear in {kind} {record_id} or its history")
    history.record(session, entity, record_id, "redact", field=",".join(fields) or None, why=why)
    return {"kind": kind, "id": record_id, "fields": fields, "changes_scrubbed": scrubbed}


def purge(location: StoreLocation) -> dict[str, Any]:
    """Make replaced text gone from the SQLite file and its write-ahead log (run after the commit)."""
    if not location.is_sqlite or location.path is None:
        return {"vacuumed": False, "checkpointed": False, "backups": []}
    import sqlite3

    result: dict[str, Any] = {"vacuumed": False, "checkpointed": False}
    raw = engine_for(location).raw_connection()
    try:
        cursor = raw.cursor()
        cursor.execute("PRAGMA secure_delete = ON")
        try:
            cursor.execute("VACUUM")
            result["vacuumed"] = True
            busy, _log, _done = cursor.execute("PRAGMA wal_checkpoint(TRUNCATE)").fetchone()
            result["checkpointed"] = busy == 0
        except sqlite3.Error as exc:  # another process holds the store past the busy timeout
            result["problem"] = str(exc)
        cursor.close()
    finally:
        raw.close()
    folder = location.path.parent
    result["backups"] = sorted(str(p) for p in folder.glob(location.path.name + ".*.bak"))
    return result


def redact(location: StoreLocation, kind: str, record_id: int, why: str | None,
           texts: list[str] | None = None) -> dict[str, Any]:
    """The whole redaction: replace the text in one transaction, then purge it from the file."""
    with transaction(location, write=True) as session:
        result = redact_in(session, kind, record_id, why, texts)
    result.update(purge(location))
    return result
