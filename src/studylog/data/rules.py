"""The rules of a check, compiled from the dictionary: one frozen dataclass per rule, with its parameters.

Each rule has ``evaluate(context, state) -> Tally`` (vectorised over one record batch),
``new_state()`` (None, except for the rules that remember digests across batches) and
``finish(tally) -> Finding | None``. Rules hold no closures and no data, so a plan can be printed,
compared, sent to another process, or translated to another engine.

Which rules a variable gets (deprecated variables and those with role ``excluded`` get none):

==================  ==========  =================================================================
rule                severity    when
==================  ==========  =================================================================
type                error       integer, number, boolean, date, datetime
level               error       categorical or ordinal with declared levels (exact text)
range               error       minimum and/or maximum (possible values)
plausible           warning     plausible minimum and/or maximum; counts values inside the possible
                                range but outside the plausible one
required            error       required: counts blank cells (a declared missing code is an answer)
missing-share       warning     max_missing: share of blank or missing-coded cells above it
unique              error       unique (skipped when the variable alone is the table's key)
pattern             error       pattern: the whole value must match (RE2 syntax)
key                 error       the table's key: repeated keys, and rows with a key part missing
repeated-row        warning     any row equal in every column to an earlier row
<rule name>         its own     each active cross-field rule of the table
==================  ==========  =================================================================
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from studylog.data import typed
from studylog.data.check import (
    EXAMPLES,
    Binding,
    BatchContext,
    CheckPlan,
    Finding,
    Tally,
)
from studylog.data.spec import LEVEL_TYPES, TableSpec, VariableSpec
from studylog.errors import InvalidValue

TYPED = ("integer", "number", "boolean", "date", "datetime")
RANGED = ("integer", "number", "date", "datetime")


def _finding(rule: Any, tally: Tally, message: str) -> Finding:
    return Finding(
        variable=rule.variable, rule=rule.name, severity=rule.severity, count=tally.count,
        rows=tuple(e.row for e in tally.examples), keys=tuple(e.key for e in tally.examples),
        values=tuple(e.value for e in tally.examples), message=message,
    )


def _count(mask: Any) -> int:
    import pyarrow.compute as pc

    return int(pc.sum(mask).as_py() or 0)


def _shown(values: Sequence[str | None], masked: bool, limit: int = 3) -> str:
    if masked:
        return ""
    seen: list[str] = []
    for value in values:
        if value is not None and value not in seen:
            seen.append(value)
    if not seen:
        return ""
    return " (e.g. " + ", ".join(repr(v) for v in seen[:limit]) + ")"


def _plural(count: int, one: str, many: str | None = None) -> str:
    return f"{count} {one if count == 1 else (many or one + 's')}"


class _Stateless:
    def new_state(self) -> Any:
        return None


@dataclass(frozen=True)
class TypeRule(_Stateless):
    variable: str
    column: str
    type: str
    masked: bool
    name: str = "type"
    severity: str = "error"

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        invalid = context.parsed(self.variable).invalid
        count = _count(invalid)
        return Tally(count, context.examples(invalid, [self.column]) if count else [])

    def finish(self, tally: Tally) -> Finding | None:
        if not tally.count:
            return None
        what = typed.TYPE_WORDS.get(self.type, self.type)
        return _finding(self, tally, f"{_plural(tally.count, 'value')} that {'is' if tally.count == 1 else 'are'}"
                                     f" not {what}{_shown(_values(tally), self.masked)}")


@dataclass(frozen=True)
class LevelRule(_Stateless):
    variable: str
    column: str
    codes: tuple[str, ...]
    masked: bool
    name: str = "level"
    severity: str = "error"

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        import pyarrow as pa
        import pyarrow.compute as pc

        parsed = context.parsed(self.variable)
        codes = pa.array(self.codes, pa.string())
        known = context.per_value(self.column, lambda cells: pc.is_in(cells, value_set=codes), False)
        wrong = pc.and_(pc.invert(parsed.missing), pc.invert(known))
        count = _count(wrong)
        return Tally(count, context.examples(wrong, [self.column]) if count else [])

    def finish(self, tally: Tally) -> Finding | None:
        if not tally.count:
            return None
        hints: list[str] = []
        if not self.masked:
            normal = {_normal(c): c for c in self.codes}
            for value in _values(tally):
                if value is None or any(value in h for h in hints):
                    continue
                near = normal.get(_normal(value))
                hints.append(f"{value!r} resembles {near!r}" if near is not None else repr(value))
                if len(hints) == 3:
                    break
        listed = ", ".join(self.codes[:8]) + (", ..." if len(self.codes) > 8 else "")
        detail = f" (e.g. {'; '.join(hints)})" if hints else ""
        return _finding(self, tally, f"{_plural(tally.count, 'value')} not among the levels "
                                     f"[{listed}]{detail}")


def _normal(text: str) -> str:
    return " ".join(text.split()).casefold()


def _values(tally: Tally) -> list[str | None]:
    return [e.value for e in tally.examples]


@dataclass(frozen=True)
class RangeRule(_Stateless):
    """Values outside [low, high]; for ``plausible``, only those inside the possible range."""

    variable: str
    column: str
    type: str
    low: Any
    high: Any
    masked: bool
    possible_low: Any = None
    possible_high: Any = None
    name: str = "range"
    severity: str = "error"

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        import pyarrow as pa
        import pyarrow.compute as pc

        values = context.parsed(self.variable).values
        outside = pc.and_(pc.is_valid(values), pa.scalar(False))
        if self.low is not None:
            outside = pc.or_(outside, pc.fill_null(pc.less(values, _scalar(self.low, values)), False))
        if self.high is not None:
            outside = pc.or_(outside, pc.fill_null(pc.greater(values, _scalar(self.high, values)), False))
        if self.possible_low is not None:
            outside = pc.and_(outside, pc.fill_null(
                pc.greater_equal(values, _scalar(self.possible_low, values)), False))
        if self.possible_high is not None:
            outside = pc.and_(outside, pc.fill_null(
                pc.less_equal(values, _scalar(self.possible_high, values)), False))
        count = _count(outside)
        if not count:
            return Tally()
        offending = pc.filter(values, outside)
        low, high = pc.min(offending).as_py(), pc.max(offending).as_py()
        return Tally(count, context.examples(outside, [self.column]), low=low, high=high)

    def finish(self, tally: Tally) -> Finding | None:
        if not tally.count:
            return None
        which = "possible" if self.name == "range" else "plausible"
        bounds = f"[{_text(self.low) if self.low is not None else '-inf'}, " \
                 f"{_text(self.high) if self.high is not None else 'inf'}]"
        extremes = "" if self.masked else f" (lowest {_text(tally.low)}, highest {_text(tally.high)})"
        return _finding(self, tally, f"{_plural(tally.count, 'value')} outside the {which} range "
                                     f"{bounds}{extremes}")


def _scalar(value: Any, like: Any) -> Any:
    import pyarrow as pa

    return pa.scalar(value, like.type)


def _text(value: Any) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return str(value)


@dataclass(frozen=True)
class RequiredRule(_Stateless):
    variable: str
    column: str
    name: str = "required"
    severity: str = "error"

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        empty = context.parsed(self.variable).empty
        count = _count(empty)
        return Tally(count, context.examples(empty, [self.column]) if count else [])

    def finish(self, tally: Tally) -> Finding | None:
        if not tally.count:
            return None
        return _finding(self, tally, f"{_plural(tally.count, 'row')} with no value, "
                                     "but a value is required")


@dataclass(frozen=True)
class MissingShareRule(_Stateless):
    variable: str
    column: str
    max_missing: float
    name: str = "missing-share"
    severity: str = "warning"

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        missing = context.parsed(self.variable).missing
        count = _count(missing)
        return Tally(count, context.examples(missing, [self.column]) if count else [])

    def finish(self, tally: Tally) -> Finding | None:
        if tally.rows == 0 or tally.count / tally.rows <= self.max_missing:
            return None
        share = tally.count / tally.rows
        return _finding(self, tally, f"missing in {share:.1%} of rows ({tally.count} of {tally.rows}); "
                                     f"at most {self.max_missing:.1%} expected")


@dataclass(frozen=True)
class PatternRule(_Stateless):
    variable: str
    column: str
    pattern: str
    masked: bool
    name: str = "pattern"
    severity: str = "error"

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        import pyarrow.compute as pc

        parsed = context.parsed(self.variable)
        pattern = f"^(?:{self.pattern})$"
        matches = context.per_value(self.column, lambda cells: pc.match_substring_regex(cells, pattern))
        wrong = pc.and_(pc.invert(parsed.missing), pc.invert(pc.fill_null(matches, True)))
        count = _count(wrong)
        return Tally(count, context.examples(wrong, [self.column]) if count else [])

    def finish(self, tally: Tally) -> Finding | None:
        if not tally.count:
            return None
        return _finding(self, tally, f"{_plural(tally.count, 'value')} not matching the pattern "
                                     f"{self.pattern}{_shown(_values(tally), self.masked)}")


class _Remembering:
    def new_state(self) -> Any:
        from studylog.data.repeats import SeenDigests

        return SeenDigests()


@dataclass(frozen=True)
class UniqueRule(_Remembering):
    variable: str
    column: str
    name: str = "unique"
    severity: str = "error"

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        import numpy as np

        present = np.invert(context.parsed(self.variable).missing.to_numpy(zero_copy_only=False))
        hi, lo = context.digest(self.column)
        repeat = np.zeros(context.length, dtype=bool)
        repeat[present] = state.observe(hi[present], lo[present])
        count = int(repeat.sum())
        return Tally(count, context.examples(repeat, [self.column]) if count else [])

    def finish(self, tally: Tally) -> Finding | None:
        if not tally.count:
            return None
        return _finding(self, tally, f"{_plural(tally.count, 'row')} repeating the value of an earlier "
                                     "row (first occurrences not counted); values must be unique")


# what the key rule hands over to the repeated-row rule on each batch (BatchContext.hand_over)
KEY_OFFENDING = "key-offending"


@dataclass(frozen=True)
class KeyRule(_Remembering):
    columns: tuple[str, ...]  # the file columns holding the key
    names: tuple[str, ...]  # the key's variables
    name: str = "key"
    severity: str = "error"

    @property
    def variable(self) -> str:
        return ",".join(self.names)

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        import numpy as np
        import pyarrow.compute as pc

        absent = np.zeros(context.length, dtype=bool)
        for column in self.columns:
            blank = pc.fill_null(pc.equal(pc.utf8_trim_whitespace(context.column(column)), ""), True)
            absent |= blank.to_numpy(zero_copy_only=False)
        hi, lo = context.key_digest()
        repeat = np.zeros(context.length, dtype=bool)
        keyed = ~absent
        repeat[keyed] = state.observe(hi[keyed], lo[keyed])
        offending = repeat | absent
        context.hand_over(KEY_OFFENDING, offending)
        count = int(offending.sum())
        examples = context.examples(offending, list(self.columns)) if count else []
        return Tally(count, examples, other=int(absent.sum()))

    def finish(self, tally: Tally) -> Finding | None:
        if not tally.count:
            return None
        missing = tally.other
        repeats = tally.count - missing
        parts = []
        if repeats:
            parts.append(f"{_plural(repeats, 'row')} repeating the key ({', '.join(self.names)}) of an "
                         "earlier row (first occurrences not counted)")
        if missing:
            parts.append(f"{_plural(missing, 'row')} with the key (or part of it) missing")
        return _finding(self, tally, "; ".join(parts))


@dataclass(frozen=True)
class RepeatedRowRule(_Remembering):
    """Rows equal in every column to an earlier row.

    ``keyed``: the plan's key rule runs before this one on each batch. A row equal to an earlier row has
    the same key cells, so it either repeats an earlier row's key or has a key cell missing: only those
    rows (``KeyRule`` hands them over) are looked up among the earlier batches' row digests, which then
    wait in temporary files (``SeenDigests(on_disk=True)``) instead of memory. Rows of a batch are still
    compared with each other, so the counts and examples are those of a lookup of every row.
    """

    columns: tuple[str, ...]
    name: str = "repeated-row"
    severity: str = "warning"
    variable: str | None = None
    keyed: bool = False

    def new_state(self) -> Any:
        from studylog.data.repeats import SeenDigests

        return SeenDigests(on_disk=self.keyed)

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        hi, lo = context.row_digest()
        repeat = state.observe(hi, lo, looked_up=context.handed(KEY_OFFENDING) if self.keyed else None)
        count = int(repeat.sum())
        shown = list(context.plan.key_columns) or list(self.columns)
        return Tally(count, context.examples(repeat, shown) if count else [])

    def finish(self, tally: Tally) -> Finding | None:
        if not tally.count:
            return None
        return _finding(self, tally, f"{_plural(tally.count, 'row')} equal in every column to an earlier "
                                     "row (first occurrences not counted)")


@dataclass(frozen=True)
class CrossFieldRule(_Stateless):
    """A rule of the study in the expression language; a row breaks it where the expression is false."""

    name: str
    expression: str
    severity: str
    compiled: Any  # studylog.data.expressions.CompiledExpression (frozen dataclasses)
    bindings: tuple[tuple[str, str], ...]  # (variable, file column) of each column the rule reads
    variable: str | None = None

    def evaluate(self, context: BatchContext, state: Any) -> Tally:
        from studylog.data.expressions import violations

        typed_columns = {variable: context.parsed(variable).values for variable, _ in self.bindings}
        broken = violations(self.compiled, typed_columns, context.length)
        count = _count(broken)
        columns = [column for _, column in self.bindings]
        return Tally(count, context.examples(broken, columns) if count else [])

    def finish(self, tally: Tally) -> Finding | None:
        if not tally.count:
            return None
        return _finding(self, tally, f"{_plural(tally.count, 'row')} breaking the rule: {self.expression}")


# ---------------------------------------------------------------------------------------------- the plan


def bind(spec: TableSpec, columns: Sequence[str]) -> tuple[list[Binding], list[Finding]]:
    """Match variables to file columns (by name, else by alias); findings about the header."""
    present = set(columns)
    bindings: list[Binding] = []
    findings: list[Finding] = []
    claimed: set[str] = set()
    for variable in spec.variables:
        column = variable.name if variable.name in present else next(
            (a for a in variable.aliases if a in present and a not in claimed), None)
        if column is None:
            if variable.status == "deprecated":
                continue
            if variable.required or variable.status == "confirmed":
                findings.append(_column_finding(variable.name, "absent-column", "error",
                                                f"no column '{variable.name}' in the file"
                                                + _alias_note(variable)))
            else:
                findings.append(_column_finding(variable.name, "absent-column", "info",
                                                f"no column '{variable.name}' in the file (optional, "
                                                f"{variable.status})"))
            continue
        claimed.add(column)
        bindings.append(Binding(variable, column))
        if column != variable.name:
            findings.append(_column_finding(variable.name, "renamed-column", "warning",
                                            f"found under its earlier name '{column}'; checked as "
                                            f"'{variable.name}'"))
    for column in columns:
        if column not in claimed:
            findings.append(_column_finding(column, "undeclared-column", "warning",
                                            f"column '{column}' is not in the dictionary"))
    return bindings, findings


def _alias_note(variable: VariableSpec) -> str:
    if variable.aliases:
        return f" (nor under its earlier names {', '.join(variable.aliases)})"
    return ""


def _column_finding(variable: str, rule: str, severity: str, message: str) -> Finding:
    return Finding(variable, rule, severity, 1, (), (), (), message)


def variable_rules(bound: Binding, key: tuple[str, ...]) -> list[Any]:
    """The content rules of one bound variable."""
    variable, column = bound.variable, bound.column
    if not variable.checked_for_content:
        return []
    found: list[Any] = []
    if variable.type in TYPED:
        found.append(TypeRule(variable.name, column, variable.type, variable.masked))
    if variable.type in LEVEL_TYPES and variable.levels:
        found.append(LevelRule(variable.name, column, tuple(c.code for c in variable.levels),
                               variable.masked))
    if variable.type in RANGED:
        low, high = _bound(variable.minimum, variable), _bound(variable.maximum, variable)
        if low is not None or high is not None:
            found.append(RangeRule(variable.name, column, variable.type, low, high, variable.masked))
        p_low, p_high = _bound(variable.plausible_min, variable), _bound(variable.plausible_max, variable)
        if p_low is not None or p_high is not None:
            found.append(RangeRule(variable.name, column, variable.type, p_low, p_high, variable.masked,
                                   possible_low=low, possible_high=high, name="plausible",
                                   severity="warning"))
    if variable.required:
        found.append(RequiredRule(variable.name, column))
    if variable.max_missing is not None:
        found.append(MissingShareRule(variable.name, column, float(variable.max_missing)))
    if variable.unique and key != (variable.name,):
        found.append(UniqueRule(variable.name, column))
    if variable.pattern:
        _check_pattern(variable)
        found.append(PatternRule(variable.name, column, variable.pattern, variable.masked))
    return found


def _bound(value: str | None, variable: VariableSpec) -> Any:
    try:
        return typed.bound(value, variable)
    except ValueError:
        raise InvalidValue(f"variable '{variable.name}': the bound {value!r} is not a valid "
                           f"{variable.type}") from None


def _check_pattern(variable: VariableSpec) -> None:
    import pyarrow as pa
    import pyarrow.compute as pc

    try:
        pc.match_substring_regex(pa.array(["x"]), f"^(?:{variable.pattern})$")
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError) as exc:
        raise InvalidValue(f"variable '{variable.name}': the pattern {variable.pattern!r} cannot be "
                           f"used by the checker ({exc})") from None


def cross_field_rules(spec: TableSpec, bindings: Sequence[Binding]) -> tuple[list[Any], list[Finding]]:
    """The table's cross-field rules; a rule whose columns are not all in the file becomes an info finding."""
    from studylog.data.expressions import ExpressionError, compile_expression, kind_of_variable_type

    by_variable = {b.variable.name: b for b in bindings}
    kinds = {v.name: kind_of_variable_type(v.type) for v in spec.variables}
    rules: list[Any] = []
    findings: list[Finding] = []
    for rule in spec.rules:
        try:
            compiled = compile_expression(rule.expression, kinds)
        except ExpressionError as exc:
            findings.append(_column_finding(None, rule.name, "info", f"not checked: {exc.message}"))
            continue
        absent = [c for c in compiled.columns if c not in by_variable]
        if absent:
            findings.append(_column_finding(None, rule.name, "info",
                                            f"not checked: no column {', '.join(absent)} in the file"))
            continue
        pairs = tuple((c, by_variable[c].column) for c in compiled.columns)
        rules.append(CrossFieldRule(rule.name, rule.expression, rule.severity, compiled, pairs))
    return rules, findings


def plan(spec: TableSpec, columns: Sequence[str]) -> CheckPlan:
    """Every rule a file with this header gets under this dictionary."""
    bindings, findings = bind(spec, columns)
    by_variable = {b.variable.name: b for b in bindings}
    rules: list[Any] = []
    for bound in bindings:
        rules.extend(variable_rules(bound, spec.key))
    key_columns: tuple[str, ...] = ()
    key_masked = False
    if spec.key and all(k in by_variable for k in spec.key):
        key_columns = tuple(by_variable[k].column for k in spec.key)
        key_masked = any(by_variable[k].variable.masked for k in spec.key)
        rules.append(KeyRule(key_columns, tuple(spec.key)))
    rules.append(RepeatedRowRule(tuple(columns), keyed=bool(key_columns)))
    cross, notes = cross_field_rules(spec, bindings)
    rules.extend(cross)
    findings.extend(notes)
    bound_columns = {b.column: b for b in bindings}
    masked = frozenset(c for c in columns if c not in bound_columns or bound_columns[c].variable.masked)
    return CheckPlan(spec.name, tuple(columns), tuple(bindings), tuple(findings), tuple(rules),
                     key_columns, key_masked, masked)


__all__ = ["plan", "bind", "EXAMPLES"]
