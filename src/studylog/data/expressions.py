"""studylog's small expression language for cross-field rules: parsing and checking (evaluation: expression_eval).

A rule is a condition every row must meet, e.g. ``discharged_on >= admitted_on``,
``pregnant = 'yes' -> sex = 'female'``, ``visits_total = visits_clinic + visits_home``.

The language
    - column names: bare (``age``, ``visit.date``; letters, digits, ``_`` and ``.``, not starting with a
      digit) or quoted for odd names (``"date of birth"``, ```weight (kg)```); a column named like a
      keyword must be quoted;
    - numbers (``12``, ``-3.5``, ``1e3``), strings in single quotes (``'yes'``, ``'it''s'``), ``true`` and
      ``false``, dates as ``date '2024-01-31'`` or a bare ISO date ``2024-01-31`` (so ``2024-01-31`` is a
      date, not two subtractions: write ``2024 - 1 - 31`` with spaces for that), datetimes as
      ``datetime '2024-01-31T10:00:00'``;
    - ``+ - * /`` on numbers; ``date - date`` is the number of days between them, ``date + n`` is n days later;
      division by zero gives a missing result;
    - comparisons ``= != < <= > >=`` (also ``==`` and ``<>``), ``x is missing``, ``x is not missing``,
      ``x in (a, b, ...)``, ``x not in (...)``;
    - ``not``, ``and``, ``or`` and ``->`` (implication: ``a -> b`` holds unless a is true and b is false).

Precedence from loosest to tightest: ``->`` (right-associative), ``or``, ``and``, ``not``, comparisons
(``is``/``in`` included; they do not chain), ``+ -``, ``* /``, unary minus. Parentheses group.

Columns are typed by their variables' types: integer and number as numbers, date, datetime, boolean, and
everything else as text. Comparing a text column with a number literal compares with the literal's text
as written (``grade = 1`` is ``grade = '1'``); a string literal compared with a date column must be a valid
date.

Missing values: an operand that is missing (an empty cell, a missing code, or a value that failed its
type) makes comparisons and arithmetic missing, and ``and``/``or``/``not``/``->`` follow three-valued
(Kleene) logic. A row violates the rule only when the whole expression is *false*; a missing result never
violates. Only ``is missing`` / ``is not missing`` look at missingness itself.

The parser is a hand-written Pratt parser; nothing is ever passed to ``eval``. Errors name the 1-based
character position. The syntax tree is made of frozen dataclasses (no closures), so a parsed rule can be
stored, compared, or compiled to another engine.
"""

from __future__ import annotations

import datetime as dt
import difflib
import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from studylog.errors import InvalidValue

# ----------------------------------------------------------------------------------------------- syntax


@dataclass(frozen=True)
class Column:
    name: str
    pos: int = 0


@dataclass(frozen=True)
class Literal:
    # kind: number, string, boolean, date, datetime; value: float, str, bool, date, datetime
    kind: str
    value: Any
    text: str = ""
    pos: int = 0


@dataclass(frozen=True)
class Unary:
    op: str  # "not" or "neg"
    operand: Node
    pos: int = 0


@dataclass(frozen=True)
class Binary:
    op: str  # -> or and = != < <= > >= + - * /
    left: Node
    right: Node
    pos: int = 0


@dataclass(frozen=True)
class IsMissing:
    operand: Node
    negated: bool = False
    pos: int = 0


@dataclass(frozen=True)
class InList:
    operand: Node
    items: tuple[Literal, ...]
    negated: bool = False
    pos: int = 0


Node = Column | Literal | Unary | Binary | IsMissing | InList

KEYWORDS = {"and", "or", "not", "is", "missing", "in", "true", "false", "date", "datetime"}
COMPARISONS = ("=", "!=", "<", "<=", ">", ">=")
LOGICAL = ("->", "or", "and")
ARITHMETIC = ("+", "-", "*", "/")


class ExpressionError(InvalidValue):
    """A rule expression that cannot be parsed or does not fit the table; names the position."""

    def __init__(self, problem: str, pos: int, text: str) -> None:
        super().__init__(f"rule expression, at position {pos}: {problem} (in: {text})")
        self.problem = problem
        self.pos = pos
        self.text = text


# ----------------------------------------------------------------------------------------------- lexer


@dataclass(frozen=True)
class Token:
    kind: str  # number, string, date, ident, op, keyword, end
    text: str
    pos: int  # 1-based
    value: Any = None


_TOKEN = re.compile(
    r"""
    (?P<space>\s+)
  | (?P<date>\d{4}-\d{2}-\d{2}(?![\w.]))
  | (?P<number>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?(?![\w]))
  | (?P<string>'(?:[^']|'')*')
  | (?P<dquoted>"(?:[^"]|"")*")
  | (?P<bquoted>`(?:[^`]|``)*`)
  | (?P<ident>[A-Za-z_][A-Za-z0-9_.]*)
  | (?P<op>->|!=|<>|<=|>=|==|[=<>+\-*/(),])
    """,
    re.VERBOSE,
)


def tokenize(text: str) -> list[Token]:
    tokens: list[Token] = []
    at = 0
    while at < len(text):
        match = _TOKEN.match(text, at)
        if match is None:
            snippet = text[at]
            if snippet in "'\"`":
                raise ExpressionError(f"unclosed quote {snippet}", at + 1, text)
            raise ExpressionError(f"unexpected character {snippet!r}", at + 1, text)
        kind = match.lastgroup or ""
        raw = match.group()
        pos = at + 1
        at = match.end()
        if kind == "space":
            continue
        if kind == "date":
            tokens.append(Token("date", raw, pos, _parse_date(raw, pos, text)))
        elif kind == "number":
            tokens.append(Token("number", raw, pos, float(raw)))
        elif kind == "string":
            tokens.append(Token("string", raw, pos, raw[1:-1].replace("''", "'")))
        elif kind == "dquoted":
            tokens.append(Token("ident", raw, pos, raw[1:-1].replace('""', '"')))
        elif kind == "bquoted":
            tokens.append(Token("ident", raw, pos, raw[1:-1].replace("``", "`")))
        elif kind == "ident":
            if raw.lower() in KEYWORDS:
                tokens.append(Token("keyword", raw.lower(), pos))
            else:
                tokens.append(Token("ident", raw, pos, raw))
        else:
            op = {"==": "=", "<>": "!="}.get(raw, raw)
            tokens.append(Token("op", op, pos))
    tokens.append(Token("end", "", len(text) + 1))
    return tokens


def _parse_date(raw: str, pos: int, text: str) -> dt.date:
    try:
        return dt.date.fromisoformat(raw)
    except ValueError:
        raise ExpressionError(f"{raw} is not a valid date", pos, text) from None


def _parse_datetime(raw: str, pos: int, text: str) -> dt.datetime:
    try:
        value = dt.datetime.fromisoformat(raw)
    except ValueError:
        raise ExpressionError(f"{raw!r} is not a valid ISO 8601 datetime", pos, text) from None
    return value.replace(tzinfo=None)


# ----------------------------------------------------------------------------------------------- parser

# binding powers: higher binds tighter
_INFIX_POWER = {"->": 10, "or": 20, "and": 30, "=": 50, "!=": 50, "<": 50, "<=": 50, ">": 50,
                ">=": 50, "is": 50, "in": 50, "not": 50, "+": 60, "-": 60, "*": 70, "/": 70}
_NOT_POWER = 40
_NEG_POWER = 80


class _Parser:
    def __init__(self, text: str) -> None:
        self.text = text
        self.tokens = tokenize(text)
        self.at = 0
        # nodes written in parentheses: a parenthesised comparison may be compared again
        self.grouped: set[int] = set()

    def peek(self, ahead: int = 0) -> Token:
        return self.tokens[min(self.at + ahead, len(self.tokens) - 1)]

    def take(self) -> Token:
        token = self.tokens[self.at]
        self.at = min(self.at + 1, len(self.tokens) - 1)
        return token

    def fail(self, problem: str, token: Token) -> ExpressionError:
        return ExpressionError(problem, token.pos, self.text)

    def expect(self, kind: str, text: str) -> Token:
        token = self.peek()
        if token.kind != kind or token.text != text:
            raise self.fail(f"expected {text!r} but found {_describe(token)}", token)
        return self.take()

    def parse(self) -> Node:
        if self.peek().kind == "end":
            raise self.fail("the expression is empty", self.peek())
        node = self.expression(0)
        token = self.peek()
        if token.kind != "end":
            raise self.fail(f"unexpected {_describe(token)}", token)
        return node

    def infix_op(self, token: Token) -> str | None:
        if token.kind == "op" and token.text in _INFIX_POWER:
            return token.text
        if token.kind == "keyword" and token.text in ("and", "or", "is", "in"):
            return token.text
        if token.kind == "keyword" and token.text == "not":
            following = self.peek(1)
            if following.kind == "keyword" and following.text == "in":
                return "not"
        return None

    def expression(self, min_power: int) -> Node:
        left = self.prefix()
        while True:
            token = self.peek()
            op = self.infix_op(token)
            if op is None:
                return left
            power = _INFIX_POWER[op]
            if power <= min_power:
                return left
            if power == 50 and _is_comparison(left) and id(left) not in self.grouped:
                raise self.fail("comparisons do not chain; use 'and' or parentheses", token)
            self.take()
            if op == "is":
                negated = False
                if self.peek().kind == "keyword" and self.peek().text == "not":
                    self.take()
                    negated = True
                self.expect("keyword", "missing")
                left = IsMissing(left, negated, token.pos)
            elif op in ("in", "not"):
                negated = op == "not"
                if negated:
                    self.expect("keyword", "in")
                left = InList(left, self.literal_list(), negated, token.pos)
            elif op == "->":
                # right-associative: a -> b -> c is a -> (b -> c)
                left = Binary("->", left, self.expression(power - 1), token.pos)
            else:
                left = Binary(op, left, self.expression(power), token.pos)

    def prefix(self) -> Node:
        token = self.take()
        if token.kind == "number":
            return Literal("number", token.value, token.text, token.pos)
        if token.kind == "string":
            return Literal("string", token.value, token.text, token.pos)
        if token.kind == "date":
            return Literal("date", token.value, token.text, token.pos)
        if token.kind == "ident":
            return Column(token.value, token.pos)
        if token.kind == "keyword":
            if token.text in ("true", "false"):
                return Literal("boolean", token.text == "true", token.text, token.pos)
            if token.text in ("date", "datetime"):
                quoted = self.peek()
                if quoted.kind != "string":
                    raise self.fail(f"expected a quoted value after {token.text}", quoted)
                self.take()
                if token.text == "date":
                    return Literal("date", _parse_date(quoted.value, quoted.pos, self.text),
                                   quoted.value, token.pos)
                return Literal("datetime", _parse_datetime(quoted.value, quoted.pos, self.text),
                               quoted.value, token.pos)
            if token.text == "not":
                return Unary("not", self.expression(_NOT_POWER), token.pos)
            raise self.fail(f"unexpected keyword {token.text!r}", token)
        if token.kind == "op" and token.text == "(":
            inner = self.expression(0)
            self.expect("op", ")")
            self.grouped.add(id(inner))
            return inner
        if token.kind == "op" and token.text == "-":
            operand = self.expression(_NEG_POWER)
            if isinstance(operand, Literal) and operand.kind == "number":
                return Literal("number", -operand.value, "-" + operand.text, token.pos)
            return Unary("neg", operand, token.pos)
        if token.kind == "end":
            raise self.fail("the expression ends too early", token)
        raise self.fail(f"unexpected {_describe(token)}", token)

    def literal_list(self) -> tuple[Literal, ...]:
        self.expect("op", "(")
        items: list[Literal] = []
        while True:
            token = self.peek()
            node = self.prefix()
            if not isinstance(node, Literal):
                raise self.fail("a list after 'in' holds literal values only", token)
            items.append(node)
            if self.peek().kind == "op" and self.peek().text == ",":
                self.take()
                continue
            self.expect("op", ")")
            return tuple(items)


def _is_comparison(node: Node) -> bool:
    return (isinstance(node, Binary) and node.op in COMPARISONS) or isinstance(node, (IsMissing, InList))


def _describe(token: Token) -> str:
    if token.kind == "end":
        return "the end of the expression"
    return repr(token.text)


def parse(text: str) -> Node:
    """The syntax tree of an expression; :class:`ExpressionError` (with the position) when malformed."""
    return _Parser(text).parse()


def columns_of(node: Node) -> list[str]:
    """The column names an expression uses, in order of first appearance."""
    found: list[str] = []

    def walk(n: Node) -> None:
        if isinstance(n, Column):
            if n.name not in found:
                found.append(n.name)
        elif isinstance(n, Unary):
            walk(n.operand)
        elif isinstance(n, Binary):
            walk(n.left)
            walk(n.right)
        elif isinstance(n, (IsMissing, InList)):
            walk(n.operand)

    walk(node)
    return found


# ----------------------------------------------------------------------------------------------- types

VALUE_KINDS = ("number", "string", "boolean", "date", "datetime")


def kind_of_variable_type(variable_type: str) -> str:
    """How a variable's column is typed inside expressions."""
    if variable_type in ("integer", "number"):
        return "number"
    if variable_type in ("date", "datetime", "boolean"):
        return variable_type
    return "string"


@dataclass(frozen=True)
class CompiledExpression:
    """A checked expression: its text, tree, the columns it reads and each column's kind."""

    text: str
    tree: Node
    columns: tuple[str, ...]
    kinds: tuple[tuple[str, str], ...]

    def kind(self, column: str) -> str:
        return dict(self.kinds)[column]


def compile_expression(text: str, column_kinds: Mapping[str, str]) -> CompiledExpression:
    """Parse ``text`` and check it against the table's columns (name -> value kind).

    Raises :class:`ExpressionError` for a malformed expression, an unknown column (with the closest
    names), or operands of the wrong kind; the result must be a condition.
    """
    tree = parse(text)
    checker = _Checker(text, column_kinds)
    kind = checker.kind(tree)
    if kind != "boolean":
        raise ExpressionError(
            f"the rule must be a condition (true or false for each row), not a {kind}", 1, text
        )
    used = columns_of(tree)
    return CompiledExpression(text, tree, tuple(used), tuple((c, column_kinds[c]) for c in used))


class _Checker:
    def __init__(self, text: str, column_kinds: Mapping[str, str]) -> None:
        self.text = text
        self.column_kinds = column_kinds

    def fail(self, problem: str, pos: int) -> ExpressionError:
        return ExpressionError(problem, pos, self.text)

    def kind(self, node: Node) -> str:
        if isinstance(node, Column):
            if node.name not in self.column_kinds:
                close = difflib.get_close_matches(node.name, list(self.column_kinds), n=3)
                hint = f"; did you mean {', '.join(close)}?" if close else ""
                raise self.fail(f"unknown column {node.name!r}{hint}", node.pos)
            return self.column_kinds[node.name]
        if isinstance(node, Literal):
            return node.kind
        if isinstance(node, Unary):
            inner = self.kind(node.operand)
            wanted = "boolean" if node.op == "not" else "number"
            if inner != wanted:
                raise self.fail(f"'{'not' if node.op == 'not' else '-'}' needs a {wanted}, not a {inner}",
                                node.pos)
            return wanted
        if isinstance(node, IsMissing):
            self.kind(node.operand)
            return "boolean"
        if isinstance(node, InList):
            left = self.kind(node.operand)
            for item in node.items:
                self.comparable(left, item, node.pos)
            return "boolean"
        left = self.kind(node.left)
        right = self.kind(node.right)
        if node.op in LOGICAL:
            for side, k in ((node.left, left), (node.right, right)):
                if k != "boolean":
                    raise self.fail(f"'{node.op}' joins conditions, not a {k}", _pos(side))
            return "boolean"
        if node.op in COMPARISONS:
            if isinstance(node.right, Literal):
                self.comparable(left, node.right, node.pos)
            elif isinstance(node.left, Literal):
                self.comparable(right, node.left, node.pos)
            elif _promoted(left) != _promoted(right):
                raise self.fail(f"cannot compare a {left} with a {right}", node.pos)
            if left == "boolean" and right == "boolean" and node.op not in ("=", "!="):
                raise self.fail("true and false can only be compared with = or !=", node.pos)
            return "boolean"
        return self.arithmetic(node.op, left, right, node.pos)

    def comparable(self, column_kind: str, literal: Literal, pos: int) -> None:
        if _coerce_literal(column_kind, literal) is None:
            raise self.fail(f"cannot compare a {column_kind} with {literal.kind} {literal.text}",
                            literal.pos or pos)

    def arithmetic(self, op: str, left: str, right: str, pos: int) -> str:
        if left == right == "number":
            return "number"
        if op == "-" and left == right and left in ("date", "datetime"):
            return "number"
        if op in ("+", "-") and left == "date" and right == "number":
            return "date"
        if op == "+" and left == "number" and right == "date":
            return "date"
        raise self.fail(f"'{op}' does not apply to a {left} and a {right}", pos)


def _pos(node: Node) -> int:
    return node.pos


def _promoted(kind: str) -> str:
    return "datetime" if kind == "date" else kind


def _coerce_literal(kind: str, literal: Literal) -> Any:
    """The literal's value as the kind it is compared with, or None when it cannot be."""
    if literal.kind == kind:
        return literal.value
    if kind == "string" and literal.kind == "number":
        return literal.text
    if kind == "datetime" and literal.kind == "date":
        return dt.datetime.combine(literal.value, dt.time())
    if kind == "date" and literal.kind == "datetime":
        return None
    if kind in ("date", "datetime") and literal.kind == "string":
        try:
            if kind == "date":
                return dt.date.fromisoformat(literal.value)
            return dt.datetime.fromisoformat(literal.value).replace(tzinfo=None)
        except ValueError:
            return None
    if kind == "date" and literal.kind == "date":
        return literal.value
    return None


# ----------------------------------------------------------------------------------------------- evaluation
# (in studylog.data.expression_eval, which needs pyarrow; these stay here so that one module is the API)


def evaluate(compiled: CompiledExpression, columns: Mapping[str, Any], length: int) -> Any:
    """The expression over typed Arrow columns: a boolean array, null where the result is unknown
    (``studylog.data.expression_eval.evaluate``)."""
    from studylog.data import expression_eval

    return expression_eval.evaluate(compiled, columns, length)


def violations(compiled: CompiledExpression, columns: Mapping[str, Any], length: int) -> Any:
    """A boolean mask of the rows that violate the rule: where the expression is false (never null)."""
    from studylog.data import expression_eval

    return expression_eval.violations(compiled, columns, length)
