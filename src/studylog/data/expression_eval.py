"""Evaluating a compiled cross-field rule over typed Arrow columns (three-valued, vectorised).

The language, its parser and its type checker are in ``studylog.data.expressions``; this part needs
pyarrow, so it is imported only when rows are checked.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from studylog.data.expressions import (
    COMPARISONS,
    LOGICAL,
    Binary,
    Column,
    CompiledExpression,
    InList,
    IsMissing,
    Literal,
    Node,
    Unary,
    _Checker,
    _coerce_literal,
)


def evaluate(compiled: CompiledExpression, columns: Mapping[str, Any], length: int) -> Any:
    """The expression over typed Arrow columns: a boolean array, null where the result is unknown.

    ``columns`` maps each column the expression reads to an Arrow array of its kind: float64 for numbers,
    date32 for dates, timestamp for datetimes, bool for booleans, string otherwise; missing values null.
    """
    import pyarrow as pa

    result = _Evaluator(compiled, columns).value(compiled.tree)
    if isinstance(result, pa.Scalar):
        result = pa.array([result.as_py()] * length, pa.bool_())
    return result


def violations(compiled: CompiledExpression, columns: Mapping[str, Any], length: int) -> Any:
    """A boolean mask of the rows that violate the rule: where the expression is false (never null)."""
    import pyarrow.compute as pc

    outcome = evaluate(compiled, columns, length)
    return pc.fill_null(pc.invert(outcome), False)


class _Evaluator:
    def __init__(self, compiled: CompiledExpression, columns: Mapping[str, Any]) -> None:
        self.compiled = compiled
        self.columns = columns

    def kind(self, node: Node) -> str:
        return _Checker(self.compiled.text, dict(self.compiled.kinds)).kind(node)

    def value(self, node: Node) -> Any:
        import pyarrow as pa
        import pyarrow.compute as pc

        if isinstance(node, Column):
            return self.columns[node.name]
        if isinstance(node, Literal):
            return _scalar(node.kind, node.value)
        if isinstance(node, Unary):
            inner = self.value(node.operand)
            return pc.invert(inner) if node.op == "not" else pc.negate(inner)
        if isinstance(node, IsMissing):
            inner = self.value(node.operand)
            missing = pc.is_null(inner)
            return pc.invert(missing) if node.negated else missing
        if isinstance(node, InList):
            kind = self.kind(node.operand)
            inner = self.value(node.operand)
            values = [_coerce_literal(kind, item) for item in node.items]
            value_set = pa.array(values, _arrow_type(kind))
            if isinstance(inner, pa.Scalar):
                inner = pa.array([inner.as_py()], inner.type)
            found = pc.is_in(inner, value_set=value_set)
            found = pc.if_else(pc.is_null(inner), pa.scalar(None, pa.bool_()), found)
            return pc.invert(found) if node.negated else found
        if node.op in LOGICAL:
            left = self.value(node.left)
            right = self.value(node.right)
            if node.op == "and":
                return pc.and_kleene(left, right)
            if node.op == "or":
                return pc.or_kleene(left, right)
            return pc.or_kleene(pc.invert(left), right)
        if node.op in COMPARISONS:
            return self.comparison(node)
        return self.arithmetic(node)

    def comparison(self, node: Binary) -> Any:
        import pyarrow.compute as pc

        left_kind = self.kind(node.left)
        right_kind = self.kind(node.right)
        if isinstance(node.right, Literal):
            left = self.value(node.left)
            right = _scalar(left_kind, _coerce_literal(left_kind, node.right))
        elif isinstance(node.left, Literal):
            right = self.value(node.right)
            left = _scalar(right_kind, _coerce_literal(right_kind, node.left))
        else:
            left = self.value(node.left)
            right = self.value(node.right)
            if {left_kind, right_kind} == {"date", "datetime"}:
                left, right = _as_datetime(left, left_kind), _as_datetime(right, right_kind)
        function = {"=": pc.equal, "!=": pc.not_equal, "<": pc.less, "<=": pc.less_equal,
                    ">": pc.greater, ">=": pc.greater_equal}[node.op]
        return function(left, right)

    def arithmetic(self, node: Binary) -> Any:
        import pyarrow as pa
        import pyarrow.compute as pc

        left_kind = self.kind(node.left)
        right_kind = self.kind(node.right)
        left = self.value(node.left)
        right = self.value(node.right)
        if left_kind == right_kind == "number":
            if node.op == "+":
                return pc.add(left, right)
            if node.op == "-":
                return pc.subtract(left, right)
            if node.op == "*":
                return pc.multiply(left, right)
            zero = pc.equal(right, 0.0)
            safe = pc.if_else(zero, pa.scalar(None, pa.float64()), right)
            return pc.divide(left, safe)
        if left_kind == right_kind == "date":
            return pc.cast(pc.days_between(right, left), pa.float64())
        if left_kind == right_kind == "datetime":
            micros = pc.cast(pc.subtract(_as_micros(left), _as_micros(right)), pa.float64())
            return pc.divide(micros, 86_400_000_000.0)
        # a date plus or minus a number of days (whole days, rounded down)
        date, days = (left, right) if left_kind == "date" else (right, left)
        days = pc.floor(days)
        if node.op == "-":
            days = pc.negate(days)
        epoch_days = pc.cast(pc.cast(date, pa.int32()), pa.float64())
        moved = pc.cast(pc.cast(pc.add(epoch_days, days), pa.int32()), pa.date32())
        return moved


def _arrow_type(kind: str) -> Any:
    import pyarrow as pa

    return {"number": pa.float64(), "string": pa.string(), "boolean": pa.bool_(),
            "date": pa.date32(), "datetime": pa.timestamp("us")}[kind]


def _scalar(kind: str, value: Any) -> Any:
    import pyarrow as pa

    return pa.scalar(value, _arrow_type(kind))


def _as_datetime(value: Any, kind: str) -> Any:
    import pyarrow as pa
    import pyarrow.compute as pc

    if kind == "date":
        return pc.cast(value, pa.timestamp("us"))
    return value


def _as_micros(value: Any) -> Any:
    import pyarrow as pa
    import pyarrow.compute as pc

    return pc.cast(pc.cast(value, pa.timestamp("us")), pa.int64())
