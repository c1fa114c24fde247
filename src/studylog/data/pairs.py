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

import functools
import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from studylog.data import significance
from studylog.data.ordered import CountedValues, OrderedValues, SortedValues

MIN_PAIR_CASES = 10
MAX_NUMERIC_COLUMNS = 50
MAX_PAIR_LEVELS = 50
DEFAULT_STRONG = 0.9
INTEGER_COUNTING_SPAN = 1 << 22
# a pair's ranks are worked out from the column's own where it has this many times more tie groups
# than rows dropped for the pair (``RankBase._pair_ranks_sparse``)
SPARSE_GROUPS = 8
# sums by level are matrix products with the levels' indicators up to this many levels
INDICATOR_LEVELS = 8


def _dot(a: np.ndarray, b: np.ndarray) -> float:
    """Inner product in numpy's own loop: BLAS may start threads of its own, which compete with ours
    (columns and pairs already run in parallel) for a small vector operation."""
    return float(np.einsum("i,i->", a, b))


@dataclass
class RankBase:
    """One sort of a numeric column: its values in order (sorted, or counted: ``data.ordered``), each
    row's tie group in value order, and the values shifted by their mean with 0 where missing (for
    sums over any pair's complete cases)."""

    valid: np.ndarray  # bool
    ordered: OrderedValues
    group_row: np.ndarray  # tie-group number of each row, as intp (``groups`` where missing)
    groups: int
    group_counts: np.ndarray  # rows in each tie group
    centre: float = 0.0
    centred: np.ndarray = field(default_factory=lambda: np.zeros(0))  # x - centre, 0 where missing
    missing_rows: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    total: float = 0.0  # sum of centred values
    total_squares: float = 0.0

    @property
    def sorted_values(self) -> np.ndarray:
        return self.ordered.materialized()

    def finish(self, present: np.ndarray) -> RankBase:
        self.centre = float(present.mean()) if present.size else 0.0
        self.centred -= self.centre
        invalid = ~self.valid
        self.centred[invalid] = 0.0
        self.missing_rows = np.flatnonzero(invalid)
        self.group_row[self.missing_rows] = self.groups  # a slot after the groups (pair_ranks)
        self.total = float(self.centred.sum())
        self.total_squares = _dot(self.centred, self.centred)
        return self

    @classmethod
    def of(cls, values: np.ndarray, integer: bool = False, *, reuse: bool = False) -> RankBase:
        """One sort; whole numbers spanning fewer than 2^22 values are counted instead of sorted (a
        tie group per possible value, empty groups included: ranks are unchanged by empty groups).
        ``values``: NaN where missing; with ``reuse`` the array itself becomes ``centred`` (no copy).
        """
        if not reuse:
            values = values.copy()
        valid = ~np.isnan(values)
        present = values[valid]
        if integer and present.size and present.max() - present.min() < INTEGER_COUNTING_SPAN:
            low = present.min()
            offsets = (present - low).astype(np.int64)
            counts = np.bincount(offsets)
            seen = np.flatnonzero(counts)
            ordered = CountedValues(low + seen.astype(np.float64), counts[seen])
            group_row = np.zeros(values.size, dtype=np.intp)
            group_row[valid] = offsets  # by the mask: twice as fast as by the rows' numbers
            return cls(valid, ordered, group_row, int(counts.size), counts, centred=values).finish(present)
        scale = 1.0 if integer else _decimal_scale(present)
        whole = _whole_at_scale(present, scale) if scale is not None else None
        if whole is not None and not integer:
            counted = _counted_decimals(cls, values, valid, present, scale, *whole)
            if counted is not None:
                return counted
        rows = np.flatnonzero(valid)
        packed = _packed_sort(rows, scale, *whole) if whole is not None and scale is not None else None
        if packed is not None:
            row_order, sorted_values = packed
        else:
            order = np.argsort(present)  # tie order is irrelevant: ties share a group
            sorted_values = present[order]
            row_order = rows[order]
        starts = np.empty(sorted_values.size, dtype=bool)
        starts[:1] = True
        starts[1:] = sorted_values[1:] != sorted_values[:-1]
        group_sorted = np.cumsum(starts, dtype=np.intp) - 1
        group_row = np.zeros(values.size, dtype=np.intp)
        group_row[row_order] = group_sorted
        groups = int(group_sorted[-1]) + 1 if group_sorted.size else 0
        counts = np.diff(np.append(np.flatnonzero(starts), sorted_values.size))
        return cls(valid, SortedValues(sorted_values), group_row, groups, counts, centred=values).finish(present)

    def ranks(self, rows: np.ndarray) -> tuple[np.ndarray, float]:
        """Average ranks (1..len(rows)) of the values at ``rows`` among those rows only, and
        sum(t^3 - t) over their tie groups (for tie corrections)."""
        ranks, counts, _average = self._ranks(rows)
        counts_f = counts.astype(np.float64)
        return ranks, float((counts_f**3 - counts_f).sum())

    def _ranks(self, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        group = self.group_row[rows]
        counts = np.bincount(group, minlength=self.groups)
        average = _average_ranks(counts)
        return average[group], counts, average

    def pair_ranks(self, other: RankBase) -> tuple[np.ndarray, float]:
        """Average ranks among the rows where both columns are present, for every row (0 where this
        column is missing), and the sum of their squares over the pair's rows.

        The pair's tie groups are this column's less the rows where only the other is missing (few,
        usually): no pair counts all its rows again. A row where only the other is missing keeps a rank
        here, which the other's 0 there cancels in a sum of products: no pair selects its rows."""
        counts = self.group_counts
        dropped = other.missing_rows[self.valid[other.missing_rows]]
        if dropped.size and self.groups > SPARSE_GROUPS * dropped.size:
            return self._pair_ranks_sparse(dropped)
        if dropped.size:
            counts = counts - np.bincount(self.group_row[dropped], minlength=self.groups)
        table = np.empty(self.groups + 1)  # the slot after the groups: 0 for the missing rows
        average = _average_ranks(counts, out=table[:-1])
        table[-1] = 0.0
        ranks = np.take(table, self.group_row, mode="clip")  # in range: clipping skips the check
        return ranks, float(np.einsum("i,i,i->", counts, average, average))

    def _pair_ranks_sparse(self, dropped: np.ndarray) -> tuple[np.ndarray, float]:
        """``pair_ranks`` of a column of many tie groups (nearly all values distinct), where the rows
        dropped for the pair touch few of them: each group's rank moves down by the dropped rows in
        the groups before it (a step at each group touched) and by half those in it, so the ranks are
        the column's own less those steps, and the sum of squares has its closed form
        n (n + 1) (2n + 1) / 6 - sum(t^3 - t) / 12 over the pair's tie groups of t rows."""
        touched, lost = np.unique(self.group_row[dropped], return_counts=True)
        below = np.concatenate(([0], np.cumsum(lost)))  # dropped rows in the groups before each step
        lengths = np.diff(np.concatenate(([0], touched + 1, [self.groups])))
        table = np.empty(self.groups + 1)  # the slot after the groups: 0 for the missing rows
        np.subtract(self._own_average, np.repeat(below, lengths), out=table[:-1])
        table[touched] -= 0.5 * lost
        table[-1] = 0.0
        ranks = np.take(table, self.group_row, mode="clip")
        ties = self._tie_groups
        sizes = self.group_counts[ties].astype(np.float64)
        if ties.size:
            at = np.searchsorted(ties, touched).clip(max=ties.size - 1)
            hit = ties[at] == touched
            sizes[at[hit]] -= lost[hit]
        n = self.present - int(dropped.size)
        return ranks, float(n * (n + 1) * (2 * n + 1)) / 6 - float(np.sum(sizes**3 - sizes)) / 12

    @functools.cached_property
    def present(self) -> int:
        """How many values the column has."""
        return int(self.valid.size - self.missing_rows.size)

    @functools.cached_property
    def _own_average(self) -> np.ndarray:
        """Each tie group's average rank among all the column's values."""
        return _average_ranks(self.group_counts)

    @functools.cached_property
    def _tie_groups(self) -> np.ndarray:
        return np.flatnonzero(self.group_counts >= 2)

    def rank_sums(self, rows: np.ndarray) -> tuple[np.ndarray, float]:
        """Ranks on ``rows`` and the sum of their squares (from the groups, not the rows)."""
        ranks, counts, average = self._ranks(rows)
        return ranks, float((counts * (average * average)).sum())


DECIMAL_PLACES = 6  # numbers with at most this many decimals can be counted instead of sorted
SCALE_SAMPLE = 1000


def _decimal_scale(present: np.ndarray) -> float | None:
    """10^d for the fewest decimals d (at most DECIMAL_PLACES) that a sample of the values shows,
    or None when the sample has more (then the values are sorted)."""
    if not present.size:
        return None
    sample = present[:: max(1, present.size // SCALE_SAMPLE)]
    for places in range(DECIMAL_PLACES + 1):
        scale = float(10**places)
        if np.array_equal(np.round(sample * scale) / scale, sample):
            return scale
    return None


def _whole_at_scale(present: np.ndarray, scale: float) -> tuple[np.ndarray, float, float] | None:
    """Every value times ``scale`` as a whole number k (as float64), with the least and the largest,
    when k / scale gives back each value exactly and every k is exact in a float64; None otherwise,
    or when a value is -0 (which counting and packing would turn into 0)."""
    whole = np.round(present * scale) if scale != 1.0 else present
    if not whole.size:
        return None
    low, high = float(whole.min()), float(whole.max())
    if max(-low, high) >= 2.0**53 or (scale != 1.0 and not np.array_equal(whole / scale, present)):
        return None
    if low <= 0 <= high and np.signbit(present[present == 0]).any():
        return None
    return whole, low, high


def _counted_decimals(cls: type[RankBase], values: np.ndarray, valid: np.ndarray, present: np.ndarray,
                      scale: float, whole: np.ndarray, low: float, high: float) -> RankBase | None:
    """The same RankBase as sorting gives, by counting: every value is k / scale for a whole k
    (``_whole_at_scale``), and the ks span few values; None when they span many."""
    if high - low >= min(INTEGER_COUNTING_SPAN, 2 * present.size + 1024) or max(-low, high) >= 2.0**40:
        return None
    offsets = (whole - low).astype(np.intp)
    span_counts = np.bincount(offsets)
    seen = span_counts > 0
    counts = span_counts[seen]
    # tie groups numbered in value order over the values that occur, as sorting numbers them
    dense = np.cumsum(seen, dtype=np.intp)
    dense -= 1
    ordered = CountedValues((low + np.flatnonzero(seen).astype(np.float64)) / scale, counts)
    group_row = np.zeros(values.size, dtype=np.intp)
    group_row[valid] = dense[offsets]
    return cls(valid, ordered, group_row, int(counts.size), counts, centred=values).finish(present)


def _packed_sort(rows: np.ndarray, scale: float, whole: np.ndarray, low: float,
                 high: float) -> tuple[np.ndarray, np.ndarray] | None:
    """The rows in the order of their values, and the values in order, for whole numbers (at
    ``scale``: ``_whole_at_scale``) spanning too many values to count: one sort of 64-bit keys, each a
    number's offset above the least with its row in the low bits, several times faster than an
    argsort of the values; None when the keys need more than 64 bits."""
    bits = max(int(rows[-1]).bit_length(), 1) if rows.size else 1
    if high - low >= 2.0 ** (64 - bits):
        return None
    keys = np.subtract(whole, low).astype(np.uint64)
    keys <<= np.uint64(bits)
    keys |= rows.astype(np.uint64)
    keys.sort()
    row_order = (keys & np.uint64((1 << bits) - 1)).astype(np.intp)
    keys >>= np.uint64(bits)
    # k / scale gives back each value exactly (``_whole_at_scale``): the values themselves, in order
    ordered = keys.astype(np.float64)
    ordered += low
    if scale != 1.0:
        ordered /= scale
    return row_order, ordered


def _average_ranks(counts: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """Each tie group's average rank: its last position less half of the others in it, that is
    (2 cumsum - count + 1) / 2, in integers until the one exact halving (into ``out``, float64)."""
    twice = np.cumsum(counts)
    twice *= 2
    twice -= counts
    twice += 1
    return np.multiply(twice, 0.5, out=out)


def pearson(x: np.ndarray, y: np.ndarray) -> float | None:
    """Pearson's r (None when either variable is constant)."""
    dx = x - x.mean()
    dy = y - y.mean()
    sxx = _dot(dx, dx)
    syy = _dot(dy, dy)
    if sxx == 0.0 or syy == 0.0:
        return None
    return max(-1.0, min(1.0, _dot(dx, dy) / math.sqrt(sxx * syy)))


def pearson_pair(x: RankBase, y: RankBase, cases: int | None = None) -> tuple[float | None, int]:
    """Pearson's r on the pair's complete cases, and their number (``cases``: ``pair_cases``, if known).

    Sums over the complete cases are the column's sums less those over the rows where the other
    variable is missing (few, usually): with centred values c (0 where missing),
    Sx = sum(c_x) - sum(c_x[y missing]), Sxx likewise, Sxy = c_x . c_y (zeros drop out), n likewise;
    r = (Sxy - Sx Sy / n) / sqrt((Sxx - Sx^2 / n)(Syy - Sy^2 / n)). Centring by each column's mean
    keeps these differences of sums well conditioned.
    """
    n = pair_cases(x, y) if cases is None else cases
    if n < 2:
        return None, n
    x_out = x.centred[y.missing_rows]
    y_out = y.centred[x.missing_rows]
    sx = x.total - float(x_out.sum())
    sy = y.total - float(y_out.sum())
    sxx = x.total_squares - _dot(x_out, x_out)
    syy = y.total_squares - _dot(y_out, y_out)
    sxy = _dot(x.centred, y.centred)
    var_x, var_y = sxx - sx * sx / n, syy - sy * sy / n
    # a variable constant on the pair's cases leaves only rounding error in its sum of squares
    if var_x <= 1e-12 * max(sxx, 1e-300) or var_y <= 1e-12 * max(syy, 1e-300):
        return None, n
    return max(-1.0, min(1.0, (sxy - sx * sy / n) / math.sqrt(var_x * var_y))), n


def pearson_matrix(bases: Sequence[RankBase]) -> tuple[np.ndarray, np.ndarray]:
    """Pearson's r of every pair (NaN where undefined) and the pair counts, as matrices."""
    p = len(bases)
    r = np.full((p, p), np.nan)
    counts = np.zeros((p, p), dtype=np.int64)
    for i in range(p):
        for j in range(i + 1, p):
            value, n = pearson_pair(bases[i], bases[j])
            counts[i, j] = counts[j, i] = n
            r[i, j] = r[j, i] = np.nan if value is None else value
    return r, counts


def spearman(x: RankBase, y: RankBase, rows: np.ndarray) -> float | None:
    """Spearman's rho on ``rows`` (the pair's complete cases), ranked on those rows: Pearson's r of the
    ranks, whose mean is (n + 1) / 2 whatever the ties."""
    rx, sxx = x.rank_sums(rows)
    ry, syy = y.rank_sums(rows)
    return _rank_correlation(rx, ry, sxx, syy, rows.size)


def spearman_pair(x: RankBase, y: RankBase, cases: int | None = None) -> float | None:
    """``spearman`` on the rows where both are present (``cases``: how many, if known), from
    ``RankBase.pair_ranks``."""
    n = pair_cases(x, y) if cases is None else cases
    rx, sxx = x.pair_ranks(y)
    ry, syy = y.pair_ranks(x)
    return _rank_correlation(rx, ry, sxx, syy, n)


def _rank_correlation(rx: np.ndarray, ry: np.ndarray, sxx: float, syy: float, n: int) -> float | None:
    """Pearson's r of n pairs of ranks from their sums of squares (None for a variable constant there)."""
    mean_square = n * ((n + 1) / 2.0) ** 2
    var_x, var_y = sxx - mean_square, syy - mean_square
    if var_x <= 1e-9 * sxx or var_y <= 1e-9 * syy:
        return None
    return max(-1.0, min(1.0, (_dot(rx, ry) - mean_square) / math.sqrt(var_x * var_y)))


def compact_groups_counted(codes: np.ndarray, levels: int) -> tuple[np.ndarray, int, np.ndarray]:
    """Level indices renumbered 0..k-1 over the levels that occur (no sort of the rows), k, and the rows
    in each group."""
    counts = np.bincount(codes, minlength=levels)
    seen = np.flatnonzero(counts)
    if seen.size == levels:
        return codes, levels, counts  # every level occurs: the numbering stands
    renumber = np.full(max(levels, 1), -1, dtype=np.int64)
    renumber[seen] = np.arange(seen.size)
    return renumber[codes], int(seen.size), counts[seen]


@dataclass
class NumericColumn:
    name: str
    base: RankBase
    missing: int
    is_input: bool = True


def correlation_pairs(columns: Sequence[NumericColumn]) -> list[tuple[NumericColumn, NumericColumn]]:
    """The pairs that ``correlations`` measures (of the first 50 columns), in its order."""
    used = list(columns[:MAX_NUMERIC_COLUMNS])
    return [(a, b) for i, a in enumerate(used) for b in used[i + 1:]]


def pair_cases(x: RankBase, y: RankBase) -> int:
    """How many rows have both values: x's less those where only y is missing (no pass over all rows)."""
    return x.present - int(np.count_nonzero(x.valid[y.missing_rows]))


def correlation(job: tuple[NumericColumn, NumericColumn]) -> dict[str, Any]:
    """One pair of ``correlations`` (before the strong pairs are marked)."""
    a, b = job
    cases = pair_cases(a.base, b.base)
    r, n = pearson_pair(a.base, b.base, cases)
    entry: dict[str, Any] = {"a": a.name, "b": b.name, "pearson": None, "spearman": None, "n": n,
                             "strong": False}
    if n >= MIN_PAIR_CASES:
        entry["pearson"] = r
        entry["spearman"] = spearman_pair(a.base, b.base, cases)
    return entry


def correlations(columns: Sequence[NumericColumn], strong: float = DEFAULT_STRONG,
                 mapper: Callable[..., Iterable[Any]] = map,
                 measured: Iterable[dict[str, Any]] | None = None) -> dict[str, Any]:
    """Every pair of numeric columns (the first 50): r, rho, n, strong, and which one to consider.
    ``mapper`` (e.g. a thread pool's map) computes the pairs; ``measured``: ``correlation`` of each of
    ``correlation_pairs(columns)``, in their order, when the caller has computed them."""
    used = list(columns[:MAX_NUMERIC_COLUMNS])
    pairs: list[dict[str, Any]] = list(
        mapper(correlation, correlation_pairs(columns)) if measured is None else measured)
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

    @functools.cached_property
    def present(self) -> np.ndarray:
        """Where a level is given (the mask of codes >= 0; made once, read by every measure)."""
        return self.codes >= 0

    @functools.cached_property
    def shifted(self) -> np.ndarray:
        """The codes plus one (0 where missing), in 16 bits when the column has at most
        MAX_PAIR_LEVELS levels: the cells of a pair of such columns fit (``association``), and the
        passes over a quarter of the bytes are that much faster (made once, read by every pair)."""
        shifted = self.codes + 1
        return shifted.astype(np.int16) if self.levels <= MAX_PAIR_LEVELS else shifted

    def sums_by_level(self, values: np.ndarray) -> np.ndarray:
        """The sum of ``values`` (one per row, no NaN) over each level's rows: for a few levels, one
        matrix product with their indicators (made once), several times faster than a weighted count."""
        if self.levels <= INDICATOR_LEVELS:
            return self._indicators @ values
        slot = self.slotted[0]
        return np.bincount(slot, weights=values, minlength=self.levels + 1)[: self.levels]

    @functools.cached_property
    def _indicators(self) -> np.ndarray:
        """1.0 where a row has the level, one row of the matrix per level."""
        return (self.codes == np.arange(self.levels)[:, None]).astype(np.float64)

    @functools.cached_property
    def slotted(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The codes with a missing level's rows in a slot after the levels (``levels``), the rows of
        each level, and the rows where the level is missing (made once, for sums by level over all
        rows: see ``profile._leakage_measure``)."""
        slot = np.where(self.present, self.codes, self.levels).astype(np.intp, copy=False)
        return slot, np.bincount(slot, minlength=self.levels + 1)[: self.levels], \
            np.flatnonzero(~self.present)


def associations(columns: Sequence[LevelColumn],
                 mapper: Callable[..., Iterable[Any]] = map) -> list[dict[str, Any]]:
    """Every pair of categorical columns with at most 50 levels: Cramer's V (plain and corrected),
    chi-square, n used, missing excluded; Kendall's tau-b when both are ordinal. ``mapper`` (e.g. a
    thread pool's map) computes the pairs."""
    return list(mapper(association, association_pairs(columns)))


def association_pairs(columns: Sequence[LevelColumn]) -> list[tuple[LevelColumn, LevelColumn]]:
    """The pairs that ``associations`` measures, in its order."""
    used = [c for c in columns if 0 < c.levels <= MAX_PAIR_LEVELS]
    return [(a, b) for i, a in enumerate(used) for b in used[i + 1:]]


def association(job: tuple[LevelColumn, LevelColumn]) -> dict[str, Any]:
    """One pair of ``associations``."""
    a, b = job
    # counted with a row and a column for the missing (index -1 + 1 = 0), then left out: one pass
    cell = a.shifted * (b.levels + 1)
    cell += b.shifted
    joint = np.bincount(cell, minlength=(a.levels + 1) * (b.levels + 1)).reshape(a.levels + 1, b.levels + 1)
    table = np.ascontiguousarray(joint[1:, 1:])
    n = int(table.sum())
    test = significance.chi_square(table)
    v, v_corrected = significance.cramers_v(test)
    entry: dict[str, Any] = {
        "a": a.name, "b": b.name, "cramers_v": v, "cramers_v_corrected": v_corrected, "n": n,
        "missing_excluded": int(a.codes.size - n),
        "chi2": test["chi2"] if test else None, "df": test["df"] if test else None,
        "p_value": test["p_value"] if test else None,
    }
    if a.ordinal_rank is not None and b.ordinal_rank is not None:
        ordered = table[np.argsort(a.ordinal_rank)][:, np.argsort(b.ordinal_rank)]
        entry["kendall_tau_b"] = significance.kendall_tau_b(ordered) if n >= MIN_PAIR_CASES else None
    return entry


def group_comparisons(by: LevelColumn, numeric: Sequence[NumericColumn],
                      mapper: Callable[..., Iterable[Any]] = map) -> dict[str, Any]:
    """ANOVA and Kruskal-Wallis of each numeric variable across the groups of ``by``, Holm-adjusted.
    ``mapper`` (e.g. a thread pool's map) computes the variables' tests."""

    def compare(column: NumericColumn) -> dict[str, Any]:
        rows = np.flatnonzero(column.base.valid & by.present)
        entry: dict[str, Any] = {"variable": column.name, "n": int(rows.size), "anova": None,
                                 "kruskal_wallis": None}
        if rows.size >= 3:
            groups, k, sizes = compact_groups_counted(by.codes[rows], by.levels)
            entry["groups"] = k
            entry["anova"] = significance.anova(groups, column.base.centred[rows], k, sizes)
            ranks, tie_sum = column.base.ranks(rows)
            entry["kruskal_wallis"] = significance.kruskal_wallis(groups, ranks, k, tie_sum)
        return entry

    results = list(mapper(compare, [column for column in numeric if column.name != by.name]))
    for test in ("anova", "kruskal_wallis"):
        adjusted = significance.holm([r[test]["p_unadjusted"] if r[test] else None for r in results])
        for entry, p in zip(results, adjusted):
            if entry[test] is not None:
                entry[test]["p_holm"] = p
    return {"by": by.name, "comparisons": results,
            "adjustment": "Holm (1979) across the variables, for each test separately"}
