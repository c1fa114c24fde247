"""The initial-analysis profile of a table: every variable, the target, pairs, group comparisons, and the
things to review.

Input: a pyarrow Table whose columns are all text (null where the cell is empty), and one
:class:`~studylog.data.spec.VariableSpec` per column (from the dictionary, or built from inference), plus
missing codes that inference proposed. Output: the ``profile --json`` document of the command contract.
Pure computation: no store, no printing. Definitions: see :mod:`studylog.data.univariate` and
:mod:`studylog.data.pairs`.
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from concurrent.futures import Executor, Future, ThreadPoolExecutor, as_completed
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from studylog.data import cells, pairs, significance, suggest, univariate
from studylog.data.early import Early
from studylog.data.ordered import OrderedValues
from studylog.data.spec import LEVEL_TYPES, NUMERIC_TYPES, VariableSpec
from studylog.errors import UsageError

CLASS_LIKE_MAX_DISTINCT = 10  # a numeric target with this few values also gets class counts
LEAKAGE_STRENGTH = 0.9
MAX_GROUPS = 50


def workers() -> ThreadPoolExecutor:
    """Threads for independent columns and pairs (at most 4: the work is bound by memory bandwidth)."""
    return ThreadPoolExecutor(max_workers=max(1, min(4, os.cpu_count() or 1)))


def _number(text: str | None) -> float | None:
    if text is None:
        return None
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _ordinal_rank(levels: Sequence[str], spec: VariableSpec) -> np.ndarray:
    """Position of each observed level in the variable's order: declared levels first (in their order),
    else numeric order when every level is a number, else text order; unknown levels last."""
    declared = {code.code: (code.order if code.order is not None else i) for i, code in enumerate(spec.levels)}
    if declared:
        keys = [(0, declared[v], "") if v in declared else (1, 0, v) for v in levels]
    elif levels and all(_number(v) is not None for v in levels):
        keys = [(0, _number(v), "") for v in levels]
    else:
        keys = [(0, 0, v) for v in levels]
    order = sorted(range(len(levels)), key=lambda i: keys[i])
    rank = np.empty(len(levels), dtype=np.int64)
    rank[order] = np.arange(len(levels))
    return rank


class _Column:
    """What the pair and target steps need from one profiled column."""

    def __init__(self, name: str, spec: VariableSpec, entry: dict[str, Any]) -> None:
        self.name = name
        self.spec = spec
        self.entry = entry
        self.base: pairs.RankBase | None = None
        self.levels: pairs.LevelColumn | None = None


def _profile_column(name: str, strings: pa.ChunkedArray, spec: VariableSpec,
                    inferred_codes: Sequence[str], known: Early | None = None) -> _Column:
    """``known``: the column as read while the file was read (``data.early``), of the kind this
    variable is read as."""
    declared = [code.code for code in spec.missing_codes]
    extra = [code for code in inferred_codes if code not in declared]
    kind = spec.type
    floats = dates = seconds = encoded = level_codes = level_counts = None
    # blanks and missing codes found once per distinct level, or not looked for in a column that
    # reads as numbers throughout
    if kind in LEVEL_TYPES or kind == "boolean":
        encoded = known.value if known is not None else cells.Encoded.of(strings)
        missing, level_codes, level_counts = cells.find_missing_encoded(encoded, declared + extra)
    else:
        if kind in NUMERIC_TYPES:
            floats = known.value if known is not None else cells.float_values(strings)
        elif kind in ("date", "datetime") and cells.date_format(spec, kind) == "%Y-%m-%d":
            if known is not None:
                seconds = known.value
            else:
                dates = cells.iso_dates(strings)
        blank_free = floats is not None or dates is not None or seconds is not None
        missing = cells.find_missing(strings, declared + extra, blank_free=blank_free)
    rows = len(strings)
    codes = [dict(c, declared=c["code"] in declared) for c in missing.codes]
    entry: dict[str, Any] = {
        "name": name, "type": spec.type, "role": spec.role, "rows": rows,
        "count": rows - missing.count, "missing": missing.count, "missing_empty": missing.blank,
        "missing_codes": codes, "invalid": 0, "invalid_examples": [],
    }
    column = _Column(name, spec, entry)
    masked = spec.masked
    if kind in NUMERIC_TYPES:
        values, invalid = cells.parse_numbers(strings, missing.mask, floats)
        if kind == "integer":
            fractional = np.isfinite(values) & (values != np.floor(values))
            invalid |= fractional
            values[fractional] = np.nan
        column.base = pairs.RankBase.of(values, integer=kind == "integer", reuse=True)
        # the tie groups that occur are the runs of equal sorted values (counting whole numbers
        # makes empty groups too)
        counts = column.base.group_counts
        entry.update(univariate.numeric_summary(column.base.ordered, kind == "integer", counts[counts > 0]))
        entry["invalid"] = int(np.count_nonzero(invalid))
        entry["invalid_examples"] = cells.invalid_examples(strings, invalid, masked)
        entry["impossible"] = _impossible(column.base.ordered, spec)
        if masked:
            for key in ("min", "max"):
                entry[key] = None
    elif kind in ("date", "datetime"):
        if seconds is None:
            seconds = cells.parse_dates(strings, spec, kind, dates,
                                        iso_tried=cells.date_format(spec, kind) == "%Y-%m-%d")
        seconds[missing.mask] = np.nan
        invalid = ~missing.mask & np.isnan(seconds)
        entry.update(univariate.date_summary(np.sort(seconds[~np.isnan(seconds)]), kind))
        entry["invalid"] = int(np.count_nonzero(invalid))
        entry["invalid_examples"] = cells.invalid_examples(strings, invalid, masked)
    elif encoded is not None and level_codes is not None and level_counts is not None:
        levels, counts = univariate.level_counts_encoded(encoded, level_counts)
        entry.update(univariate.level_summary(levels, counts, masked, kind))
        if kind == "boolean" and (spec.true_values or spec.false_values):
            truth = np.isin(np.asarray(levels, dtype=object), list(spec.true_values))
            falsity = np.isin(np.asarray(levels, dtype=object), list(spec.false_values))
            entry["true"] = int(counts[truth].sum())
            entry["false"] = int(counts[falsity].sum())
            entry["invalid"] = int(counts[~truth & ~falsity].sum())
        if kind in LEVEL_TYPES and spec.levels:
            known = np.isin(np.asarray(levels, dtype=object), [code.code for code in spec.levels])
            entry["undeclared_levels"] = int(counts[~known].sum())
        rank = _ordinal_rank(levels, spec) if kind == "ordinal" else None
        column.levels = pairs.LevelColumn(name, level_codes, len(levels), rank)
    else:  # text, identifier
        entry.update(univariate.text_summary(strings, missing.mask))
        entry["near_zero_variance"] = False
    return column


def _impossible(ordered: OrderedValues, spec: VariableSpec) -> dict[str, int] | None:
    """Values outside the declared possible range (minimum, maximum)."""
    low, high = _number(spec.minimum), _number(spec.maximum)
    if low is None and high is None:
        return None
    below = int(ordered.below(low, "left")) if low is not None else 0
    above = ordered.n - int(ordered.below(high, "right")) if high is not None else 0
    return {"below_minimum": below, "above_maximum": above}


def _as_levels(column: _Column, strings: pa.ChunkedArray) -> pairs.LevelColumn:
    """Level indices of any column (a numeric grouping column or target is grouped by its texts)."""
    if column.levels is not None:
        return column.levels
    missing = np.asarray(
        cells.find_missing(strings, [c["code"] for c in column.entry["missing_codes"]]).mask
    )
    levels, _counts, codes = univariate.level_counts(strings, missing)
    return pairs.LevelColumn(column.name, codes, len(levels), extra={"levels": levels})


def _target_section(column: _Column, strings: pa.ChunkedArray) -> tuple[dict[str, Any], pairs.LevelColumn | None]:
    entry = column.entry
    section: dict[str, Any] = {"name": column.name, "type": column.spec.type, "count": entry["count"],
                               "missing": entry["missing"]}
    class_like = column.spec.type in LEVEL_TYPES or column.spec.type == "boolean" or (
        column.spec.type in NUMERIC_TYPES and 0 < (entry.get("distinct") or 0) <= CLASS_LIKE_MAX_DISTINCT
    )
    levels = None
    if column.spec.type in NUMERIC_TYPES:
        section["distribution"] = {key: entry.get(key) for key in (
            "min", "q1", "median", "q3", "max", "mean", "sd", "skewness", "kurtosis", "histogram")}
    if class_like:
        levels = _as_levels(column, strings)
        names = levels.extra.get("levels") if column.levels is None else None
        if names is None:  # the column's own frequency table holds the counts
            names = [level["value"] for level in entry["levels"]]
            lookup = {level["value"]: level["count"] for level in entry["levels"]}
            classes = [{"value": v, "count": lookup[v]} for v in names]
        else:
            counts = np.bincount(levels.codes[levels.codes >= 0], minlength=levels.levels)
            order = np.lexsort((np.asarray(names, dtype=object).astype(str), -counts))
            classes = [{"value": names[i], "count": int(counts[i])} for i in order if counts[i] > 0]
        total = sum(c["count"] for c in classes)
        for c in classes:
            c["share"] = c["count"] / total if total else None
        section["classes"] = classes
        present = [c["count"] for c in classes if c["count"] > 0]
        section["imbalance_ratio"] = max(present) / min(present) if len(present) >= 2 else None
    return section, levels


def _leakage_measure(column: _Column, target: _Column, target_levels: pairs.LevelColumn | None,
                     associated: Mapping[tuple[str, str], dict[str, Any]]) -> tuple[str | None, float | None]:
    """How nearly the target determines one input with a class target: eta^2 for a numeric input,
    the bias-corrected Cramer's V for a categorical one (taken from the associations when they hold
    the pair in this order)."""
    if column is target or column.spec.role in ("identifier", "excluded", "target") or target_levels is None:
        return None, None
    if column.base is not None:
        # sums by class over all rows: a missing value is 0 in ``centred``, a missing class has a slot
        # of its own; the sizes and the sum of squares less the few rows where either is missing
        base, k = column.base, target_levels.levels
        slot, sizes, target_missing = target_levels.slotted
        sizes = sizes - np.bincount(slot[base.missing_rows], minlength=k + 1)[:k]
        if sizes.sum() >= pairs.MIN_PAIR_CASES:
            sums = target_levels.sums_by_level(base.centred)
            outside = base.centred[target_missing]
            result = significance.anova_of_sums(sizes, sums, base.total_squares - float(outside @ outside))
            return "eta_squared", (result["eta_squared"] if result else None)
    elif column.levels is not None:
        found = associated.get((column.name, target.name)) if target_levels is target.levels else None
        if found is not None:
            return "cramers_v_corrected", found["cramers_v_corrected"]
        result = pairs.associations([column.levels, target_levels])
        if result:
            return "cramers_v_corrected", result[0]["cramers_v_corrected"]
    return None, None


def _leakage(columns: Sequence[_Column], target: _Column, target_levels: pairs.LevelColumn | None,
             correlation_pairs: Sequence[dict[str, Any]], availability: Mapping[str, str],
             measures: Sequence[tuple[str | None, float | None]]) -> list[dict[str, Any]]:
    """Inputs nearly determined by the target (association >= 0.9), and inputs available after the
    index time: eta^2 (numeric input, class target), bias-corrected Cramer's V (categorical input,
    class target), r^2 (numeric input, numeric target). ``measures``: ``_leakage_measure`` of each
    column."""
    found: list[dict[str, Any]] = []
    r_with_target = {
        (p["b"] if p["a"] == target.name else p["a"]): p["pearson"]
        for p in correlation_pairs if target.name in (p["a"], p["b"]) and p["pearson"] is not None
    }
    for column, (measure, value) in zip(columns, measures):
        if column is target or column.spec.role in ("identifier", "excluded", "target"):
            continue
        if availability.get(column.name, getattr(column.spec, "availability", None)) == "after":
            found.append({"variable": column.name, "reason": "available after the index time",
                          "measure": None, "value": None})
        if measure is None and target_levels is None and column.name in r_with_target:
            measure, value = "r_squared", r_with_target[column.name] ** 2
        if value is not None and value >= LEAKAGE_STRENGTH:
            found.append({"variable": column.name, "reason": "nearly determined by the target",
                          "measure": measure, "value": value})
    return found


# the relative cost of profiling a column of each type: the costly ones start first
COST = {"identifier": 5, "text": 5, "number": 4, "date": 3, "datetime": 3, "integer": 2}


def profile_table(
    table: pa.Table,
    specs: Mapping[str, VariableSpec],
    *,
    target: str | None = None,
    by: str | None = None,
    strong: float = pairs.DEFAULT_STRONG,
    inferred_missing: Mapping[str, Sequence[str]] | None = None,
    weight: str | None = None,
    availability: Mapping[str, str] | None = None,
    pool: Executor | None = None,
    early: dict[str, Early] | None = None,
) -> dict[str, Any]:
    """The whole profile as the contract's JSON document (numbers may still be numpy/NaN: see clean).
    ``pool``: the threads to use (default: ``workers()``, shut down at the end). ``early``: some
    columns as read while the file was read (``EarlyColumns.take``); emptied here, so that each is
    freed once its column is done."""
    names = list(table.column_names)
    for option, name in (("--target", target), ("--by", by)):
        if name is not None and name not in names:
            raise UsageError(f"{option} {name}: no such column (columns: {', '.join(names[:20])})")
    if not 0 < strong <= 1:
        raise UsageError(f"--strong {strong}: must be above 0 and at most 1")
    inferred_missing = inferred_missing or {}
    spec_of = {name: specs.get(name) or VariableSpec(name=name, type="text") for name in names}
    own_pool = pool is None
    pool = pool or workers()
    try:
        # columns are independent and numpy/Arrow release the GIL in their loops: one pool for every
        # column and pair, the costly columns first (also the ones whose passing copies are largest,
        # made before the numeric columns' sorts are held)
        known = early if early is not None else {}
        running = {name: pool.submit(_profile_column, name, table.column(name), spec_of[name],
                                     inferred_missing.get(name, ()), known.pop(name, None))
                   for name in sorted(names, key=lambda name: -COST.get(spec_of[name].type, 1))}
        known.clear()
        found = _Pairing(table, spec_of, target, pool).follow(running)
        columns = [found.done[name] for name in names]
        by_name = found.done
        numeric = [
            pairs.NumericColumn(c.name, c.base, c.entry["missing"],
                                is_input=c.name != target and c.spec.role not in ("target", "identifier", "excluded"))
            for c in columns if c.base is not None and c.spec.role not in ("identifier", "excluded")
        ]
        level_columns = [c.levels for c in columns
                         if c.levels is not None and c.spec.role not in ("identifier", "excluded")]
        grouping = None
        if by is not None:
            grouping = _as_levels(by_name[by], table.column(by))
            if grouping.levels > MAX_GROUPS:
                raise UsageError(f"--by {by}: {grouping.levels} groups; at most {MAX_GROUPS} can be compared")
        correlation = pairs.correlations(numeric, strong, measured=[
            found.correlated[(a.name, b.name)].result() for a, b in pairs.correlation_pairs(numeric)])
        association_list = [found.associated[(a.name, b.name)].result()
                            for a, b in pairs.association_pairs(level_columns)]
        document: dict[str, Any] = {
            "rows": table.num_rows,
            "columns": table.num_columns,
            "variables": [c.entry for c in columns],
            "target": None,
            "correlations": correlation["pairs"],
            "correlations_columns": {"numeric": correlation["columns_numeric"], "used": correlation["columns_used"]},
            "associations": association_list,
            "groups": None,
            "leakage": [],
        }
        if target is not None:
            target_levels = found.target_levels
            document["target"] = found.target_section
            by_pair = {(a["a"], a["b"]): a for a in association_list}
            leak_numeric = found.leak_numeric
            others = [c for c in columns if c.name not in leak_numeric]
            measured = dict(zip((c.name for c in others), pool.map(
                lambda column: _leakage_measure(column, by_name[target], target_levels, by_pair), others)))
            measures = [leak_numeric[c.name].result() if c.name in leak_numeric else measured[c.name]
                        for c in columns]
            document["leakage"] = _leakage(columns, by_name[target], target_levels, correlation["pairs"],
                                           availability or {}, measures)
        if grouping is not None:
            document["groups"] = pairs.group_comparisons(grouping, numeric, pool.map)
    finally:
        if own_pool:
            pool.shutdown()
    if weight is not None:
        document["unweighted"] = f"the profile is unweighted; {weight} is a weight variable"
    document["suggestions"] = suggest.suggestions(document, {c.name: c.spec for c in columns})
    return clean(document)


class _Pairing:
    """Waits for the columns and starts each pair's work as soon as both its columns are done: the
    correlations of numeric columns, the associations of categorical ones, and the target's measure of
    each numeric column (from the target's section, made here once the target is done). The pairs
    queue behind the columns still waiting, so the threads never wait for the last column."""

    def __init__(self, table: pa.Table, spec_of: Mapping[str, VariableSpec], target: str | None,
                 pool: Executor) -> None:
        self.table = table
        self.target = target
        self.pool = pool
        self.done: dict[str, _Column] = {}
        numeric = [name for name, spec in spec_of.items()
                   if spec.type in NUMERIC_TYPES and spec.role not in ("identifier", "excluded")]
        # the columns correlated (the first numeric ones), by their position among them
        self.used = {name: i for i, name in enumerate(numeric[:pairs.MAX_NUMERIC_COLUMNS])}
        self.position = {name: i for i, name in enumerate(spec_of)}
        self.numeric: list[pairs.NumericColumn] = []
        self.levels: list[_Column] = []
        self.correlated: dict[tuple[str, str], Future[dict[str, Any]]] = {}
        self.associated: dict[tuple[str, str], Future[dict[str, Any]]] = {}
        self.leak_numeric: dict[str, Future[tuple[str | None, float | None]]] = {}
        self.target_section: dict[str, Any] | None = None
        self.target_levels: pairs.LevelColumn | None = None

    def follow(self, running: Mapping[str, Future[_Column]]) -> _Pairing:
        for future in as_completed(list(running.values())):
            self._arrived(future.result())
        return self

    def _arrived(self, column: _Column) -> None:
        self.done[column.name] = column
        excluded = column.spec.role in ("identifier", "excluded")
        if column.name in self.used and column.base is not None:
            mine = pairs.NumericColumn(column.name, column.base, column.entry["missing"])
            for other in self.numeric:
                a, b = sorted((mine, other), key=lambda c: self.used[c.name])
                self.correlated[(a.name, b.name)] = self.pool.submit(pairs.correlation, (a, b))
            self.numeric.append(mine)
        if column.levels is not None and not excluded and 0 < column.levels.levels <= pairs.MAX_PAIR_LEVELS:
            for other in self.levels:
                a, b = sorted((column, other), key=lambda c: self.position[c.name])
                assert a.levels is not None and b.levels is not None
                self.associated[(a.name, b.name)] = self.pool.submit(pairs.association, (a.levels, b.levels))
            self.levels.append(column)
        if self.target is None:
            return
        if column.name == self.target:
            self.target_section, self.target_levels = _target_section(column, self.table.column(self.target))
            for other in self.done.values():
                self._measure_leak(other)
        elif self.target in self.done:
            self._measure_leak(column)

    def _measure_leak(self, column: _Column) -> None:
        if column.base is not None:
            self.leak_numeric[column.name] = self.pool.submit(
                _leakage_measure, column, self.done[str(self.target)], self.target_levels, {})


def clean(value: Any) -> Any:
    """JSON-ready: numpy scalars to Python numbers, NaN and infinities to None."""
    if isinstance(value, dict):
        return {k: clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean(v) for v in value]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        number = float(value)
        return number if math.isfinite(number) else None
    return value
