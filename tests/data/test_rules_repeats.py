"""The repeated-row rule of a keyed table looks up only the rows whose key repeats or is missing."""

from __future__ import annotations

import dataclasses

import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data import repeats
from studylog.data.check import Checker
from studylog.data.rules import RepeatedRowRule, plan
from studylog.data.spec import TableSpec, VariableSpec

SPEC = TableSpec("t", key=("k1", "k2"), variables=(
    VariableSpec("k1", "identifier"), VariableSpec("k2", "integer"), VariableSpec("v", "text")))
CELLS = {
    "k1": st.sampled_from(["A", "B", "", " ", None]),
    "k2": st.sampled_from(["1", "2", None]),
    "v": st.sampled_from(["x", "y", None]),
}


@settings(max_examples=80, deadline=None)
@given(rows=st.lists(st.fixed_dictionaries(CELLS), min_size=1, max_size=80),
       batch_rows=st.integers(1, 9), split=st.integers(1, 12))
def test_keyed_repeated_rows_equal_those_of_every_row_looked_up(
        rows: list[dict[str, str | None]], batch_rows: int, split: int) -> None:
    table = pa.table({name: pa.array([r[name] for r in rows], pa.string()) for name in CELLS})
    keyed = plan(SPEC, table.column_names)
    assert any(isinstance(r, RepeatedRowRule) and r.keyed for r in keyed.rules)
    plain = dataclasses.replace(keyed, rules=tuple(
        dataclasses.replace(r, keyed=False) if isinstance(r, RepeatedRowRule) else r for r in keyed.rules))
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(repeats, "SPLIT_ROWS", split)
        patch.setattr(repeats, "READ_BLOCK", split % 4 + 1)
        found = [Checker(p).run(table.to_batches(max_chunksize=batch_rows)) for p in (keyed, plain)]
    whole = Checker(plain).run(table.to_batches())
    repeated = [[f.to_dict() for f in result.findings if f.rule == "repeated-row"] for result in found]
    assert repeated[0] == repeated[1] == [f.to_dict() for f in whole.findings if f.rule == "repeated-row"]
    assert [f.to_dict() for f in found[0].findings] == [f.to_dict() for f in found[1].findings]


def test_a_repeated_row_rule_without_the_key_rule_looks_up_every_row() -> None:
    table = pa.table({"k1": ["A", "A", "B"], "k2": ["1", "1", "2"], "v": ["x", "x", "y"]})
    keyed = plan(SPEC, table.column_names)
    alone = dataclasses.replace(keyed, rules=tuple(r for r in keyed.rules if isinstance(r, RepeatedRowRule)))
    result = Checker(alone).run(table.to_batches(max_chunksize=1))
    assert [(f.rule, f.count, f.rows) for f in result.findings] == [("repeated-row", 1, (2,))]
