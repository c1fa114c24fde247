"""Fill a store with records of every table, straight through the models' tables (invented data).

Generic over ``Base.metadata.sorted_tables``: a new table is filled without changing this module, so the
dump and doctor tests cover it as soon as it exists. Text values are chosen to break naive writers and
readers: quotes, backslashes, newlines, Unicode line separators, NUL-free control characters, emoji,
right-to-left text, HTML, SQL. Foreign keys point at rows that exist (a table's own earlier or later
rows for self references, which the loader must accept).
"""

from __future__ import annotations

import csv
import io
import json
import random
from pathlib import Path
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


def _ok(cli, *args: str) -> dict:  # type: ignore[no-untyped-def]
    result = cli(*args, "--json")
    assert result.exit_code == 0, (args, result.output)
    return json.loads(result.stdout) if result.stdout.strip() else {}


def work_through_commands(cli, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    """A study worked through every command that writes (in a store made by ``init``), with a checked
    drop of a keyed table, so that every kind of record exists as the program writes it."""
    _ok(cli, "table", "add", "visits", "--key", "visit_id", "--grain", "one row per visit")
    _ok(cli, "var", "add", "visit_id", "--type", "identifier", "--required", "--unique")
    _ok(cli, "var", "add", "age", "--type", "integer", "--min", "0", "--max", "120", "--unit", "years")
    _ok(cli, "var", "add", "sex", "--type", "categorical", "--levels", "1=male,2=female",
        "--missing-codes", "-99=refused")
    _ok(cli, "var", "add", "income", "--type", "number", "--sensitivity", "sensitive")
    _ok(cli, "var", "set", "age", "--label", "Age at the visit", "--plausible-max", "100")
    _ok(cli, "var", "confirm", "age", "sex")
    _ok(cli, "var", "set", "age", "--description", "Age in whole years", "--why", "asked the owner")
    _ok(cli, "var", "rename", "sex", "sex_code", "--why", "clearer")
    _ok(cli, "var", "deprecate", "income", "--why", "not delivered")
    _ok(cli, "table", "set", "visits", "--description", "Clinic visits", "--why", "agreed")
    _ok(cli, "var", "freeze", "v1", "--note", "agreed with the data owner")
    _ok(cli, "rule", "add", "adult", "age >= 18", "--why", "adults only")
    _ok(cli, "rule", "retire", "adult", "--why", "children are in scope after all")
    first = _ok(cli, "log", "Drop visits without an age", "--kind", "missing", "--var", "age",
                "--why", "few", "--code", "clean.py:12")["id"]
    _ok(cli, "decision", "implement", str(first), "--code", "clean.py:40")
    second = _ok(cli, "decision", "supersede", str(first), "Impute age by median",
                 "--why", "too many dropped")["id"]
    _ok(cli, "decision", "revert", str(second), "--why", "the owner sent the missing ages")
    asked = _ok(cli, "ask", "Is -99 a refusal?", "--var", "sex_code", "--to", "data owner")["id"]
    _ok(cli, "answer", str(asked), "Yes, -99 is a refusal", "--by", "Dr. Owner")
    _ok(cli, "withdraw", str(_ok(cli, "ask", "Unit of age?")["id"]), "--why", "in the manual")
    withdrawn = _ok(cli, "ask", "Call Ann Smith on 555-0101?", "--to", "field team")["id"]
    _ok(cli, "withdraw", str(withdrawn), "--why", "answered in the manual")
    _ok(cli, "redact", "question", str(withdrawn), "--why", "a name and a phone number")
    threat = _ok(cli, "threat", "add", "Age is self-reported", "--kind", "construct", "--var", "age")["id"]
    _ok(cli, "threat", "set", str(threat), "--mitigation", "compare with the registry", "--why", "plan")
    _ok(cli, "note", "The April file had a new column", "--tag", "drops")
    _ok(cli, "conclude", "Age is the strongest input", "--var", "age")
    _ok(cli, "next", "Ask the lab about detection limits")
    _ok(cli, "plan", "freeze", "--note", "before modelling")
    packet = tmp_path / "answers.csv"
    asked_again = _ok(cli, "ask", "Which unit is income in?", "--to", "data owner")["id"]
    exported = cli("questions", "export", "--to", "data owner", "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(exported.stdout)))
    for row in rows:
        if row["id"] == str(asked_again):
            row.update(answer="EUR per month", answered_by="Dr. Owner")
    with packet.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=list(rows[0]))
        writer.writeheader()
        writer.writerows(rows)
    assert _ok(cli, "questions", "import", str(packet))["answered"] == [asked_again]
    drop = tmp_path / "visits.csv"
    drop.write_text("visit_id,age,sex_code,income\nV1,34,1,1200\nV2,-4,2,\nV3,51,-99,900\nV3,51,-99,900\n")
    result = cli("check", str(drop), "--label", "April", "--fail-on", "never", "--json")
    assert result.exit_code == 0, result.output
    drop.write_text("visit_id,age,sex_code,income\nV1,35,1,1200\nV4,70,2,300\n")
    result = cli("check", str(drop), "--label", "May", "--fail-on", "never", "--json")
    assert result.exit_code == 0, result.output

