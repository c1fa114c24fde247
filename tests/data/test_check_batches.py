"""The check gives the same findings whether a file is read whole or in batches of 1 to 7 rows."""

from __future__ import annotations

import pyarrow as pa
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data.check import check
from studylog.data.repeats import SeenDigests, text_digests
from studylog.data.spec import Code, RuleSpec, TableSpec, VariableSpec

SPEC = TableSpec(
    "t",
    key=("k1", "k2"),
    variables=(
        VariableSpec("k1", "identifier"),
        VariableSpec("k2", "integer"),
        VariableSpec("n", "number", minimum="0", plausible_max="5", missing_codes=(Code("-9"),),
                     max_missing=0.3),
        VariableSpec("c", "categorical", levels=(Code("a"), Code("b")), required=True),
        VariableSpec("d", "date", maximum="2024-06-30"),
        VariableSpec("u", "text", unique=True, pattern="[a-z]+", sensitivity="sensitive"),
    ),
    rules=(RuleSpec("n-by-c", "c = 'a' -> n < 3"),),
)

CELLS = {
    "k1": st.sampled_from(["A", "B", None]),
    "k2": st.sampled_from(["1", "2", "x", None]),
    "n": st.sampled_from(["0", "1.5", "7", "-1", "-9", "nan", None, " 2 "]),
    "c": st.sampled_from(["a", "b", "A", "b ", None]),
    "d": st.sampled_from(["2024-01-31", "2024-02-30", "2024-07-01", None]),
    "u": st.sampled_from(["abc", "xyz", "Q1", None, "abc" * 30]),
}

ROWS = st.lists(st.fixed_dictionaries(CELLS), min_size=1, max_size=40)


def _table(rows: list[dict[str, str | None]]) -> pa.Table:
    return pa.table({name: pa.array([r[name] for r in rows], pa.string()) for name in CELLS})


@settings(max_examples=80, deadline=None)
@given(rows=ROWS, batch_rows=st.integers(1, 7))
def test_whole_and_tiny_batches_agree(rows: list[dict[str, str | None]], batch_rows: int) -> None:
    table = _table(rows)
    whole = check(SPEC, table.column_names, table.to_batches())
    pieces = check(SPEC, table.column_names, table.to_batches(max_chunksize=batch_rows))
    assert len(table.to_batches(max_chunksize=batch_rows)) == -(-len(rows) // batch_rows)
    assert [f.to_dict() for f in pieces.findings] == [f.to_dict() for f in whole.findings]
    assert pieces.rows == whole.rows == len(rows)


@settings(max_examples=60, deadline=None)
@given(values=st.lists(st.one_of(st.none(), st.text(max_size=90)), min_size=1, max_size=60),
       batch_rows=st.integers(1, 7))
def test_digest_set_finds_exactly_the_repeats_python_would(values: list[str | None], batch_rows: int) -> None:
    seen = SeenDigests()
    found: list[bool] = []
    for start in range(0, len(values), batch_rows):
        part = pa.array(values[start:start + batch_rows], pa.string())
        found.extend(seen.observe(*text_digests(part)).tolist())
    # reference: a Python set of the values themselves
    earlier: set[object] = set()
    expected = []
    for value in values:
        marker = ("null",) if value is None else value
        expected.append(marker in earlier)
        earlier.add(marker)
    assert found == expected


@settings(max_examples=60, deadline=None)
@given(values=st.lists(st.sampled_from(["a", "b", "c", None, ""]), min_size=1, max_size=300),
       batch_rows=st.integers(1, 300))
def test_digest_set_marks_the_first_of_many_repeats_in_one_batch(values: list[str | None],
                                                                 batch_rows: int) -> None:
    # many equal digests in one batch: the earliest row of each is the first occurrence, whatever
    # order the sort leaves equal digests in
    seen = SeenDigests()
    found: list[bool] = []
    for start in range(0, len(values), batch_rows):
        found.extend(seen.observe(*text_digests(pa.array(values[start:start + batch_rows], pa.string()))).tolist())
    first = {}
    for i, value in enumerate(values):
        first.setdefault(("null",) if value is None else value, i)
    assert found == [first[("null",) if v is None else v] != i for i, v in enumerate(values)]
