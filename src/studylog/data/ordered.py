"""A column's present values in ascending order, as the numeric summary reads them: either the sorted
values themselves, or the distinct values with how often each occurs (what counting gives instead of
sorting, for whole numbers and numbers of few decimals).

Both answer the same questions: the value at a rank, how many values lie below a point, the moments,
and the median absolute deviation. The order statistics and counts are exact and equal between the two
forms (the same values at the same ranks, so the same quantiles bit for bit); the moments of the
counted form are weighted sums over the distinct values, equal to those of the values up to the last
bits of floating-point summation. Counting spares the profile a column-sized array of sorted values,
and the passes over it, for every such column; a check's stored profile reads its exact value counts
through ``CountedValues`` too (``data.numeric_summary``).
"""

from __future__ import annotations

import math

import numpy as np


class SortedValues:
    """The values in ascending order (no NaN)."""

    def __init__(self, values: np.ndarray) -> None:
        self.values = values
        self.n = int(values.size)

    def at(self, ranks: np.ndarray) -> np.ndarray:
        """The values at 0-based ranks."""
        return self.values[ranks]

    def below(self, points: float | np.ndarray, side: str = "left") -> np.ndarray:
        """How many values lie below each point (``side="right"``: at or below)."""
        return np.searchsorted(self.values, points, side=side)  # type: ignore[call-overload,no-any-return]

    def run_lengths(self) -> np.ndarray:
        """How often each distinct value occurs, in value order."""
        if self.n == 0:
            return np.zeros(0, dtype=np.int64)
        starts = np.flatnonzero(self.values[1:] != self.values[:-1]) + 1
        return np.diff(np.concatenate(([0], starts, [self.n])))

    def central_sums(self) -> tuple[float, float, float, float]:
        """The mean and the means of the 2nd, 3rd and 4th powers of the deviations from it."""
        mean = float(self.values.mean())
        d = self.values - mean
        d2 = d * d
        return mean, float(d2.mean()), float((d2 * d).mean()), float((d2 * d2).mean())

    def absolute_deviations(self, median: float, z_limit: float, z_constant: float) -> tuple[float, int | None]:
        """MAD about ``median`` and how many values lie farther than ``z_limit`` x MAD / ``z_constant``
        from it (None when MAD is 0: no spread to measure against). The deviations below the median, read backwards, and those from it up
        are two ascending runs (|x - m| is m - x exactly below m): their median is found by bisection
        and the counts by search, without selecting among all the deviations."""
        values = self.values
        split = int(np.searchsorted(values, median, side="left"))
        below = median - values[split - 1::-1] if split else values[:0]
        above = values[split:] - median
        middle = _kth_of_two(below, above, (self.n - 1) // 2)
        mad = middle if self.n % 2 else float((middle + _kth_of_two(below, above, self.n // 2)) / 2)
        if mad == 0.0:
            return mad, None
        limit = z_limit * mad / z_constant
        beyond = below.size - int(np.searchsorted(below, limit, side="right"))
        beyond += above.size - int(np.searchsorted(above, limit, side="right"))
        return mad, beyond

    def materialized(self) -> np.ndarray:
        return self.values


class CountedValues:
    """The distinct values in ascending order (no NaN) and how often each occurs (every count > 0)."""

    def __init__(self, distinct: np.ndarray, counts: np.ndarray) -> None:
        self.distinct = distinct
        self.counts = counts
        self.ends = np.cumsum(counts)  # values up to and including each distinct one
        self.n = int(self.ends[-1]) if self.ends.size else 0

    def at(self, ranks: np.ndarray) -> np.ndarray:
        return self.distinct[np.searchsorted(self.ends, ranks, side="right")]

    def below(self, points: float | np.ndarray, side: str = "left") -> np.ndarray:
        before = np.concatenate(([0], self.ends))
        return before[np.searchsorted(self.distinct, points, side=side)]  # type: ignore[call-overload,no-any-return]

    def run_lengths(self) -> np.ndarray:
        return self.counts

    def central_sums(self) -> tuple[float, float, float, float]:
        weights = self.counts.astype(np.float64)
        mean = float(np.dot(weights, self.distinct) / self.n)
        d = self.distinct - mean
        d2 = d * d
        return (mean, float(np.dot(weights, d2) / self.n), float(np.dot(weights, d2 * d) / self.n),
                float(np.dot(weights, d2 * d2) / self.n))

    def median_of(self, first: int, size: int) -> float:
        """``np.median`` of the ``size`` values in order from rank ``first`` on."""
        middle = first + size // 2
        if size % 2:
            return float(self.at(np.array([middle]))[0])
        low, high = self.at(np.array([middle - 1, middle]))
        return float((low + high) / 2)

    def mad(self, median: float) -> float:
        """The median absolute deviation about ``median``."""
        deviations = np.abs(self.distinct - median)
        order = np.argsort(deviations, kind="stable")
        return CountedValues(deviations[order], self.counts[order]).median_of(0, self.n)

    def absolute_deviations(self, median: float, z_limit: float, z_constant: float) -> tuple[float, int | None]:
        mad = self.mad(median)
        if mad == 0.0:
            return mad, None
        return mad, int(self.counts[np.abs(self.distinct - median) > z_limit * mad / z_constant].sum())

    def materialized(self) -> np.ndarray:
        return np.repeat(self.distinct, self.counts)


OrderedValues = SortedValues | CountedValues


def _kth_of_two(a: np.ndarray, b: np.ndarray, k: int) -> float:
    """The k-th smallest (from 0) of two ascending arrays together."""
    lo, hi = max(0, k + 1 - b.size), min(k + 1, a.size)
    while True:
        i = (lo + hi) // 2  # taken from a; the rest, j, from b
        j = k + 1 - i
        if i < a.size and j > 0 and b[j - 1] > a[i]:
            lo = i + 1
        elif i > 0 and j < b.size and a[i - 1] > b[j]:
            hi = i - 1
        else:
            return float(max(a[i - 1] if i else -math.inf, b[j - 1] if j else -math.inf))
