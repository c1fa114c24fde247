"""Every rule of the check against planted faults: exact counts, row numbers, keys and values."""

from __future__ import annotations

import re

import datetime as dt

import pandas as pd
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data import typed
from studylog.data.check import check
from studylog.data.rules import plan
from studylog.data.spec import Code, RuleSpec, TableSpec, VariableSpec
from studylog.errors import InvalidValue
from studylog.safety import MASK


def run(spec: TableSpec, data: dict[str, list[str | None]], batch_rows: int | None = None):  # type: ignore[no-untyped-def]
    table = pa.table({name: pa.array(values, pa.string()) for name, values in data.items()})
    batches = table.to_batches(max_chunksize=batch_rows) if batch_rows else table.to_batches()
    return check(spec, table.column_names, batches)


def finding(result, variable, rule):  # type: ignore[no-untyped-def]
    found = [f for f in result.findings if f.variable == variable and f.rule == rule]
    assert len(found) <= 1
    return found[0] if found else None


VISITS = TableSpec(
    "visits",
    key=("visit_id",),
    variables=(
        VariableSpec("visit_id", "identifier", required=True, status="confirmed"),
        VariableSpec("age", "integer", minimum="0", maximum="120", plausible_min="18", plausible_max="99",
                     missing_codes=(Code("-99", "refused"),)),
        VariableSpec("weight", "number", missing_codes=(Code("NA"),)),
        VariableSpec("sex", "categorical", levels=(Code("female"), Code("male"))),
        VariableSpec("visited_on", "date", minimum="2024-01-01"),
        VariableSpec("smoker", "boolean", true_values=("Y",), false_values=("N",)),
        VariableSpec("phone", "text", pattern=r"\d{3}-\d{4}", sensitivity="direct-identifier"),
        VariableSpec("site", "categorical", required=True, max_missing=0.25),
    ),
)

DATA = {
    #             1        2          3        4        5        6        7        8
    "visit_id": ["V-1", "V-2", "V-3", "V-2", "V-5", None, "V-7", "V-8"],
    "age": ["34", "1.5", "-99", "130", "17", "40", "1e309", "12.0"],
    "weight": ["70.5", "NaN", "NA", "inf", "-3", "1e309", "80", ".5"],
    "sex": ["female", "Male ", "male", None, "x", "female", "male", "FEMALE"],
    "visited_on": ["2024-02-29", "2024-02-30", "2023-12-31", "2024-1-05", "2024-03-01", None, "2024-03-01", "2024-03-01"],
    "smoker": ["Y", "N", "yes", None, "Y", "N", "N", "Y"],
    "phone": ["555-1234", "5551234", None, "555-12345", "555-0000", "555-0001", "555-0002", "555-0003"],
    "site": ["A", None, "B", None, "  ", "A", "B", "A"],
}


def test_type_failures_are_strict_and_missing_codes_are_not_failures() -> None:
    result = run(VISITS, DATA)
    age = finding(result, "age", "type")
    # '1.5' (row 2) and '1e309' (row 7) are not integers; '-99' is a missing code; '12.0' is 12
    assert (age.count, age.rows, age.keys, age.values) == (2, (2, 7), ("V-2", "V-7"), ("1.5", "1e309"))
    weight = finding(result, "weight", "type")
    # NaN, inf and 1e309 (too large for a double) are not finite numbers; 'NA' is a missing code
    assert (weight.count, weight.rows) == (3, (2, 4, 6))
    visited = finding(result, "visited_on", "type")
    # 30 February does not exist; '2024-1-05' is not written as %Y-%m-%d writes it
    assert (visited.count, visited.rows, visited.values) == (2, (2, 4), ("2024-02-30", "2024-1-05"))
    smoker = finding(result, "smoker", "type")
    assert (smoker.count, smoker.rows, smoker.values) == (1, (3,), ("yes",))


def test_range_and_plausible() -> None:
    result = run(VISITS, DATA)
    age_range = finding(result, "age", "range")
    assert (age_range.count, age_range.rows, age_range.keys) == (1, (4,), ("V-2",))
    assert "lowest 130" in age_range.message and "[0, 120]" in age_range.message
    plausible = finding(result, "age", "plausible")
    # 17 (row 5) and 12 (row 8) are possible but implausible; 130 counts as a range error only
    assert (plausible.severity, plausible.count, plausible.rows) == ("warning", 2, (5, 8))
    date_range = finding(result, "visited_on", "range")
    assert (date_range.count, date_range.rows, date_range.values) == (1, (3,), ("2023-12-31",))


def test_levels_with_resemblance() -> None:
    level = finding(run(VISITS, DATA), "sex", "level")
    assert (level.count, level.rows, level.keys) == (3, (2, 5, 8), ("V-2", "V-5", "V-8"))
    assert "'Male ' resembles 'male'" in level.message
    assert "'FEMALE' resembles 'female'" in level.message
    assert "'x'" in level.message and "'x' resembles" not in level.message


def test_required_missing_share_and_pattern_with_masking() -> None:
    result = run(VISITS, DATA)
    site = finding(result, "site", "required")
    # a blank cell (only spaces) is empty
    assert (site.count, site.rows) == (3, (2, 4, 5))
    share = finding(result, "site", "missing-share")
    assert (share.severity, share.count) == ("warning", 3)
    assert "37.5%" in share.message
    pattern = finding(result, "phone", "pattern")
    assert (pattern.count, pattern.rows, pattern.keys) == (2, (2, 4), ("V-2", "V-2"))
    assert pattern.values == (MASK, MASK)
    assert "5551234" not in pattern.message


def test_key_repeats_and_missing_key() -> None:
    key = finding(run(VISITS, DATA), "visit_id", "key")
    # V-2 repeats at row 4 (row 2 is its first occurrence and does not count); row 6 has no key
    assert (key.count, key.rows, key.keys) == (2, (4, 6), ("V-2", None))
    assert "1 row repeating" in key.message and "1 row with the key" in key.message
    required = finding(run(VISITS, DATA), "visit_id", "required")
    assert required.rows == (6,)


def test_composite_key_counts_each_repeat() -> None:
    spec = TableSpec("visits", key=("site", "visit"), variables=(
        VariableSpec("site", "identifier"), VariableSpec("visit", "integer"), VariableSpec("x", "number")))
    data = {"site": ["A", "A", "B", "A", "A", "B", "A"],
            "visit": ["1", "2", "1", "1", "1", "2", "2"],
            "x": ["1", "2", "3", "4", "5", "6", "7"]}
    key = finding(run(spec, data, batch_rows=2), "site,visit", "key")
    # (A,1) at rows 1, 4, 5: rows 4 and 5 count; (A,2) at rows 2, 7: row 7 counts
    assert (key.count, key.rows, key.keys) == (3, (4, 5, 7), ("A|1", "A|1", "A|2"))


def test_unique_counts_repeats_not_missing() -> None:
    spec = TableSpec("people", variables=(VariableSpec("email", "identifier", unique=True,
                                                       missing_codes=(Code("none"),)),))
    data = {"email": ["a@x", "b@x", "a@x", None, None, "none", "none", "a@x", "b@x"]}
    unique = finding(run(spec, data, batch_rows=3), "email", "unique")
    assert (unique.count, unique.rows, unique.values) == (3, (3, 8, 9), ("a@x", "a@x", "b@x"))


def test_repeated_rows_agree_with_pandas_duplicated() -> None:
    spec = TableSpec("t", variables=(VariableSpec("a", "text"), VariableSpec("b", "text")))
    data = {"a": ["1", "1", "2", "1", None, None, "x" * 300, "x" * 300, "1"],
            "b": ["p", "p", "p", "q", "r", "r", "s", "s", None]}
    repeated = finding(run(spec, data, batch_rows=2), None, "repeated-row")
    # reference: pandas' DataFrame.duplicated (keep="first") counts repeats the same way
    expected = pd.DataFrame(data).duplicated(keep="first")
    assert repeated.count == int(expected.sum()) == 3
    assert list(repeated.rows) == [i + 1 for i in expected[expected].index]
    assert repeated.severity == "warning"


def test_columns_absent_undeclared_and_renamed() -> None:
    spec = TableSpec("t", variables=(
        VariableSpec("a", "integer", required=True),
        VariableSpec("b", "integer", status="confirmed"),
        VariableSpec("c", "integer"),
        VariableSpec("d", "integer", aliases=("dee", "old_d"), minimum="0"),
        VariableSpec("e", "integer", status="deprecated", required=True),
    ))
    result = run(spec, {"old_d": ["1", "-1"], "extra": ["x", "y"], "e": ["zz", "zz"]})
    rules = {(f.variable, f.rule): f for f in result.findings}
    assert rules[("a", "absent-column")].severity == "error"
    assert rules[("b", "absent-column")].severity == "error"
    assert rules[("c", "absent-column")].severity == "info"
    assert rules[("d", "renamed-column")].severity == "warning"
    assert "old_d" in rules[("d", "renamed-column")].message
    # the renamed column is checked as its variable
    assert rules[("d", "range")].rows == (2,)
    assert rules[("extra", "undeclared-column")].severity == "warning"
    # a deprecated variable's column is known (not undeclared) but not checked for content
    assert ("e", "type") not in rules and ("e", "undeclared-column") not in rules


def test_excluded_variables_are_not_checked_for_content() -> None:
    spec = TableSpec("t", variables=(VariableSpec("a", "integer", role="excluded", minimum="0"),))
    result = run(spec, {"a": ["x", "-5"]})
    assert [f.rule for f in result.findings] == []


def test_cross_field_rule_finding_carries_its_name_and_masked_values() -> None:
    spec = TableSpec("stays", key=("id",), variables=(
        VariableSpec("id", "identifier"),
        VariableSpec("admitted", "date"), VariableSpec("discharged", "date"),
        VariableSpec("name", "text", sensitivity="direct-identifier"),
    ), rules=(RuleSpec("discharge-after-admission", "discharged >= admitted"),
              RuleSpec("named", "name is not missing -> discharged is not missing", "warning")))
    data = {"id": ["1", "2", "3", "4"],
            "admitted": ["2024-01-05", "2024-01-05", "2024-01-05", "2024-02-30"],
            "discharged": ["2024-01-06", "2024-01-04", None, "2024-01-01"],
            "name": ["Ann", "Bob", "Cy", None]}
    result = run(spec, data)
    broken = finding(result, None, "discharge-after-admission")
    # row 3 has a missing operand; row 4's admission date is invalid (a type failure, not a violation)
    assert (broken.count, broken.rows, broken.keys, broken.severity) == (1, (2,), ("2",), "error")
    assert broken.values == ("discharged=2024-01-04, admitted=2024-01-05",)
    named = finding(result, None, "named")
    assert (named.count, named.rows, named.severity) == (1, (3,), "warning")
    assert "Cy" not in named.values[0] and MASK in named.values[0]


def test_a_rule_naming_an_absent_column_is_reported_not_run() -> None:
    spec = TableSpec("t", variables=(VariableSpec("a", "number"), VariableSpec("b", "number")),
                     rules=(RuleSpec("sum", "a > b"),))
    result = run(spec, {"a": ["1"]})
    note = finding(result, None, "sum")
    assert note.severity == "info" and "no column b" in note.message


def test_masked_key_values() -> None:
    spec = TableSpec("t", key=("nhs",), variables=(
        VariableSpec("nhs", "identifier", sensitivity="direct-identifier"), VariableSpec("a", "integer")))
    result = run(spec, {"nhs": ["943 476 5919", "943 476 5919"], "a": ["1", "x"]})
    assert finding(result, "a", "type").keys == (MASK,)
    assert finding(result, "nhs", "key").values == (MASK,)


def test_at_most_twenty_examples_but_every_row_counted() -> None:
    spec = TableSpec("t", variables=(VariableSpec("a", "integer"),))
    result = run(spec, {"a": ["x"] * 50 + ["1"] + ["y"] * 5}, batch_rows=7)
    typed_finding = finding(result, "a", "type")
    assert typed_finding.count == 55
    assert typed_finding.rows == tuple(range(1, 21))


def test_a_pattern_the_checker_cannot_run_is_bad_input() -> None:
    spec = TableSpec("t", variables=(VariableSpec("a", "text", pattern=r"(\d)\1"),))
    with pytest.raises(InvalidValue):
        plan(spec, ["a"])


def test_severities_and_fail_on_levels() -> None:
    result = run(VISITS, DATA)
    assert result.errors == sum(f.severity == "error" for f in result.findings) > 0
    assert result.at_or_above("error") and result.at_or_above("warning") and not result.at_or_above("never")
    clean = run(TableSpec("t", variables=(VariableSpec("a", "integer", plausible_max="5"),)), {"a": ["9"]})
    assert not clean.at_or_above("error") and clean.at_or_above("warning")


# ------------------------------------------------------------------------- typed reading vs the stdlib


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(
    st.dates(dt.date(1900, 1, 1), dt.date(2100, 12, 31)).map(lambda d: d.isoformat()),
    st.tuples(st.integers(1990, 2030), st.integers(0, 13), st.integers(0, 32)).map(
        lambda t: f"{t[0]:04d}-{t[1]:02d}-{t[2]:02d}"),
    st.text("0123456789-", max_size=11),
), min_size=1, max_size=20))
def test_dates_agree_with_the_standard_library(texts: list[str]) -> None:
    spec = VariableSpec("d", "date")
    parsed = typed.parse(pa.array(texts, pa.string()), spec)

    def reference(text: str) -> dt.date | None:
        # the standard library's reading of an ISO date, written back exactly (YYYY-MM-DD)
        try:
            value = dt.date.fromisoformat(text)
        except ValueError:
            return None
        return value if value.isoformat() == text else None

    expected = [reference(t.strip()) if t.strip() else None for t in texts]
    assert parsed.values.to_pylist() == expected


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10**20, 10**20).map(str),
    st.text("0123456789.eE+-naifNAIF", max_size=8),
), min_size=1, max_size=20))
def test_numbers_agree_with_python_float_when_finite(texts: list[str]) -> None:
    parsed = typed.parse(pa.array(texts, pa.string()), VariableSpec("x", "number"))
    import math
    import re

    def reference(text: str) -> float | None:
        # Python's float() accepts the same decimal notation plus nan/inf/underscores, which we refuse
        if not re.fullmatch(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?", text):
            return None
        value = float(text)
        return value if math.isfinite(value) else None

    assert parsed.values.to_pylist() == [reference(t.strip()) for t in texts]


@settings(max_examples=200, deadline=None)
@given(st.lists(st.one_of(
    st.integers(-10**19, 10**19).map(str),
    st.integers(0, 999).map(lambda i: f"{i}.000"),
    st.text("0123456789.xX+- ", max_size=8),
), min_size=1, max_size=20))
def test_integers_agree_with_python_int(texts: list[str]) -> None:
    def reference(text: str) -> float | None:
        # the module's definition: sign, at most 18 digits, optionally a point and zeros only
        text = text.strip()
        match = re.fullmatch(r"([+-]?\d{1,18})(\.0*)?", text)
        return float(int(match.group(1))) if match else None

    parsed = typed.parse(pa.array(texts, pa.string()), VariableSpec("x", "integer"))
    assert parsed.values.to_pylist() == [reference(t) for t in texts]


@pytest.mark.parametrize("kind, good, bad", [
    ("integer", ["12", "-3", "007", "0"], "0x10"),
    ("number", ["1.5", "-.5", "1e-3", "2"], "nan"),
    ("date", ["2024-02-29", "1999-12-31", "0001-01-01", "2023-06-01"], "2023-02-29"),
])
def test_a_clean_column_reads_as_the_same_column_with_a_bad_cell(kind: str, good: list[str], bad: str) -> None:
    # a column whose every cell converts takes Arrow's whole-column cast; one bad cell sends the column
    # through the cell-by-cell reading; the good cells must read the same either way
    spec = VariableSpec("x", kind)
    clean = typed.parse(pa.array(good, pa.string()), spec).values.to_pylist()
    mixed = typed.parse(pa.array(good + [bad], pa.string()), spec)
    assert mixed.values.to_pylist() == clean + [None]
    assert mixed.invalid.to_pylist() == [False] * len(good) + [True]
    assert None not in clean


def test_the_date_fallback_reads_iso_dates_as_the_standard_library_does() -> None:
    # the numpy reading used when a column does not convert whole, on valid and invalid dates alike
    texts = ["2024-02-29", "2023-02-29", "1900-02-29", "2000-02-29", "0001-01-01", "0000-01-01",
             "9999-12-31", "2024-13-01", "2024-1-01", "2024/01/01", "20240101xx", None, "", "abcd-ef-gh"]
    expected = []
    for text in texts:
        try:
            value = dt.date.fromisoformat(text) if text else None
            expected.append(value if value is not None and value.isoformat() == text else None)
        except ValueError:
            expected.append(None)
    assert typed._iso_dates(pa.array(texts, pa.string())).to_pylist() == expected


def test_dates_in_a_declared_format_are_strict_too() -> None:
    spec = TableSpec("t", variables=(VariableSpec("d", "date", date_format="%d/%m/%Y", maximum="2024-12-31"),))
    result = run(spec, {"d": ["29/02/2024", "31/02/2024", "1/2/2024", "2024-01-01", "01/01/2025"]})
    # 31 February does not exist; '1/2/2024' is not written as %d/%m/%Y writes it; ISO is another format
    assert finding(result, "d", "type").rows == (2, 3, 4)
    assert finding(result, "d", "range").rows == (5,)


# Digests are stored with each drop (record digests, FORMAT 1 in studylog.data.digests) and compared
# with later drops, so the function must never change silently: these values were produced by the
# first implementation of the format and pin it.
PINNED_DIGESTS = [
    ("", 0xe220a8397b1dcdaf, 0xb55a8fa067537a73),
    ("a", 0x6a3b261df74d59b, 0x38972dda84b1d1f2),
    ("visit-0001", 0xe7d83b90db194a85, 0xa084a58103ee5eb7),
    ("exactly8", 0x8a047e90d3471152, 0xa9e39763726b3ec5),
    ("0123456789abcdef", 0xa437753f62be1f50, 0x2bf6d4903a1b3aa7),
    ("é€😀", 0x37dfcd478e1e7950, 0x73696c62da50b262),
    ("x" * 64, 0xf980994278a1aa88, 0x9bc55464cd4bd03d),
    ("y" * 65, 0x7780d7c9a161e826, 0x78ce587f8baa842),
    ("z" * 200, 0x112eedab29e20605, 0x13fb9b6c87a610d3),
    (None, 0x2545f4914f6cdd1d, 0x5851f42d4c957f2d),
]


@pytest.mark.parametrize("layout", ["mixed", "alone", "same length", "many repeats", "large string"])
def test_digests_keep_the_stored_format(layout: str) -> None:
    from studylog.data.repeats import text_digests

    for text, hi, lo in PINNED_DIGESTS:
        if layout == "mixed":
            cells = [t for t, _, _ in PINNED_DIGESTS]
        elif layout == "alone":
            cells = [text]
        elif layout == "same length":
            cells = [text] * 3  # every cell the same length: the byte-matrix path
        elif layout == "many repeats":
            # few distinct values in a long batch: digested once per distinct value
            cells = ([text] + [t for t, _, _ in PINNED_DIGESTS]) * 1_000
        else:
            cells = [text, "other"]
        array = pa.array(cells, pa.large_string() if layout == "large string" else pa.string())
        got_hi, got_lo = text_digests(array)
        at = cells.index(text)
        assert (int(got_hi[at]), int(got_lo[at])) == (hi, lo), (layout, text)


@settings(max_examples=100, deadline=None)
@given(st.lists(st.one_of(st.none(), st.text(max_size=30)), min_size=1, max_size=40), st.integers(0, 5))
def test_digests_per_distinct_value_equal_the_digests_per_cell(texts: list[str | None], start: int) -> None:
    from studylog.data import repeats

    array = pa.array(texts * (9_000 // len(texts) + 1), pa.string())  # long, and few distinct values
    array = array.slice(min(start, len(array) - 1))
    spread = repeats.text_digests(array)
    direct = repeats._cell_digests(array)
    assert spread[0].tolist() == direct[0].tolist()
    assert spread[1].tolist() == direct[1].tolist()


def test_digests_do_not_depend_on_the_batch_or_on_long_cells() -> None:
    from studylog.data.repeats import row_digests, text_digests

    cells = pa.array(["x" * n for n in (0, 1, 7, 8, 9, 63, 64, 65, 200)] + [None], pa.string())
    whole = text_digests(cells)
    parts = [text_digests(cells.slice(i, 1)) for i in range(len(cells))]
    assert [int(h) for h in whole[0]] == [int(p[0][0]) for p in parts]
    # every text (and the missing cell) gets its own digest
    assert len(set(zip(whole[0].tolist(), whole[1].tolist()))) == len(cells)
    a = pa.array(["1", None, ""], pa.string())
    b = pa.array([None, "1", None], pa.string())
    rows = row_digests([a, b])
    assert len(set(rows[0].tolist())) == 3
