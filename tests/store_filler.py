"""Fill a store with records of every table, straight through the models' tables (invented data).

Generic over ``Base.metadata.sorted_tables``: a new table is filled without changing this module, so the
dump and doctor tests cover it as soon as it exists. Text values are chosen to break naive writers and
readers: quotes, backslashes, newlines, Unicode line separators, NUL-free control characters, emoji,
right-to-left text, HTML, SQL. Foreign keys point at rows that exist (a table's own earlier or later
rows for self references, which the loader must accept).
"""

from __future__ import annotations

import random
from typing import Any

from sqlalchemy import JSON, Boolean, Float, Integer, LargeBinary, String, Text, insert, select
from sqlalchemy.schema import Table

from studylog.store.models import Base
from studylog.store.session import StoreLocation, transaction

TRICKY_TEXTS = [
    "plain",
    "quote \" and 'single' and `back`",
    "back\\slash \\n not a newline",
    "two\nlines\r\nand a carriage return\r",
    "line\u2028separator\u2029paragraph \x1c\x1d\x1e \x85 next-line",
    "tab\there \x0b\x0c",
    "emoji 🧪📊 and combining é (e\u0301)",
    "right-to-left: مرحبا שלום",
    "<script>alert('x')</script> &amp; <b>bold</b>",
    "'; DROP TABLE variables; --",
    "=SUM(A1:A9)",
    "",
    " leading and trailing spaces ",
    "非ASCII 数字 ٣ and \ufeffBOM",
    "x" * 5000,
]


def _value(column: Any, i: int, rng: random.Random) -> Any:
    kind = column.type
    if isinstance(kind, Boolean):
        return bool(rng.getrandbits(1))
    if isinstance(kind, Integer):
        # distinct per row (some tables have unique integer columns), with the extremes among them
        return [0, -1, 2**62, -(2**31), 12_345][i % 5] + 7 * i
    if isinstance(kind, Float):
        return rng.choice([0.0, -0.0, 0.1, 1e-300, 1.7976931348623157e308, 2 / 3, rng.random()])
    if isinstance(kind, LargeBinary):
        return bytes(rng.getrandbits(8) for _ in range(rng.choice([0, 1, 32, 320])))
    if isinstance(kind, JSON):
        text = TRICKY_TEXTS[i % len(TRICKY_TEXTS)]
        return rng.choice([
            [], {}, [text, 1, 2.5, None, True],
            {"z": 1, "a": [{"code": "-99", "label": text}], "m": {"nested": text}},
            {"edges": [0.0, 0.5, 1.0], "counts": [3, 4]},
        ])
    if isinstance(kind, (String, Text)):
        base = TRICKY_TEXTS[(i + len(column.name)) % len(TRICKY_TEXTS)]
        return f"{base}#{column.name}{i}"
    raise AssertionError(f"no value maker for {column.table.name}.{column.name}: {kind!r}")


def _row(table: Table, i: int, ids: dict[str, list[int]], rng: random.Random) -> dict[str, Any]:
    row: dict[str, Any] = {}
    for column in table.columns:
        if column.primary_key and isinstance(column.type, Integer):
            continue
        foreign = list(column.foreign_keys)
        if foreign:
            target = foreign[0].column.table.name
            choices = ids.get(target, [])
            if target == table.name:
                row[column.name] = None if not choices or i % 3 == 0 else rng.choice(choices)
            elif choices:
                row[column.name] = rng.choice(choices)
            else:
                row[column.name] = None
            continue
        if column.nullable and not column.primary_key and i % 5 == 4:
            row[column.name] = None
            continue
        row[column.name] = _value(column, i, rng)
    if table.name == "studylog_meta":
        row["key"] = f"filler-{i}"
    return row


def fill(location: StoreLocation, rows_per_table: int = 6, seed: int = 7) -> dict[str, int]:
    """Insert ``rows_per_table`` rows into every table (except the schema version); return the counts."""
    rng = random.Random(seed)
    counts: dict[str, int] = {}
    with transaction(location, write=True) as session:
        connection = session.connection()
        ids: dict[str, list[int]] = {}
        for table in Base.metadata.sorted_tables:
            key = list(table.primary_key.columns)
            for i in range(rows_per_table):
                connection.execute(insert(table).values(**_row(table, i, ids, rng)))
            if len(key) == 1 and isinstance(key[0].type, Integer):
                ids[table.name] = list(connection.execute(select(key[0])).scalars())
            counts[table.name] = rows_per_table
    return counts


def snapshot(location: StoreLocation) -> dict[str, list[tuple[Any, ...]]]:
    """Every row of every table, in key order, for comparing two stores exactly."""
    with transaction(location, write=False) as session:
        connection = session.connection()
        return {
            table.name: [tuple(row) for row in connection.execute(
                select(table).order_by(*(list(table.primary_key.columns) or list(table.columns)))
            )]
            for table in Base.metadata.sorted_tables
        }
