"""Step 3: the journal — decisions, notes and conclusions, questions for experts, threats, and links.

Why: an analysis is a chain of decisions that must be followed and defended later, and a dictionary
change made because of an expert's answer must link to that question (hence ``changes.question_id``).
"""

from __future__ import annotations

from sqlalchemy import (
    JSON,
    Boolean,
    Column,
    ForeignKey,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    UniqueConstraint,
)
from sqlalchemy.engine import Connection


def apply(connection: Connection) -> None:
    metadata = MetaData()
    # tables referenced by foreign keys, declared here only so the new tables can point at them
    Table("drops", metadata, Column("id", Integer(), primary_key=True))
    Table("variables", metadata, Column("id", Integer(), primary_key=True))
    Table(
        "decisions",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("text", Text(), nullable=False),
        Column("kind", String(32), nullable=False),
        Column("why", Text(), nullable=True),
        Column("evidence", Text(), nullable=True),
        Column("alternatives", Text(), nullable=True),
        Column("drop_id", Integer(), ForeignKey("drops.id"), nullable=True),
        Column("code_path", Text(), nullable=True),
        Column("code_line", Integer(), nullable=True),
        Column("assumption", String(8), nullable=True),
        Column("seed", Integer(), nullable=True),
        Column("removed", Integer(), nullable=True),
        Column("status", String(16), nullable=False),
        Column("supersedes_id", Integer(), ForeignKey("decisions.id"), nullable=True),
        Column("post_hoc", Boolean(), nullable=False),
        Column("git_commit", String(64), nullable=True),
        Column("git_dirty", Boolean(), nullable=True),
        Column("facts", JSON(), nullable=False),
        Column("author", String(255), nullable=False),
        Column("created_at", String(40), nullable=False, index=True),
        Column("updated_at", String(40), nullable=False),
    )
    Table(
        "entries",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("kind", String(16), nullable=False),
        Column("text", Text(), nullable=False),
        Column("tags", JSON(), nullable=False),
        Column("author", String(255), nullable=False),
        Column("created_at", String(40), nullable=False, index=True),
    )
    Table(
        "questions",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("text", Text(), nullable=False),
        Column("to", String(255), nullable=True, index=True),
        Column("priority", String(16), nullable=False),
        Column("status", String(16), nullable=False),
        Column("answer", Text(), nullable=True),
        Column("answered_by", String(255), nullable=True),
        Column("answered_at", String(40), nullable=True),
        Column("withdrawn_why", Text(), nullable=True),
        Column("author", String(255), nullable=False),
        Column("created_at", String(40), nullable=False, index=True),
    )
    Table(
        "threats",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("text", Text(), nullable=False),
        Column("kind", String(16), nullable=False),
        Column("severity", String(16), nullable=False),
        Column("mitigation", Text(), nullable=True),
        Column("status", String(16), nullable=False),
        Column("author", String(255), nullable=False),
        Column("created_at", String(40), nullable=False, index=True),
    )
    Table(
        "links",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("source_kind", String(16), nullable=False, index=True),
        Column("source_id", Integer(), nullable=False, index=True),
        Column("variable_id", Integer(), ForeignKey("variables.id"), nullable=True, index=True),
        Column("decision_id", Integer(), ForeignKey("decisions.id"), nullable=True, index=True),
        UniqueConstraint("source_kind", "source_id", "variable_id", "decision_id"),
    )
    new = [t for n, t in metadata.tables.items() if n not in ("drops", "variables")]
    metadata.create_all(connection, tables=new)
    # ALTER TABLE ... ADD COLUMN with a nullable reference is portable to SQLite and PostgreSQL
    connection.exec_driver_sql(
        "ALTER TABLE changes ADD COLUMN question_id INTEGER REFERENCES questions (id)"
    )
