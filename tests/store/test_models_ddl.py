"""The models' schema is pinned: the DDL of every table and index (SQLite and PostgreSQL) and what the DDL
does not show (Python-side defaults, the mapped attributes); and that each model is configured on its own.

The way the models are declared may change (it is tuned for start-up time); the schema they describe may
not, except with a migration. After a deliberate schema change (a new migration step and the models
changed to match), regenerate the expected file:

    python tests/store/test_models_ddl.py > tests/store/models_ddl.txt
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path
from typing import Any

from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.schema import CreateIndex, CreateTable

from studylog.store.models import Base

EXPECTED = Path(__file__).with_name("models_ddl.txt")


def _default(column) -> str:  # type: ignore[no-untyped-def]
    default = column.default
    if default is None:
        return "-"
    if default.is_callable:
        return f"callable {getattr(default.arg, '__name__', '?')}"
    return f"scalar {default.arg!r}"


def _mappers() -> list[Any]:
    """Every mapper on ``Base.metadata``, whichever registry it is in."""
    found: list[Any] = []
    pending = list(Base.__subclasses__())
    while pending:
        cls = pending.pop()
        pending.extend(cls.__subclasses__())
        if "__mapper__" in cls.__dict__ and cls.__table__.metadata is Base.metadata:
            found.append(cls.__mapper__)
    return found


def schema_text() -> str:
    lines: list[str] = []
    for dialect in (sqlite.dialect(), postgresql.dialect()):
        lines.append(f"-- {dialect.name}")
        for table in Base.metadata.sorted_tables:
            lines.append(str(CreateTable(table).compile(dialect=dialect)).strip() + ";")
            for index in sorted(table.indexes, key=lambda i: str(i.name)):
                lines.append(str(CreateIndex(index).compile(dialect=dialect)).strip() + ";")
    lines.append("-- columns: type, nullable, primary key, Python-side default")
    for table in Base.metadata.sorted_tables:
        for column in table.columns:
            lines.append(f"{table.name}.{column.name} {column.type!r} nullable={column.nullable} "
                         f"pk={column.primary_key} default={_default(column)} "
                         f"server_default={column.server_default!r}")
    lines.append("-- mapped classes and their attributes")
    for mapper in sorted(_mappers(), key=lambda m: m.class_.__name__):
        lines.append(f"{mapper.class_.__name__} ({mapper.local_table.name}): "
                     + ", ".join(sorted(mapper.attrs.keys())))
    return "\n".join(lines) + "\n"


def test_the_models_describe_the_pinned_schema() -> None:
    assert schema_text() == EXPECTED.read_text(encoding="utf-8")


if __name__ == "__main__":
    print(schema_text(), end="")


def test_using_a_model_configures_its_own_registry_only() -> None:
    # in a fresh process: the test session has long configured every mapper
    code = (
        "from sqlalchemy import select\n"
        "from studylog.store.models import DataTable, Decision, Variable\n"
        "select(Decision).compile()\n"
        "print(Decision.__mapper__.configured, Variable.__mapper__.configured)\n"
        "select(Variable).compile()\n"
        "print(Variable.__mapper__.configured, DataTable.__mapper__.configured)\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=True)
    assert done.stdout.split() == ["True", "False", "True", "True"]
