"""Step 2: data drops — cross-field rules, checked drops, their findings, stored profiles and digests.

Why: checking each delivery against the dictionary needs a record of what arrived and what was found,
and drift between drops is computed from stored profiles and record digests, never by re-reading files.
"""

from __future__ import annotations

from sqlalchemy import (
    JSON,
    Boolean,
    Column,
    ForeignKey,
    Integer,
    LargeBinary,
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
    Table("data_tables", metadata, Column("id", Integer(), primary_key=True))
    Table(
        "rules",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("table_id", Integer(), ForeignKey("data_tables.id"), nullable=False, index=True),
        Column("name", String(255), nullable=False),
        Column("expression", Text(), nullable=False),
        Column("severity", String(16), nullable=False),
        Column("why", Text(), nullable=True),
        Column("status", String(16), nullable=False),
        Column("author", String(255), nullable=False),
        Column("created_at", String(40), nullable=False),
        UniqueConstraint("table_id", "name"),
    )
    Table(
        "drops",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("table_id", Integer(), ForeignKey("data_tables.id"), nullable=False, index=True),
        Column("label", Text(), nullable=True),
        Column("file_name", Text(), nullable=False),
        Column("sha256", String(64), nullable=False, index=True),
        Column("size", Integer(), nullable=False),
        Column("rows", Integer(), nullable=False),
        Column("columns", Integer(), nullable=False),
        Column("columns_seen", JSON(), nullable=False),
        Column("dictionary_version", String(255), nullable=True),
        Column("dictionary_change", Integer(), nullable=True),
        Column("errors", Integer(), nullable=False),
        Column("warnings", Integer(), nullable=False),
        Column("analysis", Boolean(), nullable=False),
        Column("against_id", Integer(), ForeignKey("drops.id"), nullable=True),
        Column("comparison", JSON(), nullable=False),
        Column("checked_at", String(40), nullable=False),
        Column("author", String(255), nullable=False),
    )
    Table(
        "findings",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("drop_id", Integer(), ForeignKey("drops.id"), nullable=False, index=True),
        Column("variable", String(255), nullable=True),
        Column("rule", String(255), nullable=False),
        Column("severity", String(16), nullable=False),
        Column("count", Integer(), nullable=False),
        Column("rows", JSON(), nullable=False),
        Column("keys", JSON(), nullable=False),
        Column("values", JSON(), nullable=False),
        Column("message", Text(), nullable=False),
    )
    Table(
        "profiles",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("drop_id", Integer(), ForeignKey("drops.id"), nullable=False, index=True),
        Column("variable", String(255), nullable=False),
        Column("data", JSON(), nullable=False),
        UniqueConstraint("drop_id", "variable"),
    )
    Table(
        "digest_chunks",
        metadata,
        Column("id", Integer(), primary_key=True),
        Column("drop_id", Integer(), ForeignKey("drops.id"), nullable=False, index=True),
        Column("seq", Integer(), nullable=False),
        Column("kind", String(16), nullable=False),
        Column("data", LargeBinary(), nullable=False),
        UniqueConstraint("drop_id", "seq"),
    )
    metadata.create_all(connection, tables=[t for n, t in metadata.tables.items() if n != "data_tables"])
