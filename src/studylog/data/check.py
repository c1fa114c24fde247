"""Checking a data drop against the dictionary: a map over record batches and a reduce of counters.

``plan(spec, columns)`` turns a :class:`~studylog.data.spec.TableSpec` and the file's header into
declarative rule objects (``studylog.data.rules``: frozen dataclasses holding their parameters, no
closures); :class:`Checker` evaluates every rule on each record batch with vectorised Arrow compute into a
:class:`Tally` per rule, and tallies of successive batches merge (counts add, the 20 smallest example rows
are kept, extremes combine). The result is the same whether a file is read whole or in batches of one row.

Three rules carry state from batch to batch: ``unique``, ``key`` and ``repeated-row`` keep a digest per
distinct value seen (``studylog.data.repeats.SeenDigests``: 4 bytes a row in memory, the rest in a
temporary file), so memory is bounded by the rows, never by the width of the data. The key rule hands
the rows whose key repeats to the repeated-row rule (``BatchContext.hand_over``). Every other rule is a
pure function of its batch.

Counting conventions (DESIGN.md, "Command contract"): ``count`` counts offending rows (column findings,
``absent-column``/``undeclared-column``/``renamed-column``, count 1: the column); for ``unique``, ``key``
and ``repeated-row`` each row that repeats an earlier one counts and the first occurrence does not.
Example rows are 1-based data row numbers (the header is not counted), at most 20, with the table key of
those rows (a composite key joined with ``|``) and the raw values, masked for direct-identifier, sensitive
and free-text variables.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any

from studylog.data.spec import TableSpec, VariableSpec
from studylog.safety import mask

EXAMPLES = 20
KEY_SEPARATOR = "|"
SEVERITY_ORDER = {"error": 0, "warning": 1, "info": 2}


@dataclass(frozen=True)
class Example:
    row: int
    key: str | None
    value: str | None


@dataclass
class Tally:
    """What one rule found in some rows: mergeable (``a.merge(b)`` equals the tally of a's rows + b's)."""

    count: int = 0
    examples: list[Example] = field(default_factory=list)
    low: Any = None
    high: Any = None
    # rows looked at (missing-share needs the share)
    rows: int = 0
    # a second count some rules keep (key: rows without a key)
    other: int = 0

    def merge(self, other: Tally) -> Tally:
        self.count += other.count
        self.rows += other.rows
        self.other += other.other
        if other.examples:
            merged = sorted(self.examples + other.examples, key=lambda e: e.row)
            self.examples = merged[:EXAMPLES]
        if other.low is not None:
            self.low = other.low if self.low is None else min(self.low, other.low)
        if other.high is not None:
            self.high = other.high if self.high is None else max(self.high, other.high)
        return self


@dataclass(frozen=True)
class Finding:
    variable: str | None
    rule: str
    severity: str
    count: int
    rows: tuple[int, ...]
    keys: tuple[str | None, ...]
    values: tuple[str | None, ...]
    message: str

    def to_dict(self) -> dict[str, Any]:
        return {"variable": self.variable, "rule": self.rule, "severity": self.severity,
                "count": self.count, "rows": list(self.rows), "keys": list(self.keys),
                "values": list(self.values), "message": self.message}


@dataclass(frozen=True)
class Binding:
    """A variable and the file column that holds it (its name, or one of its aliases)."""

    variable: VariableSpec
    column: str

    @property
    def renamed(self) -> bool:
        return self.column != self.variable.name


@dataclass(frozen=True)
class CheckPlan:
    """What will be checked: the column findings known from the header, and the row rules."""

    table: str
    columns: tuple[str, ...]
    bindings: tuple[Binding, ...]
    column_findings: tuple[Finding, ...]
    rules: tuple[Any, ...]
    key_columns: tuple[str, ...]
    key_masked: bool
    # file columns masked in examples: bound to masked variables, or not declared
    masked_columns: frozenset[str]

    def binding(self, variable: str) -> Binding | None:
        for bound in self.bindings:
            if bound.variable.name == variable:
                return bound
        return None


class BatchContext:
    """One record batch and what several rules share about it, computed at most once."""

    def __init__(self, batch: Any, offset: int, plan: CheckPlan) -> None:
        self.batch = batch
        self.offset = offset
        self.plan = plan
        self.length = batch.num_rows
        self._names = {name: i for i, name in enumerate(batch.schema.names)}
        self._parsed: dict[str, Any] = {}
        self._encoded: dict[str, Any] = {}
        self._digests: dict[str, Any] = {}
        self._key_digest: Any = None
        self._row_digest: Any = None
        self._handed: dict[str, Any] = {}
        # the rules and the observers run in two threads over the same batch: each shared value is
        # computed once, the second asker waits for the first (one lock per value)
        self._guard = threading.Lock()
        self._locks: dict[tuple[str, str], threading.Lock] = {}

    def _lock(self, kind: str, name: str) -> threading.Lock:
        with self._guard:
            lock = self._locks.get((kind, name))
            if lock is None:
                lock = self._locks[(kind, name)] = threading.Lock()
            return lock

    def hand_over(self, name: str, value: Any) -> None:
        """Leave a value one rule computed for a later rule of the plan on this batch (the rules run
        in plan order, in one thread)."""
        self._handed[name] = value

    def handed(self, name: str) -> Any:
        """What an earlier rule left under ``name`` on this batch, or None."""
        return self._handed.get(name)

    def column(self, name: str) -> Any:
        """The raw strings of a file column."""
        import pyarrow as pa

        array = self.batch.column(self._names[name])
        if isinstance(array, pa.ChunkedArray):
            array = array.combine_chunks()
        return array

    def encoded(self, column: str) -> Any:
        """The file column dictionary-encoded when it has few distinct values, else None
        (``repeats.encode_if_few``): what is computed per cell is then computed per distinct value."""
        from studylog.data.repeats import encode_if_few

        if column not in self._encoded:
            with self._lock("encoded", column):
                if column not in self._encoded:
                    self._encoded[column] = encode_if_few(self.column(column))
        return self._encoded[column]

    def per_value(self, column: str, compute: Callable[[Any], Any], fill: Any = None) -> Any:
        """``compute(strings)`` of an elementwise function of a column's cells, computed once per
        distinct value where the column has few (a null cell then gets ``fill``)."""
        from studylog.data.repeats import spread

        encoded = self.encoded(column)
        if encoded is None:
            return compute(self.column(column))
        return spread(encoded, compute(encoded.dictionary), fill)

    def parsed(self, variable: str) -> Any:
        """The column of a variable read as its type (``studylog.data.typed.Parsed``)."""
        from studylog.data import typed

        if variable not in self._parsed:
            with self._lock("parsed", variable):
                if variable not in self._parsed:
                    bound = self.plan.binding(variable)
                    assert bound is not None, variable
                    encoded = self.encoded(bound.column)
                    self._parsed[variable] = (
                        typed.parse(self.column(bound.column), bound.variable) if encoded is None
                        else typed.parse_encoded(encoded, bound.variable))
        return self._parsed[variable]

    def digest(self, column: str) -> Any:
        from studylog.data.repeats import text_digests

        if column not in self._digests:
            with self._lock("digest", column):
                if column not in self._digests:
                    self._digests[column] = text_digests(self.column(column), self.encoded(column))
        return self._digests[column]

    def key_digest(self) -> Any:
        """The 16-byte digest of each row's table key (two uint64 lanes), or None without a key."""
        from studylog.data.repeats import combine

        if not self.plan.key_columns:
            return None
        if self._key_digest is None:
            with self._lock("key", ""):
                if self._key_digest is None:
                    self._key_digest = combine([self.digest(c) for c in self.plan.key_columns])
        return self._key_digest

    def row_digest(self) -> Any:
        """The 16-byte digest of each whole row: every column of the file, in the order of their names.

        Combined (``repeats.combine``) from the cells' digests, which the key and unique rules and the
        record digests share, so that a row costs one fold per cell rather than a join and a digest of
        the joined text. Two rows have the same digest exactly when every cell has (an empty cell's
        digest differs from that of every text). Name order, so that the same records with their
        columns reordered have the same row digests.
        """
        from studylog.data.repeats import combine

        if self._row_digest is None:
            with self._lock("row", ""):
                if self._row_digest is None:
                    self._row_digest = combine([self.digest(c) for c in sorted(self.plan.columns)])
        return self._row_digest

    def digest_all(self) -> None:
        """Digest every column, the key and the whole rows now rather than when a rule asks."""
        for column in self.plan.columns:
            self.digest(column)
        self.key_digest()
        self.row_digest()

    def examples(self, mask: Any, columns: Sequence[str], *, limit: int = EXAMPLES) -> list[Example]:
        """The first ``limit`` rows where ``mask`` is true, with their key and values (masked as needed)."""
        import numpy as np
        import pyarrow as pa
        import pyarrow.compute as pc

        if isinstance(mask, np.ndarray):
            where = np.flatnonzero(mask)[:limit]
        else:
            where = pc.indices_nonzero(mask).slice(0, limit).to_numpy()
        if len(where) == 0:
            return []
        take = pa.array(where, pa.int64())
        keys = self._texts(self.plan.key_columns, take, hide=self.plan.key_masked) \
            if self.plan.key_columns else [None] * len(where)
        values = self._texts(columns, take, hide=False)
        return [Example(int(self.offset + i + 1), k, v) for i, k, v in zip(where, keys, values)]

    def _texts(self, columns: Sequence[str], take: Any, *, hide: bool) -> list[str | None]:
        if hide:
            return [mask(None)] * len(take)
        parts = []
        for name in columns:
            cells = self.column(name).take(take).to_pylist()
            if name in self.plan.masked_columns:
                cells = [None if c is None else mask(c) for c in cells]
            parts.append(cells)
        if len(columns) == 1:
            return parts[0]
        separator = KEY_SEPARATOR if tuple(columns) == self.plan.key_columns else ", "
        rows = []
        for cells in zip(*parts):
            if separator == KEY_SEPARATOR:
                rows.append(separator.join("" if c is None else c for c in cells))
            else:
                rows.append(separator.join(f"{n}={'' if c is None else c}" for n, c in zip(columns, cells)))
        return rows


Observer = Callable[[BatchContext], None]


@dataclass
class CheckResult:
    table: str
    rows: int
    columns: tuple[str, ...]
    findings: list[Finding]
    plan: CheckPlan

    @property
    def errors(self) -> int:
        return sum(1 for f in self.findings if f.severity == "error")

    @property
    def warnings(self) -> int:
        return sum(1 for f in self.findings if f.severity == "warning")

    def at_or_above(self, severity: str) -> bool:
        """Whether any finding is at least as severe as ``severity`` ("never" is never reached)."""
        if severity == "never":
            return False
        limit = SEVERITY_ORDER[severity]
        return any(SEVERITY_ORDER.get(f.severity, 9) <= limit for f in self.findings)


class Checker:
    """Feeds record batches through the rules of a plan; ``finish()`` gives the findings."""

    def __init__(self, plan: CheckPlan, observers: Iterable[Observer] = ()) -> None:
        self.plan = plan
        self.observers = list(observers)
        self.tallies = [Tally() for _ in plan.rules]
        self.states = [rule.new_state() for rule in plan.rules]
        self.rows = 0

    def feed(self, batch: Any) -> BatchContext:
        context = BatchContext(batch, self.rows, self.plan)
        self._evaluate(context)
        for observer in self.observers:
            observer(context)
        self.rows += batch.num_rows
        return context

    def _evaluate(self, context: BatchContext) -> None:
        for index, rule in enumerate(self.plan.rules):
            self.tallies[index].merge(rule.evaluate(context, self.states[index]))

    def run(self, batches: Iterable[Any]) -> CheckResult:
        """Feed every batch, overlapping work in threads: reading the next batch, and the observers.

        Arrow's and numpy's kernels release the GIL, so the rules of batch i, the observers of batch i
        and the reading of batch i + 1 run side by side. Batches are still taken in file order and each
        finishes before the next starts, so the result equals that of ``feed`` one by one.
        """
        from concurrent.futures import ThreadPoolExecutor

        iterator = iter(batches)
        with ThreadPoolExecutor(max_workers=2, thread_name_prefix="studylog-check") as pool:
            upcoming = pool.submit(next, iterator, None)
            while True:
                batch = upcoming.result()
                if batch is None:
                    break
                upcoming = pool.submit(next, iterator, None)
                context = BatchContext(batch, self.rows, self.plan)
                observing = pool.submit(self._observe, context) if self.observers else None
                try:
                    self._evaluate(context)
                finally:
                    if observing is not None:
                        observing.result()
                self.rows += batch.num_rows
        return self.finish()

    def _observe(self, context: BatchContext) -> None:
        # the rules' thread reads every column as its type first; this one digests the columns
        # meanwhile, which the rules of repeats need last (two shares of about equal work)
        context.digest_all()
        for observer in self.observers:
            observer(context)

    def finish(self) -> CheckResult:
        findings = list(self.plan.column_findings)
        for rule, tally in zip(self.plan.rules, self.tallies):
            tally.rows = self.rows
            found = rule.finish(tally)
            if found is not None:
                findings.append(found)
        return CheckResult(self.plan.table, self.rows, self.plan.columns, findings, self.plan)


def check(
    spec: TableSpec,
    columns: Sequence[str],
    batches: Iterable[Any],
    *,
    observers: Iterable[Observer] = (),
) -> CheckResult:
    """Check record batches of all-string columns (in file order) against a table's dictionary."""
    from studylog.data.rules import plan

    return Checker(plan(spec, columns), observers).run(batches)
