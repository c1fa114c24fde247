"""Step 1: the dictionary — the study, its tables, variables, the change history and named versions.

Why: the first schema; everything else in a study hangs off the dictionary. The tables are written out
here as they were at this step (not taken from the models) so that this step builds the same schema
forever, whatever the models become.
"""

from __future__ import annotations

from sqlalchemy import (
    JSON,
    Boolean,
    Column,
    Float,
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
    Table(
        "studylog_meta",
        metadata,
        Column("key", String(64), primary_key=True),
        Column("value", Text(), nullable=False),
    )
    Table(
        "study",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("title", Text(), nullable=False),
        Column("description", Text(), nullable=True),
        Column("target", String(255), nullable=True),
        Column("index_time", Text(), nullable=True),
        Column("plan_frozen_at", String(40), nullable=True),
        Column("plan_note", Text(), nullable=True),
        Column("created_at", String(40), nullable=False),
        Column("author", String(255), nullable=False),
    )
    Table(
        "data_tables",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("name", String(255), nullable=False, unique=True),
        Column("description", Text(), nullable=True),
        Column("grain", Text(), nullable=True),
        Column("key", JSON(), nullable=False),
        Column("created_at", String(40), nullable=False),
        Column("updated_at", String(40), nullable=False),
        Column("author", String(255), nullable=False),
    )
    Table(
        "variables",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("table_id", Integer(), ForeignKey("data_tables.id"), nullable=False, index=True),
        Column("position", Integer(), nullable=False),
        Column("name", String(255), nullable=False),
        Column("aliases", JSON(), nullable=False),
        Column("label", Text(), nullable=True),
        Column("description", Text(), nullable=True),
        Column("type", String(32), nullable=False),
        Column("unit", String(255), nullable=True),
        Column("precision", Integer(), nullable=True),
        Column("source", String(32), nullable=True),
        Column("source_detail", Text(), nullable=True),
        Column("instrument", Text(), nullable=True),
        Column("question_text", Text(), nullable=True),
        Column("derivation", Text(), nullable=True),
        Column("derived_from", JSON(), nullable=False),
        Column("time_association", Text(), nullable=True),
        Column("availability", String(16), nullable=True),
        Column("role", String(32), nullable=False),
        Column("levels", JSON(), nullable=False),
        Column("true_values", JSON(), nullable=False),
        Column("false_values", JSON(), nullable=False),
        Column("minimum", String(64), nullable=True),
        Column("maximum", String(64), nullable=True),
        Column("plausible_min", String(64), nullable=True),
        Column("plausible_max", String(64), nullable=True),
        Column("missing_codes", JSON(), nullable=False),
        Column("max_missing", Float(), nullable=True),
        Column("required", Boolean(), nullable=False),
        Column("unique", Boolean(), nullable=False),
        Column("pattern", Text(), nullable=True),
        Column("date_format", String(64), nullable=True),
        Column("timezone", String(64), nullable=True),
        Column("references", String(511), nullable=True),
        Column("sensitivity", String(32), nullable=False),
        Column("status", String(16), nullable=False),
        Column("confirmed_by", String(255), nullable=True),
        Column("confirmed_at", String(40), nullable=True),
        Column("created_at", String(40), nullable=False),
        Column("updated_at", String(40), nullable=False),
        Column("author", String(255), nullable=False),
        UniqueConstraint("table_id", "name"),
    )
    Table(
        "changes",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("entity", String(32), nullable=False, index=True),
        Column("entity_id", Integer(), nullable=False, index=True),
        Column("action", String(32), nullable=False),
        Column("field", String(64), nullable=True),
        Column("old", JSON(), nullable=True),
        Column("new", JSON(), nullable=True),
        Column("why", Text(), nullable=True),
        Column("author", String(255), nullable=False),
        Column("at", String(40), nullable=False, index=True),
    )
    Table(
        "dictionary_versions",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("name", String(255), nullable=False, unique=True),
        Column("note", Text(), nullable=True),
        Column("change_id", Integer(), nullable=True),
        Column("snapshot", JSON(), nullable=False),
        Column("author", String(255), nullable=False),
        Column("created_at", String(40), nullable=False),
    )
    metadata.create_all(connection)
