"""Pairs of variables: correlations, associations, group comparisons, and ranks on any subset of rows.

Definitions (DESIGN.md, "Statistical definitions"):

- Pearson's r and Spearman's rho on each pair's complete cases; a pair needs at least 10 of them.
  Spearman's rho is Pearson's r of average ranks (ties share the mean of their positions), and the ranks
  are taken on the pair's complete cases: a value's rank among the rows where both variables are present,
  not among all rows where it is present. Ranks are computed from one sort per column (the tie groups in
  value order) and a count of the pair's rows in each group, so no pair sorts again.
- Strong pair: |r| >= the threshold (0.9 by default). The one to consider removing is the one with more
  missing values, else the one with the larger mean absolute correlation with the other inputs (Kuhn &
  Johnson 2013, 3.5).
- Kendall's tau-b for pairs of ordinal variables; Cramer's V and its bias-corrected form for pairs of
  categorical variables with at most 50 levels each (missing values excluded and counted).
- Group comparisons: one-way ANOVA (eta^2) and Kruskal-Wallis (epsilon^2) per numeric variable, with
  unadjusted and Holm-adjusted p-values (each test's family adjusted separately).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from studylog.data import significance

MIN_PAIR_CASES = 10
MAX_NUMERIC_COLUMNS = 50
MAX_PAIR_LEVELS = 50
DEFAULT_STRONG = 0.9


@dataclass
class RankBase:
    """One sort of a numeric column: its values sorted, and each row's tie group in value order."""

    values: np.ndarray  # float64, NaN where missing
    valid: np.ndarray  # bool
    sorted_values: np.ndarray
    group_row: np.ndarray  # tie-group number of each row (0 where missing; never read there)
    groups: int

    @classmethod
    def of(cls, values: np.ndarray) -> RankBase:
        valid = ~np.isnan(values)
        rows = np.flatnonzero(valid)
        present = values[rows]
        order = np.argsort(present, kind="stable")
        sorted_values = present[order]
        starts = np.empty(sorted_values.size, dtype=bool)
        starts[:1] = True
        starts[1:] = sorted_values[1:] != sorted_values[:-1]
        group_sorted = np.cumsum(starts) - 1
        group_row = np.zeros(values.size, dtype=np.int64)
        group_row[rows[order]] = group_sorted
        groups = int(group_sorted[-1]) + 1 if group_sorted.size else 0
        return cls(values, valid, sorted_values, group_row, groups)

    def ranks(self, rows: np.ndarray) -> tuple[np.ndarray, float]:
        """Average ranks (1..len(rows)) of the values at ``rows`` among those rows only, and
        sum(t^3 - t) over their tie groups (for tie corrections)."""
        group = self.group_row[rows]
        counts = np.bincount(group, minlength=self.groups)
        last = np.cumsum(counts)
        average = last - (counts - 1) / 2.0
        counts_f = counts.astype(np.float64)
        return average[group], float((counts_f**3 - counts_f).sum())


def pearson(x: np.ndarray, y: np.ndarray) -> float | None:
    """Pearson's r (None when either variable is constant)."""
    dx = x - x.mean()
    dy = y - y.mean()
    sxx = float(dx @ dx)
    syy = float(dy @ dy)
    if sxx == 0.0 or syy == 0.0:
        return None
    return max(-1.0, min(1.0, float(dx @ dy) / math.sqrt(sxx * syy)))


def spearman(x: RankBase, y: RankBase, rows: np.ndarray) -> float | None:
    """Spearman's rho on ``rows`` (the pair's complete cases), ranked on those rows."""
    rx, _ = x.ranks(rows)
    ry, _ = y.ranks(rows)
    return pearson(rx, ry)


@dataclass
class NumericColumn:
    name: str
    base: RankBase
    missing: int
    is_input: bool = True


def correlations(columns: Sequence[NumericColumn], strong: float = DEFAULT_STRONG) -> dict[str, Any]:
    """Every pair of numeric columns (the first 50): r, rho, n, strong, and which one to consider."""
    used = list(columns[:MAX_NUMERIC_COLUMNS])
    pairs: list[dict[str, Any]] = []
    for i, a in enumerate(used):
        for b in used[i + 1:]:
            both = a.base.valid & b.base.valid
            rows = np.flatnonzero(both)
            entry: dict[str, Any] = {"a": a.name, "b": b.name, "pearson": None, "spearman": None,
                                     "n": int(rows.size), "strong": False}
            if rows.size >= MIN_PAIR_CASES:
                entry["pearson"] = pearson(a.base.values[rows], b.base.values[rows])
                entry["spearman"] = spearman(a.base, b.base, rows)
            pairs.append(entry)
    # mean absolute correlation of each input with the other inputs: the tie-breaker for strong pairs
    inputs = {c.name for c in used if c.is_input}
    absolute: dict[str, list[float]] = {name: [] for name in inputs}
    for entry in pairs:
        if entry["pearson"] is not None and entry["a"] in inputs and entry["b"] in inputs:
            absolute[entry["a"]].append(abs(entry["pearson"]))
            absolute[entry["b"]].append(abs(entry["pearson"]))
    mean_absolute = {name: (sum(v) / len(v) if v else 0.0) for name, v in absolute.items()}
    missing = {c.name: c.missing for c in used}
    for entry in pairs:
        r = entry["pearson"]
        if r is None or abs(r) < strong or entry["a"] not in inputs or entry["b"] not in inputs:
            continue
        entry["strong"] = True
        a, b = entry["a"], entry["b"]
        if missing[a] != missing[b]:
            entry["consider"] = a if missing[a] > missing[b] else b
            entry["because"] = "more missing values"
        else:
            entry["consider"] = a if mean_absolute[a] >= mean_absolute[b] else b
            entry["because"] = "larger mean absolute correlation with the other inputs"
    return {
        "pairs": pairs,
        "columns_used": len(used),
        "columns_numeric": len(columns),
        "mean_absolute_correlation": mean_absolute,
    }


@dataclass
class LevelColumn:
    """A categorical-like column as level indices (-1 where missing)."""

    name: str
    codes: np.ndarray
    levels: int
    ordinal_rank: np.ndarray | None = None  # position of each level in the variable's order
    extra: dict[str, Any] = field(default_factory=dict)


def associations(columns: Sequence[LevelColumn]) -> list[dict[str, Any]]:
    """Every pair of categorical columns with at most 50 levels: Cramer's V (plain and corrected),
    chi-square, n used, missing excluded; Kendall's tau-b when both are ordinal."""
    used = [c for c in columns if 0 < c.levels <= MAX_PAIR_LEVELS]
    out: list[dict[str, Any]] = []
    for i, a in enumerate(used):
        for b in used[i + 1:]:
            both = (a.codes >= 0) & (b.codes >= 0)
            n = int(both.sum())
            table = significance.contingency(a.codes[both], b.codes[both], a.levels, b.levels)
            test = significance.chi_square(table)
            v, v_corrected = significance.cramers_v(test)
            entry: dict[str, Any] = {
                "a": a.name, "b": b.name, "cramers_v": v, "cramers_v_corrected": v_corrected, "n": n,
                "missing_excluded": int(both.size - n),
                "chi2": test["chi2"] if test else None, "df": test["df"] if test else None,
                "p_value": test["p_value"] if test else None,
            }
            if a.ordinal_rank is not None and b.ordinal_rank is not None:
                ordered = table[np.argsort(a.ordinal_rank)][:, np.argsort(b.ordinal_rank)]
                entry["kendall_tau_b"] = significance.kendall_tau_b(ordered) if n >= MIN_PAIR_CASES else None
            out.append(entry)
    return out


def group_comparisons(by: LevelColumn, numeric: Sequence[NumericColumn]) -> dict[str, Any]:
    """ANOVA and Kruskal-Wallis of each numeric variable across the groups of ``by``, Holm-adjusted."""
    results: list[dict[str, Any]] = []
    for column in numeric:
        if column.name == by.name:
            continue
        rows = np.flatnonzero(column.base.valid & (by.codes >= 0))
        entry: dict[str, Any] = {"variable": column.name, "n": int(rows.size), "anova": None,
                                 "kruskal_wallis": None}
        if rows.size >= 3:
            present, groups = np.unique(by.codes[rows], return_inverse=True)
            entry["groups"] = int(present.size)
            entry["anova"] = significance.anova(groups, column.base.values[rows], int(present.size))
            ranks, tie_sum = column.base.ranks(rows)
            entry["kruskal_wallis"] = significance.kruskal_wallis(groups, ranks, int(present.size), tie_sum)
        results.append(entry)
    for test in ("anova", "kruskal_wallis"):
        adjusted = significance.holm([r[test]["p_unadjusted"] if r[test] else None for r in results])
        for entry, p in zip(results, adjusted):
            if entry[test] is not None:
                entry[test]["p_holm"] = p
    return {"by": by.name, "comparisons": results,
            "adjustment": "Holm (1979) across the variables, for each test separately"}
