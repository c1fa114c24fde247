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
        VariableSpec("b", "boolean", missing_codes=(Code("-9"),)),
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
    "b": st.sampled_from(["yes", "No", "maybe", "-9", None, ""]),
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


@settings(max_examples=60, deadline=None)
@given(rows=st.lists(st.fixed_dictionaries(CELLS), min_size=1, max_size=120), batch_rows=st.integers(8, 60))
def test_work_per_distinct_value_gives_the_findings_and_profiles_of_work_per_cell(
        rows: list[dict[str, str | None]], batch_rows: int) -> None:
    # a column with few distinct values is read, digested, matched against its levels and pattern once
    # per distinct value (repeats.encode_if_few); made to happen on small batches here by a small sample
    from unittest import mock

    from studylog.data import repeats
    from studylog.data.rules import plan
    from studylog.data.summary import ColumnSummary

    table = _table(rows)

    def run() -> tuple[list[dict[str, object]], dict[str, object]]:
        summaries = {v.name: ColumnSummary(v, v.type) for v in SPEC.variables}

        def observe(context) -> None:  # type: ignore[no-untyped-def]
            for name, summary in summaries.items():
                summary.update(context.column(name), parsed=context.parsed(name),
                               digests=lambda name=name: context.digest(name)[0],
                               encoded=context.encoded(name))

        from studylog.data.check import Checker

        result = Checker(plan(SPEC, table.column_names), [observe]).run(
            table.to_batches(max_chunksize=batch_rows))
        profiles = {n: {k: v for k, v in s.to_dict().items() if k != "sketch"} for n, s in summaries.items()}
        return [f.to_dict() for f in result.findings], profiles

    calls = []
    real = repeats.encode_if_few

    def counted(strings):  # type: ignore[no-untyped-def]
        found = real(strings)
        calls.append(found is not None)
        return found

    # every column of 16 rows or more is encoded
    with mock.patch.object(repeats, "SAMPLE", 4), mock.patch.object(repeats, "FEW", 4), \
            mock.patch.object(repeats, "encode_if_few", counted):
        encoded = run()
    with mock.patch.object(repeats, "encode_if_few", lambda strings: None):
        per_cell = run()
    assert any(calls) == (min(batch_rows, len(rows)) >= 16)
    assert encoded == per_cell
