"""The store's typed models (SQLAlchemy 2.x declarative).

Portable by construction: no SQLite-only SQL, JSON through SQLAlchemy's JSON type, timestamps as ISO-8601
UTC text (sortable, stable in dumps, identical on SQLite and PostgreSQL). Nothing here is deleted by the
program: entries change status, and every change is a row in ``changes``.

The schema these models describe must equal the one the migrations build; a test compares them, and
``tests/store/test_models_ddl.py`` pins the DDL.

Every command imports this module, so its declaration cost is paid on each start. The annotations are
therefore evaluated by Python as the classes are made (no ``from __future__ import annotations``): with
string annotations SQLAlchemy would ``eval`` each of the ~180 again, which cost a fifth of this module's
import time. Forward references (the two relationships) are quoted.

Each model has a registry of its own (DataTable and Variable, which are related, share one), all on the
one ``Base.metadata``: SQLAlchemy configures every mapper of a registry when the first of them is used,
and with a single registry a command that writes one decision configured all 16 models. A new model
gets its own ``_XRegistry`` base the same way.
"""


from typing import Any

from sqlalchemy import (
    JSON,
    Boolean,
    Float,
    ForeignKey,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, registry, relationship

Json = dict[str, Any] | list[Any] | None
TYPE_MAP: dict[Any, Any] = {dict[str, Any]: JSON, list[Any]: JSON}


class Base(DeclarativeBase):
    """What every model is; ``Base.metadata`` holds every table."""

    registry = registry(metadata=MetaData(), type_annotation_map=TYPE_MAP)


def _registry() -> registry:
    return registry(metadata=Base.metadata, type_annotation_map=TYPE_MAP)


class _MetaRegistry(Base, DeclarativeBase):
    registry = _registry()


class Meta(_MetaRegistry):
    """Key/value facts about the store itself; ``schema_version`` lives here."""

    __tablename__ = "studylog_meta"
    key: Mapped[str] = mapped_column(String(64), primary_key=True)
    value: Mapped[str] = mapped_column(Text)


class _StudyRegistry(Base, DeclarativeBase):
    registry = _registry()


class Study(_StudyRegistry):
    __tablename__ = "study"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    title: Mapped[str] = mapped_column(Text, default="")
    description: Mapped[str | None] = mapped_column(Text)
    target: Mapped[str | None] = mapped_column(String(255))
    index_time: Mapped[str | None] = mapped_column(Text)
    plan_frozen_at: Mapped[str | None] = mapped_column(String(40))
    plan_note: Mapped[str | None] = mapped_column(Text)
    created_at: Mapped[str] = mapped_column(String(40))
    author: Mapped[str] = mapped_column(String(255))


class _DictionaryRegistry(Base, DeclarativeBase):
    # DataTable and Variable: one registry, since they are related
    registry = _registry()


class DataTable(_DictionaryRegistry):
    """A table of the study (members, visits, ...): its grain and its key."""

    __tablename__ = "data_tables"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(255), unique=True)
    description: Mapped[str | None] = mapped_column(Text)
    grain: Mapped[str | None] = mapped_column(Text)
    key: Mapped[list[Any]] = mapped_column(JSON, default=list)
    created_at: Mapped[str] = mapped_column(String(40))
    updated_at: Mapped[str] = mapped_column(String(40))
    author: Mapped[str] = mapped_column(String(255))

    variables: Mapped[list["Variable"]] = relationship(
        back_populates="table", order_by="Variable.position"
    )


class Variable(_DictionaryRegistry):
    """One entry of the data dictionary: a column of a table and everything known about it."""

    __tablename__ = "variables"
    __table_args__ = (UniqueConstraint("table_id", "name"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    table_id: Mapped[int] = mapped_column(ForeignKey("data_tables.id"), index=True)
    position: Mapped[int] = mapped_column(Integer, default=0)
    name: Mapped[str] = mapped_column(String(255))
    aliases: Mapped[list[Any]] = mapped_column(JSON, default=list)
    label: Mapped[str | None] = mapped_column(Text)
    description: Mapped[str | None] = mapped_column(Text)
    type: Mapped[str] = mapped_column(String(32))
    unit: Mapped[str | None] = mapped_column(String(255))
    precision: Mapped[int | None] = mapped_column(Integer)
    source: Mapped[str | None] = mapped_column(String(32))
    source_detail: Mapped[str | None] = mapped_column(Text)
    instrument: Mapped[str | None] = mapped_column(Text)
    question_text: Mapped[str | None] = mapped_column(Text)
    derivation: Mapped[str | None] = mapped_column(Text)
    derived_from: Mapped[list[Any]] = mapped_column(JSON, default=list)
    time_association: Mapped[str | None] = mapped_column(Text)
    availability: Mapped[str | None] = mapped_column(String(16))
    role: Mapped[str] = mapped_column(String(32), default="input")
    # [{"code": "1", "label": "low", "order": 1}, ...] in their declared order
    levels: Mapped[list[Any]] = mapped_column(JSON, default=list)
    true_values: Mapped[list[Any]] = mapped_column(JSON, default=list)
    false_values: Mapped[list[Any]] = mapped_column(JSON, default=list)
    # ranges keep the user's text (numbers, dates or datetimes); the checker parses them by type
    minimum: Mapped[str | None] = mapped_column(String(64))
    maximum: Mapped[str | None] = mapped_column(String(64))
    plausible_min: Mapped[str | None] = mapped_column(String(64))
    plausible_max: Mapped[str | None] = mapped_column(String(64))
    # [{"code": "-99", "label": "refused"}, ...]
    missing_codes: Mapped[list[Any]] = mapped_column(JSON, default=list)
    max_missing: Mapped[float | None] = mapped_column(Float)
    required: Mapped[bool] = mapped_column(Boolean, default=False)
    unique: Mapped[bool] = mapped_column(Boolean, default=False)
    pattern: Mapped[str | None] = mapped_column(Text)
    date_format: Mapped[str | None] = mapped_column(String(64))
    timezone: Mapped[str | None] = mapped_column(String(64))
    references: Mapped[str | None] = mapped_column(String(511))
    sensitivity: Mapped[str] = mapped_column(String(32), default="none")
    status: Mapped[str] = mapped_column(String(16), default="draft")
    confirmed_by: Mapped[str | None] = mapped_column(String(255))
    confirmed_at: Mapped[str | None] = mapped_column(String(40))
    created_at: Mapped[str] = mapped_column(String(40))
    updated_at: Mapped[str] = mapped_column(String(40))
    author: Mapped[str] = mapped_column(String(255))

    table: Mapped["DataTable"] = relationship(back_populates="variables")


class _ChangeRegistry(Base, DeclarativeBase):
    registry = _registry()


class Change(_ChangeRegistry):
    """One change to any record: the history that every entry, decision, question and threat keeps."""

    __tablename__ = "changes"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    # variable, table, study, rule, decision, question, threat, entry, version
    entity: Mapped[str] = mapped_column(String(32), index=True)
    entity_id: Mapped[int] = mapped_column(Integer, index=True)
    # create, update, rename, confirm, deprecate, answer, withdraw, supersede, revert, redact, ...
    action: Mapped[str] = mapped_column(String(32))
    field: Mapped[str | None] = mapped_column(String(64))
    old: Mapped[Any] = mapped_column(JSON, nullable=True)
    new: Mapped[Any] = mapped_column(JSON, nullable=True)
    why: Mapped[str | None] = mapped_column(Text)
    question_id: Mapped[int | None] = mapped_column(ForeignKey("questions.id"))
    author: Mapped[str] = mapped_column(String(255))
    at: Mapped[str] = mapped_column(String(40), index=True)


class _DictionaryVersionRegistry(Base, DeclarativeBase):
    registry = _registry()


class DictionaryVersion(_DictionaryVersionRegistry):
    """A named, frozen copy of the whole dictionary."""

    __tablename__ = "dictionary_versions"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(255), unique=True)
    note: Mapped[str | None] = mapped_column(Text)
    # the last change id in force when it was frozen
    change_id: Mapped[int | None] = mapped_column(Integer)
    snapshot: Mapped[dict[str, Any]] = mapped_column(JSON)
    author: Mapped[str] = mapped_column(String(255))
    created_at: Mapped[str] = mapped_column(String(40))


class _RuleRegistry(Base, DeclarativeBase):
    registry = _registry()


class Rule(_RuleRegistry):
    """A cross-field rule in studylog's expression language, checked on every drop of its table."""

    __tablename__ = "rules"
    __table_args__ = (UniqueConstraint("table_id", "name"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    table_id: Mapped[int] = mapped_column(ForeignKey("data_tables.id"), index=True)
    name: Mapped[str] = mapped_column(String(255))
    expression: Mapped[str] = mapped_column(Text)
    severity: Mapped[str] = mapped_column(String(16), default="error")
    why: Mapped[str | None] = mapped_column(Text)
    status: Mapped[str] = mapped_column(String(16), default="active")
    author: Mapped[str] = mapped_column(String(255))
    created_at: Mapped[str] = mapped_column(String(40))


class _DropRegistry(Base, DeclarativeBase):
    registry = _registry()


class Drop(_DropRegistry):
    """One delivery of a table's data, as checked against the dictionary."""

    __tablename__ = "drops"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    table_id: Mapped[int] = mapped_column(ForeignKey("data_tables.id"), index=True)
    label: Mapped[str | None] = mapped_column(Text)
    file_name: Mapped[str] = mapped_column(Text)
    sha256: Mapped[str] = mapped_column(String(64), index=True)
    size: Mapped[int] = mapped_column(Integer)
    rows: Mapped[int] = mapped_column(Integer)
    columns: Mapped[int] = mapped_column(Integer)
    columns_seen: Mapped[list[Any]] = mapped_column(JSON, default=list)
    dictionary_version: Mapped[str | None] = mapped_column(String(255))
    dictionary_change: Mapped[int | None] = mapped_column(Integer)
    errors: Mapped[int] = mapped_column(Integer, default=0)
    warnings: Mapped[int] = mapped_column(Integer, default=0)
    analysis: Mapped[bool] = mapped_column(Boolean, default=False)
    against_id: Mapped[int | None] = mapped_column(ForeignKey("drops.id"))
    # comparison with the earlier drop: {"drift": [...], "records": {...}}
    comparison: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    checked_at: Mapped[str] = mapped_column(String(40))
    author: Mapped[str] = mapped_column(String(255))


class _FindingRegistry(Base, DeclarativeBase):
    registry = _registry()


class Finding(_FindingRegistry):
    __tablename__ = "findings"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    drop_id: Mapped[int] = mapped_column(ForeignKey("drops.id"), index=True)
    variable: Mapped[str | None] = mapped_column(String(255))
    rule: Mapped[str] = mapped_column(String(255))
    severity: Mapped[str] = mapped_column(String(16))
    count: Mapped[int] = mapped_column(Integer)
    rows: Mapped[list[Any]] = mapped_column(JSON, default=list)
    keys: Mapped[list[Any]] = mapped_column(JSON, default=list)
    # raw values at those rows, already masked for direct-identifier and sensitive variables
    values: Mapped[list[Any]] = mapped_column(JSON, default=list)
    message: Mapped[str] = mapped_column(Text)


class _ProfileRegistry(Base, DeclarativeBase):
    registry = _registry()


class Profile(_ProfileRegistry):
    """The stored profile of one variable in one drop; drift is computed from these, never the file."""

    __tablename__ = "profiles"
    __table_args__ = (UniqueConstraint("drop_id", "variable"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    drop_id: Mapped[int] = mapped_column(ForeignKey("drops.id"), index=True)
    variable: Mapped[str] = mapped_column(String(255))
    data: Mapped[dict[str, Any]] = mapped_column(JSON)


class _DigestChunkRegistry(Base, DeclarativeBase):
    registry = _registry()


class DigestChunk(_DigestChunkRegistry):
    """Record digests of a keyed drop, packed as fixed-size binary chunks (key digest + row digest)."""

    __tablename__ = "digest_chunks"
    __table_args__ = (UniqueConstraint("drop_id", "seq"),)
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    drop_id: Mapped[int] = mapped_column(ForeignKey("drops.id"), index=True)
    seq: Mapped[int] = mapped_column(Integer)
    kind: Mapped[str] = mapped_column(String(16), default="records")
    data: Mapped[bytes] = mapped_column(LargeBinary)


class _DecisionRegistry(Base, DeclarativeBase):
    registry = _registry()


class Decision(_DecisionRegistry):
    """A decision of the analysis, why it was taken, what it rests on and where it lives in the code."""

    __tablename__ = "decisions"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    text: Mapped[str] = mapped_column(Text)
    kind: Mapped[str] = mapped_column(String(32), default="other")
    why: Mapped[str | None] = mapped_column(Text)
    evidence: Mapped[str | None] = mapped_column(Text)
    alternatives: Mapped[str | None] = mapped_column(Text)
    drop_id: Mapped[int | None] = mapped_column(ForeignKey("drops.id"))
    code_path: Mapped[str | None] = mapped_column(Text)
    code_line: Mapped[int | None] = mapped_column(Integer)
    assumption: Mapped[str | None] = mapped_column(String(8))
    seed: Mapped[int | None] = mapped_column(Integer)
    removed: Mapped[int | None] = mapped_column(Integer)
    status: Mapped[str] = mapped_column(String(16), default="adopted")
    supersedes_id: Mapped[int | None] = mapped_column(ForeignKey("decisions.id"))
    post_hoc: Mapped[bool] = mapped_column(Boolean, default=False)
    git_commit: Mapped[str | None] = mapped_column(String(64))
    git_dirty: Mapped[bool | None] = mapped_column(Boolean)
    # the data facts of its variables in the latest drop when it was taken
    facts: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)
    author: Mapped[str] = mapped_column(String(255))
    created_at: Mapped[str] = mapped_column(String(40), index=True)
    updated_at: Mapped[str] = mapped_column(String(40))


class _EntryRegistry(Base, DeclarativeBase):
    registry = _registry()


class Entry(_EntryRegistry):
    """A note, a conclusion or a next step."""

    __tablename__ = "entries"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    kind: Mapped[str] = mapped_column(String(16))
    text: Mapped[str] = mapped_column(Text)
    tags: Mapped[list[Any]] = mapped_column(JSON, default=list)
    author: Mapped[str] = mapped_column(String(255))
    created_at: Mapped[str] = mapped_column(String(40), index=True)


class _QuestionRegistry(Base, DeclarativeBase):
    registry = _registry()


class Question(_QuestionRegistry):
    """A question put to a domain expert, and its answer."""

    __tablename__ = "questions"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    text: Mapped[str] = mapped_column(Text)
    to: Mapped[str | None] = mapped_column(String(255), index=True)
    priority: Mapped[str] = mapped_column(String(16), default="normal")
    status: Mapped[str] = mapped_column(String(16), default="open")
    answer: Mapped[str | None] = mapped_column(Text)
    answered_by: Mapped[str | None] = mapped_column(String(255))
    answered_at: Mapped[str | None] = mapped_column(String(40))
    withdrawn_why: Mapped[str | None] = mapped_column(Text)
    author: Mapped[str] = mapped_column(String(255))
    created_at: Mapped[str] = mapped_column(String(40), index=True)


class _ThreatRegistry(Base, DeclarativeBase):
    registry = _registry()


class Threat(_ThreatRegistry):
    """An entry of the threats-to-validity register."""

    __tablename__ = "threats"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    text: Mapped[str] = mapped_column(Text)
    kind: Mapped[str] = mapped_column(String(16))
    severity: Mapped[str] = mapped_column(String(16), default="medium")
    mitigation: Mapped[str | None] = mapped_column(Text)
    status: Mapped[str] = mapped_column(String(16), default="open")
    author: Mapped[str] = mapped_column(String(255))
    created_at: Mapped[str] = mapped_column(String(40), index=True)


class _LinkRegistry(Base, DeclarativeBase):
    registry = _registry()


class Link(_LinkRegistry):
    """A link from a journal record (decision, entry, question, threat) to a variable or a decision.

    One table rather than one per pair keeps the journal's queries uniform; referential integrity of the
    target is kept by ``variable_id``/``decision_id`` foreign keys, exactly one of which is set.
    """

    __tablename__ = "links"
    __table_args__ = (
        UniqueConstraint("source_kind", "source_id", "variable_id", "decision_id"),
    )
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    source_kind: Mapped[str] = mapped_column(String(16), index=True)
    source_id: Mapped[int] = mapped_column(Integer, index=True)
    variable_id: Mapped[int | None] = mapped_column(ForeignKey("variables.id"), index=True)
    decision_id: Mapped[int | None] = mapped_column(ForeignKey("decisions.id"), index=True)
