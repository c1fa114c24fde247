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
INTEGER_COUNTING_SPAN = 1 << 22
BLOCK_ROWS = 1 << 16


@dataclass
class RankBase:
    """One sort of a numeric column: its values sorted, and each row's tie group in value order."""

    values: np.ndarray  # float64, NaN where missing
    valid: np.ndarray  # bool
    sorted_values: np.ndarray
    group_row: np.ndarray  # tie-group number of each row (0 where missing; never read there)
    groups: int

    @classmethod
    def of(cls, values: np.ndarray, integer: bool = False) -> RankBase:
        """One sort; whole numbers spanning fewer than 2^22 values are counted instead of sorted (a
        tie group per possible value, empty groups included: ranks are unchanged by empty groups)."""
        valid = ~np.isnan(values)
        rows = np.flatnonzero(valid)
        present = values[rows]
        if integer and present.size and present.max() - present.min() < INTEGER_COUNTING_SPAN:
            low = present.min()
            offsets = (present - low).astype(np.int64)
            counts = np.bincount(offsets)
            seen = np.flatnonzero(counts)
            sorted_values = np.repeat(low + seen.astype(np.float64), counts[seen])
            group_row = np.zeros(values.size, dtype=np.int64)
            group_row[rows] = offsets
            return cls(values, valid, sorted_values, group_row, int(counts.size))
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
        ranks, counts, _average = self._ranks(rows)
        counts_f = counts.astype(np.float64)
        return ranks, float((counts_f**3 - counts_f).sum())

    def _ranks(self, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        group = self.group_row[rows]
        counts = np.bincount(group, minlength=self.groups)
        # a tie group's average rank: its last position less half of the others in it
        average = np.cumsum(counts) - (counts - 1) / 2.0
        return average[group], counts, average

    def rank_sums(self, rows: np.ndarray) -> tuple[np.ndarray, float]:
        """Ranks on ``rows`` and the sum of their squares (from the groups, not the rows)."""
        ranks, counts, average = self._ranks(rows)
        return ranks, float(counts @ (average * average))


def pearson(x: np.ndarray, y: np.ndarray) -> float | None:
    """Pearson's r (None when either variable is constant)."""
    dx = x - x.mean()
    dy = y - y.mean()
    sxx = float(dx @ dx)
    syy = float(dy @ dy)
    if sxx == 0.0 or syy == 0.0:
        return None
    return max(-1.0, min(1.0, float(dx @ dy) / math.sqrt(sxx * syy)))


def pearson_matrix(bases: Sequence[RankBase]) -> tuple[np.ndarray, np.ndarray]:
    """Pearson's r of every pair on its complete cases, and the pair counts, in one pass over the rows.

    Sums over each pair's complete cases come from matrix products of the values (shifted by each
    column's mean, 0 where missing) and the validity indicators, block by block:
    n_ij = V_i.V_j, Sx_ij = X_i.V_j, Sxx_ij = X_i^2.V_j, Sxy_ij = X_i.X_j; then
    r = (Sxy - Sx Sy / n) / sqrt((Sxx - Sx^2 / n)(Syy - Sy^2 / n)). Shifting by the mean keeps the
    differences of sums well conditioned. r is NaN where a variable is constant on the pair's cases.
    """
    p = len(bases)
    rows = bases[0].values.size if p else 0
    centre = np.array([b.sorted_values.mean() if b.sorted_values.size else 0.0 for b in bases])
    xx = np.zeros((p, p))
    xv = np.zeros((p, p))
    x2v = np.zeros((p, p))
    vv = np.zeros((p, p))
    for start in range(0, rows, BLOCK_ROWS):
        stop = min(rows, start + BLOCK_ROWS)
        block = np.empty((stop - start, p))
        for j, base in enumerate(bases):
            block[:, j] = base.values[start:stop]
        block -= centre
        valid = ~np.isnan(block)
        block[~valid] = 0.0
        v = valid.astype(np.float64)
        xx += block.T @ block
        xv += block.T @ v
        x2v += (block * block).T @ v
        vv += v.T @ v
    n = vv
    with np.errstate(divide="ignore", invalid="ignore"):
        sx = xv
        sy = xv.T
        cov = xx - sx * sy / n
        var_x = x2v - sx * sx / n
        var_y = x2v.T - sy * sy / n
        # a variable constant on the pair's cases leaves only rounding error in its sum of squares
        flat = (var_x <= 1e-12 * np.maximum(x2v, 1e-300)) | (var_y <= 1e-12 * np.maximum(x2v.T, 1e-300))
        r = cov / np.sqrt(var_x * var_y)
    r[flat | (n < 2)] = np.nan
    return np.clip(r, -1.0, 1.0), n.astype(np.int64)


def spearman(x: RankBase, y: RankBase, rows: np.ndarray) -> float | None:
    """Spearman's rho on ``rows`` (the pair's complete cases), ranked on those rows: Pearson's r of the
    ranks, whose mean is (n + 1) / 2 whatever the ties."""
    n = rows.size
    rx, sxx = x.rank_sums(rows)
    ry, syy = y.rank_sums(rows)
    mean_square = n * ((n + 1) / 2.0) ** 2
    var_x, var_y = sxx - mean_square, syy - mean_square
    if var_x <= 1e-9 * sxx or var_y <= 1e-9 * syy:
        return None
    return max(-1.0, min(1.0, (float(rx @ ry) - mean_square) / math.sqrt(var_x * var_y)))


def compact_groups(codes: np.ndarray, levels: int) -> tuple[np.ndarray, int]:
    """Level indices renumbered 0..k-1 over the levels that occur (no sort of the rows)."""
    seen = np.flatnonzero(np.bincount(codes, minlength=levels))
    renumber = np.full(max(levels, 1), -1, dtype=np.int64)
    renumber[seen] = np.arange(seen.size)
    return renumber[codes], int(seen.size)


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
    r, counts = pearson_matrix([c.base for c in used])
    for i, a in enumerate(used):
        for j in range(i + 1, len(used)):
            b = used[j]
            n = int(counts[i, j])
            entry: dict[str, Any] = {"a": a.name, "b": b.name, "pearson": None, "spearman": None,
                                     "n": n, "strong": False}
            if n >= MIN_PAIR_CASES:
                entry["pearson"] = None if np.isnan(r[i, j]) else float(r[i, j])
                entry["spearman"] = spearman(a.base, b.base, np.flatnonzero(a.base.valid & b.base.valid))
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
            groups, k = compact_groups(by.codes[rows], by.levels)
            entry["groups"] = k
            entry["anova"] = significance.anova(groups, column.base.values[rows], k)
            ranks, tie_sum = column.base.ranks(rows)
            entry["kruskal_wallis"] = significance.kruskal_wallis(groups, ranks, k, tie_sum)
        results.append(entry)
    for test in ("anova", "kruskal_wallis"):
        adjusted = significance.holm([r[test]["p_unadjusted"] if r[test] else None for r in results])
        for entry, p in zip(results, adjusted):
            if entry[test] is not None:
                entry[test]["p_holm"] = p
    return {"by": by.name, "comparisons": results,
            "adjustment": "Holm (1979) across the variables, for each test separately"}
