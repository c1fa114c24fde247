"""The expression language of cross-field rules: parser, checker and vectorised evaluation.

The evaluation is compared with a straightforward reference written here in plain Python (three-valued
logic on Python values, row by row); the parser's precedence is checked by printing random syntax trees
with the fewest parentheses and parsing them back.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from typing import Any

import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data import expressions as ex
from studylog.data.expressions import (
    Binary,
    Column,
    ExpressionError,
    InList,
    IsMissing,
    Literal,
    Unary,
    compile_expression,
    parse,
    violations,
)

KINDS = {"a": "number", "b": "number", "c": "number", "s": "string", "t": "string",
         "d1": "date", "d2": "date", "p": "boolean", "odd name": "number"}


def strip(node: Any) -> Any:
    """The tree without positions and literal spellings (what the structure means)."""
    if isinstance(node, Literal):
        return Literal(node.kind, node.value)
    if isinstance(node, Column):
        return Column(node.name)
    if isinstance(node, Unary):
        return Unary(node.op, strip(node.operand))
    if isinstance(node, Binary):
        return Binary(node.op, strip(node.left), strip(node.right))
    if isinstance(node, IsMissing):
        return IsMissing(strip(node.operand), node.negated)
    if isinstance(node, InList):
        return InList(strip(node.operand), tuple(strip(i) for i in node.items), node.negated)
    raise AssertionError(node)


# ---------------------------------------------------------------------------------- parsing by hand


def test_precedence_of_and_over_or_and_implication_lowest() -> None:
    tree = strip(parse("a > 1 or b > 2 and c > 3 -> p"))
    gt = lambda col, n: Binary(">", Column(col), Literal("number", float(n)))  # noqa: E731
    assert tree == Binary("->", Binary("or", gt("a", 1), Binary("and", gt("b", 2), gt("c", 3))),
                          Column("p"))


def test_implication_is_right_associative() -> None:
    tree = strip(parse("p -> p -> p"))
    assert tree == Binary("->", Column("p"), Binary("->", Column("p"), Column("p")))


def test_arithmetic_precedence_and_parentheses() -> None:
    assert strip(parse("a = b + c * 2")) == Binary(
        "=", Column("a"), Binary("+", Column("b"), Binary("*", Column("c"), Literal("number", 2.0))))
    assert strip(parse("a = (b + c) * 2")) == Binary(
        "=", Column("a"), Binary("*", Binary("+", Column("b"), Column("c")), Literal("number", 2.0)))
    assert strip(parse("a - b - c = 0")).left == Binary("-", Binary("-", Column("a"), Column("b")),
                                                       Column("c"))


def test_not_binds_looser_than_comparison_tighter_than_and() -> None:
    assert strip(parse("not a = 1 and p")) == Binary(
        "and", Unary("not", Binary("=", Column("a"), Literal("number", 1.0))), Column("p"))


def test_literals_dates_strings_quoted_names() -> None:
    assert strip(parse("d1 >= 2024-01-31")).right == Literal("date", dt.date(2024, 1, 31))
    assert strip(parse("d1 < date '2024-02-29'")).right == Literal("date", dt.date(2024, 2, 29))
    assert strip(parse("s = 'it''s'")).right == Literal("string", "it's")
    assert strip(parse('"odd name" > 2')).left == Column("odd name")
    assert strip(parse("`odd name` > 2")).left == Column("odd name")
    assert strip(parse("a = -2.5e1")).right == Literal("number", -25.0)
    assert strip(parse("s not in ('x', 'y')")) == InList(
        Column("s"), (Literal("string", "x"), Literal("string", "y")), True)
    assert strip(parse("s IS NOT MISSING")) == IsMissing(Column("s"), True)


@pytest.mark.parametrize(
    ("text", "position", "words"),
    [
        ("a >", 4, "ends too early"),
        ("a > 1)", 6, "unexpected ')'"),
        ("(a > 1", 7, "expected ')'"),
        ("a < b < c", 7, "do not chain"),
        ("s = 'open", 5, "unclosed quote"),
        ("a > 1 # b", 7, "unexpected character"),
        ("", 1, "empty"),
        ("d1 > 2024-02-30", 6, "not a valid date"),
        ("s in (a)", 7, "literal values only"),
        ("a is 3", 6, "expected 'missing'"),
        ("a > 1 and", 10, "ends too early"),
    ],
)
def test_malformed_expressions_name_the_position(text: str, position: int, words: str) -> None:
    with pytest.raises(ExpressionError) as caught:
        compile_expression(text, KINDS)
    assert caught.value.pos == position
    assert words in caught.value.problem
    assert f"at position {position}" in caught.value.message


def test_unknown_column_is_rejected_with_its_position_and_a_suggestion() -> None:
    with pytest.raises(ExpressionError) as caught:
        compile_expression("a > 1 and dd1 >= d2", KINDS)
    assert caught.value.pos == 11
    assert "unknown column 'dd1'" in caught.value.problem
    assert "d1" in caught.value.problem


@pytest.mark.parametrize(
    ("text", "words"),
    [("a + 1", "must be a condition"), ("s > 1 and a", "joins conditions"),
     ("d1 = 'soon'", "cannot compare"), ("a = s", "cannot compare"), ("s + 1 = 2", "does not apply"),
     ("p < true", "only be compared")],
)
def test_operands_of_the_wrong_kind_are_rejected(text: str, words: str) -> None:
    with pytest.raises(ExpressionError) as caught:
        compile_expression(text, KINDS)
    assert words in caught.value.problem


def test_the_parser_never_evaluates_python() -> None:
    with pytest.raises(ExpressionError):
        compile_expression("__import__('os').system('true')", KINDS)


# ---------------------------------------------------------------------------------- evaluation by hand


def _violations(text: str, columns: dict[str, list[Any]]) -> list[bool]:
    types = {"number": pa.float64(), "string": pa.string(), "date": pa.date32(), "boolean": pa.bool_()}
    arrays = {name: pa.array(values, types[KINDS[name]]) for name, values in columns.items()}
    length = len(next(iter(columns.values())))
    return violations(compile_expression(text, KINDS), arrays, length).to_pylist()


def test_implication_example_from_the_issue() -> None:
    # pregnant = 'yes' -> sex = 'female': only a 'yes' with a known other sex violates
    found = _violations("s = 'yes' -> t = 'female'",
                        {"s": ["yes", "yes", "no", None, "yes"], "t": ["female", "male", "male", "male", None]})
    assert found == [False, True, False, False, False]


def test_missing_operands_do_not_violate_unless_asked() -> None:
    assert _violations("a = b + c", {"a": [3.0, 4.0, None], "b": [1.0, 1.0, 1.0], "c": [2.0, 2.0, 2.0]}) \
        == [False, True, False]
    assert _violations("a is not missing", {"a": [1.0, None]}) == [False, True]
    assert _violations("a is missing -> b is not missing", {"a": [None, None, 1.0], "b": [None, 2.0, None]}) \
        == [True, False, False]


def test_dates_subtract_to_days_and_compare() -> None:
    d = dt.date
    columns = {"d1": [d(2024, 1, 1), d(2024, 1, 10), None], "d2": [d(2024, 1, 31), d(2024, 1, 5), d(2024, 1, 1)]}
    assert _violations("d2 >= d1", columns) == [False, True, False]
    assert _violations("d2 - d1 <= 29", columns) == [True, False, False]
    assert _violations("d1 + 30 = d2", columns) == [False, True, False]
    assert _violations("d2 < '2024-01-06'", columns) == [True, False, False]


def test_division_by_zero_is_missing_not_a_violation() -> None:
    assert _violations("a / b > 1", {"a": [4.0, 4.0, 1.0], "b": [2.0, 0.0, 2.0]}) == [False, False, True]


def test_text_column_compared_with_a_number_uses_its_text() -> None:
    assert _violations("s = 1", {"s": ["1", "2", "1.0"]}) == [False, True, True]


def test_in_list_with_missing_value_is_unknown() -> None:
    assert _violations("s in ('a', 'b')", {"s": ["a", "c", None]}) == [False, True, False]
    assert _violations("s not in ('a', 'b')", {"s": ["a", "c", None]}) == [True, False, False]


# ---------------------------------------------------------------------------------- generated expressions

NUMBER_COLUMNS = ("a", "b", "c")


def _numbers() -> st.SearchStrategy[Any]:
    leaf = st.one_of(
        st.sampled_from(NUMBER_COLUMNS).map(Column),
        st.integers(-5, 5).map(lambda n: Literal("number", float(n), str(n))),
    )

    def extend(inner: st.SearchStrategy[Any]) -> st.SearchStrategy[Any]:
        return st.builds(Binary, st.sampled_from(["+", "-", "*", "/"]), inner, inner)

    return st.recursive(leaf, extend, max_leaves=4)


def _conditions() -> st.SearchStrategy[Any]:
    numbers = _numbers()
    comparison = st.builds(Binary, st.sampled_from(["=", "!=", "<", "<=", ">", ">="]), numbers, numbers)
    text_test = st.builds(Binary, st.sampled_from(["=", "!="]), st.just(Column("s")),
                          st.sampled_from(["x", "y"]).map(lambda v: Literal("string", v, f"'{v}'")))
    missing = st.builds(IsMissing, st.sampled_from([Column(c) for c in (*NUMBER_COLUMNS, "s")]),
                        st.booleans())
    member = st.builds(InList, st.just(Column("s")),
                       st.just((Literal("string", "x", "'x'"), Literal("string", "z", "'z'"))), st.booleans())
    leaf = st.one_of(comparison, text_test, missing, member, st.just(Column("p")))

    def extend(inner: st.SearchStrategy[Any]) -> st.SearchStrategy[Any]:
        return st.one_of(
            st.builds(Binary, st.sampled_from(["and", "or", "->"]), inner, inner),
            st.builds(Unary, st.just("not"), inner),
        )

    return st.recursive(leaf, extend, max_leaves=5)


POWER = {"->": 10, "or": 20, "and": 30, "not": 40, "cmp": 50, "+": 60, "-": 60, "*": 70, "/": 70}


def render(node: Any) -> tuple[str, int]:
    """Text with the fewest parentheses, and the binding power of its top operator."""
    if isinstance(node, Column):
        return node.name, 100
    if isinstance(node, Literal):
        if node.kind == "number" and node.value < 0:
            return f"({node.text})", 100
        return node.text, 100
    if isinstance(node, Unary):
        inner, power = render(node.operand)
        return "not " + (inner if power > POWER["not"] else f"({inner})"), POWER["not"]
    if isinstance(node, IsMissing):
        inner, power = render(node.operand)
        return f"{wrap(inner, power, POWER['cmp'])} is {'not ' if node.negated else ''}missing", POWER["cmp"]
    if isinstance(node, InList):
        inner, power = render(node.operand)
        items = ", ".join(i.text for i in node.items)
        return f"{wrap(inner, power, POWER['cmp'])} {'not ' if node.negated else ''}in ({items})", POWER["cmp"]
    op_power = POWER["cmp"] if node.op in ex.COMPARISONS else POWER[node.op]
    left, left_power = render(node.left)
    right, right_power = render(node.right)
    if node.op == "->":
        left = wrap(left, left_power, op_power)
        right = right if right_power >= op_power else f"({right})"
    else:
        left = wrap(left, left_power, op_power, left_side=True)
        right = wrap(right, right_power, op_power)
    return f"{left} {node.op} {right}", op_power


def wrap(text: str, power: int, parent: int, left_side: bool = False) -> str:
    # left-associative operators: the left operand may share the parent's power, the right may not;
    # comparisons never chain, so an operand at comparison power is always parenthesised
    if power > parent or (left_side and power == parent and parent != POWER["cmp"]):
        return text
    return f"({text})"


def reference(node: Any, row: dict[str, Any]) -> Any:
    """Plain-Python three-valued evaluation of one row (None = missing/unknown)."""
    if isinstance(node, Column):
        return row[node.name]
    if isinstance(node, Literal):
        return node.value
    if isinstance(node, Unary):
        value = reference(node.operand, row)
        return None if value is None else not value
    if isinstance(node, IsMissing):
        missing = reference(node.operand, row) is None
        return not missing if node.negated else missing
    if isinstance(node, InList):
        value = reference(node.operand, row)
        if value is None:
            return None
        found = value in [i.value for i in node.items]
        return not found if node.negated else found
    if node.op in ("and", "or", "->"):
        left = reference(node.left, row)
        right = reference(node.right, row)
        if node.op == "->":
            left = None if left is None else not left
        if node.op == "and":
            if left is False or right is False:
                return False
            return None if left is None or right is None else True
        if left is True or right is True:
            return True
        return None if left is None or right is None else False
    left = reference(node.left, row)
    right = reference(node.right, row)
    if left is None or right is None:
        return None
    if node.op == "+":
        return left + right
    if node.op == "-":
        return left - right
    if node.op == "*":
        return left * right
    if node.op == "/":
        return None if right == 0 else left / right
    if isinstance(left, float) and (math.isnan(left) or math.isnan(right)):
        return False if node.op != "!=" else True
    return {"=": left == right, "!=": left != right, "<": left < right, "<=": left <= right,
            ">": left > right, ">=": left >= right}[node.op]


ROWS = st.lists(
    st.fixed_dictionaries({
        "a": st.one_of(st.none(), st.integers(-3, 3).map(float)),
        "b": st.one_of(st.none(), st.integers(-3, 3).map(float)),
        "c": st.one_of(st.none(), st.sampled_from([0.0, 0.5, 2.0, -1.0])),
        "s": st.one_of(st.none(), st.sampled_from(["x", "y", "z"])),
        "p": st.one_of(st.none(), st.booleans()),
    }),
    min_size=1, max_size=12,
)


@settings(max_examples=300, deadline=None)
@given(tree=_conditions())
def test_generated_expressions_parse_back_to_the_same_tree(tree: Any) -> None:
    text, _ = render(tree)
    assert strip(parse(text)) == strip(tree), text


@settings(max_examples=300, deadline=None)
@given(tree=_conditions(), rows=ROWS)
def test_generated_expressions_evaluate_like_the_reference(tree: Any, rows: list[dict[str, Any]]) -> None:
    text, _ = render(tree)
    compiled = compile_expression(text, KINDS)
    arrays = {
        "a": pa.array([r["a"] for r in rows], pa.float64()),
        "b": pa.array([r["b"] for r in rows], pa.float64()),
        "c": pa.array([r["c"] for r in rows], pa.float64()),
        "s": pa.array([r["s"] for r in rows], pa.string()),
        "p": pa.array([r["p"] for r in rows], pa.bool_()),
    }
    got = ex.evaluate(compiled, {name: arrays[name] for name in compiled.columns}, len(rows)).to_pylist()
    expected = [reference(tree, row) for row in rows]
    for value, want, row in zip(got, expected, rows):
        assert value == want, (text, row, value, want)


def test_the_tree_is_plain_frozen_data() -> None:
    compiled = compile_expression("a > 1 -> s = 'x'", KINDS)
    assert dataclasses.is_dataclass(compiled.tree)
    assert compiled.columns == ("a", "s")
    with pytest.raises(dataclasses.FrozenInstanceError):
        compiled.tree.op = "or"  # type: ignore[misc]
