"""The numeric part of a stored profile: exact moments, exact value counts while few, a KLL sketch past that.

A column's distinct values and their counts are kept exactly while there are at most ``EXACT_LIMIT``
(100,000) of them, however many rows hold them: quantiles (Hyndman & Fan type 7, numpy's default),
the histogram and the outlier counts are then computed exactly from the counts, as numpy computes them
from the values themselves (``tests/data/test_summary.py`` holds them equal). Only a column with more
distinct values than that needs a quantile sketch (KLL, k = 200, Apache DataSketches): the sketch is
started when the counts overflow, fed the values counted so far, and from then on every value.

The sketch is stored whenever the profile does not list the value counts (more than
``VALUE_COUNTS_STORED`` distinct values), because drift reads a later drop's shares at the earlier
drop's edges from it; a profile that lists its value counts needs none (drift bins the counts).
"""

from __future__ import annotations

import base64
from typing import TYPE_CHECKING, Any

from studylog.data.distinct import DistinctEstimate, hash_values, merge_sorted

if TYPE_CHECKING:
    import numpy as np

EXACT_LIMIT = 100_000
VALUE_COUNTS_STORED = 1_000
KLL_K = 200
HISTOGRAM_BINS = 20
PROBABILITIES = [0.25, 0.5, 0.75] + [i / 10 for i in range(1, 10)]
# values fed to the sketch at a time when it is built from counts (bounded memory)
SKETCH_FEED = 1 << 20


def kll_error() -> float:
    """The KLL sketch's normalized rank error bound for k = 200 (single-sided quantile queries)."""
    from datasketches import kll_doubles_sketch

    return float(kll_doubles_sketch.get_normalized_rank_error(KLL_K, False))


def decode_sketch(text: str):  # type: ignore[no-untyped-def]
    """The KLL sketch stored in a profile's "sketch" field."""
    from datasketches import kll_doubles_sketch

    return kll_doubles_sketch.deserialize(base64.b64decode(text))


class NumericSummary:
    """Mergeable numeric statistics of a column (its present, finite values)."""

    def __init__(self) -> None:
        import numpy as np

        self.n = 0
        self.mean = 0.0
        self.m2 = 0.0
        self.minimum = float("inf")
        self.maximum = float("-inf")
        # the exact distinct values (sorted) and their counts while at most EXACT_LIMIT; else None
        self.uniques: np.ndarray | None = np.empty(0)
        self.unique_counts = np.empty(0, dtype=np.int64)
        # started once the counts overflow (``uniques`` None), then fed every value
        self.sketch: Any = None
        self.distinct = DistinctEstimate()

    def update(self, x: np.ndarray) -> None:
        import numpy as np

        if len(x) == 0:
            return
        x = np.ascontiguousarray(x, dtype=np.float64)
        batch_mean = float(x.mean())
        batch_m2 = float(((x - batch_mean) ** 2).sum())
        self._combine(len(x), batch_mean, batch_m2)
        self.minimum = min(self.minimum, float(x.min()))
        self.maximum = max(self.maximum, float(x.max()))
        if self.uniques is not None:
            self._add_uniques(*np.unique(x, return_counts=True))
        else:
            # the sketch's binding needs a writable array it may not keep: a copy
            self.sketch.update(np.array(x, dtype=np.float64, copy=True))
            # k minimum values of a set = of the multiset: no need to make the batch's values unique
            self.distinct.add_hashes(hash_values(x))

    def _add_uniques(self, values: np.ndarray, counts: np.ndarray) -> None:
        """Add sorted distinct values and their counts to the exact counts (or overflow them)."""
        import numpy as np

        assert self.uniques is not None
        merged, merged_counts = merge_sorted(self.uniques, values, self.unique_counts,
                                             counts.astype(np.int64, copy=False))
        assert merged_counts is not None
        self.uniques, self.unique_counts = merged, merged_counts
        if len(self.uniques) > EXACT_LIMIT:
            self._overflow()

    def _overflow(self) -> None:
        """Too many distinct values to count: the sketch and the distinct estimate take over."""
        assert self.uniques is not None
        self.sketch = _sketch_of_counts(self.uniques, self.unique_counts)
        self.distinct.add_hashes(hash_values(self.uniques))
        self.uniques, self.unique_counts = None, self.unique_counts[:0]

    def _combine(self, n: int, mean: float, m2: float) -> None:
        # Chan, Golub & LeVeque (1979): pairwise update of count, mean and sum of squared deviations
        if n == 0:
            return
        total = self.n + n
        delta = mean - self.mean
        self.mean += delta * n / total
        self.m2 += m2 + delta * delta * self.n * n / total
        self.n = total

    def merge(self, other: NumericSummary) -> None:
        self._combine(other.n, other.mean, other.m2)
        self.minimum = min(self.minimum, other.minimum)
        self.maximum = max(self.maximum, other.maximum)
        if self.uniques is not None and other.uniques is not None:
            if len(other.uniques):
                self._add_uniques(other.uniques, other.unique_counts)
            return
        if self.uniques is not None:
            self._overflow()
        assert self.sketch is not None
        if other.uniques is not None:
            if len(other.uniques):
                self.sketch.merge(_sketch_of_counts(other.uniques, other.unique_counts))
                self.distinct.add_hashes(hash_values(other.uniques))
        else:
            self.sketch.merge(other.sketch)
            self.distinct.merge(other.distinct)

    def to_dict(self) -> dict[str, Any]:
        import numpy as np

        if self.n == 0:
            return {key: None for key in (
                "min", "max", "mean", "sd", "q1", "median", "q3", "deciles", "sketch", "histogram",
                "outliers", "value_counts")} | {"quantile_error": 0.0, "quantiles_exact": True}
        exact = self.uniques is not None
        edges = np.linspace(self.minimum, self.maximum, HISTOGRAM_BINS + 1)
        if self.minimum == self.maximum:
            edges = np.array([self.minimum, self.maximum])
        outliers = None
        sketch = self.sketch
        if self.uniques is not None:
            values, counts = self.uniques, self.unique_counts
            quantiles = counted_quantiles(values, counts, PROBABILITIES)
            histogram = np.histogram(values, bins=edges, weights=counts)[0]
            bin_counts = np.rint(histogram).astype(np.int64).tolist()
            outliers = counted_outliers(values, counts)
            if len(values) > VALUE_COUNTS_STORED:
                sketch = _sketch_of_counts(values, counts)
        else:
            quantiles = [float(q) for q in sketch.get_quantiles(PROBABILITIES)]
            cdf = np.asarray(sketch.get_cdf(edges[1:-1].tolist()))[:-1] if len(edges) > 2 else []
            cumulative = np.concatenate([[0.0], np.asarray(cdf) * self.n, [float(self.n)]])
            bin_counts = np.round(np.diff(cumulative)).astype(int).tolist()
        sd = float(np.sqrt(self.m2 / (self.n - 1))) if self.n > 1 else None
        listed = self.uniques is not None and len(self.uniques) <= VALUE_COUNTS_STORED
        return {
            "min": number(self.minimum), "max": number(self.maximum), "mean": self.mean, "sd": sd,
            "q1": quantiles[0], "median": quantiles[1], "q3": quantiles[2], "deciles": quantiles[3:],
            "quantiles_exact": exact, "quantile_error": 0.0 if exact else kll_error(),
            "sketch": None if sketch is None else base64.b64encode(sketch.serialize()).decode("ascii"),
            "histogram": {"edges": [number(e) for e in edges], "counts": bin_counts},
            "outliers": outliers,
            # every distinct value with its count, when few: drift then bins them exactly
            "value_counts": (
                {"values": [number(v) for v in self.uniques], "counts": self.unique_counts.tolist()}
                if listed and self.uniques is not None else None
            ),
        }

    def distinct_count(self) -> tuple[int, bool]:
        if self.uniques is not None:
            return int(len(self.uniques)), True
        return self.distinct.estimate(), False


def _sketch_of_counts(values: np.ndarray, counts: np.ndarray) -> Any:
    """A KLL sketch of the values, each repeated its count of times (fed a bounded slice at a time)."""
    import numpy as np
    from datasketches import kll_doubles_sketch

    sketch = kll_doubles_sketch(KLL_K)
    ends = np.cumsum(counts)
    start = 0
    while start < len(values):
        # as many distinct values as make up about SKETCH_FEED rows (at least one)
        base = ends[start - 1] if start else 0
        stop = max(int(np.searchsorted(ends, base + SKETCH_FEED, side="right")), start + 1)
        sketch.update(np.repeat(values[start:stop], counts[start:stop]).astype(np.float64))
        start = stop
    return sketch


def counted_quantiles(values: np.ndarray, counts: np.ndarray, probabilities: list[float]) -> list[float]:
    """``np.quantile`` (linear, Hyndman & Fan type 7) of the values each repeated its count, from the counts.

    The virtual index and the interpolation are written as numpy writes them, so that the results are
    equal to numpy's bit for bit.
    """
    import numpy as np

    from studylog.data.ordered import CountedValues

    counted = CountedValues(values, counts)
    n = counted.n
    q = np.asarray(probabilities, dtype=np.float64)
    virtual = (n - 1) * q
    previous = np.floor(virtual)
    gamma = virtual - previous
    below = np.clip(previous.astype(np.int64), 0, n - 1)
    above = np.clip(previous.astype(np.int64) + 1, 0, n - 1)
    a = counted.at(below)
    b = counted.at(above)
    difference = b - a
    result = np.asarray(a + difference * gamma)
    np.subtract(b, difference * (1 - gamma), out=result, where=gamma >= 0.5)
    return [float(v) for v in result]


def counted_outliers(values: np.ndarray, counts: np.ndarray) -> dict[str, int | None]:
    """Tukey fences (1.5 and 3 x the spread between Tukey's hinges) and modified z-scores (|M| > 3.5),
    from the distinct values and their counts.

    Tukey's hinges are the medians of the lower and upper halves, each half including the median when n
    is odd (Tukey 1977), as box plots draw them. Modified z: M = 0.6745 (x - median) / MAD (Iglewicz &
    Hoaglin 1993); when MAD is 0 the count is null (no spread to measure against).
    """
    import numpy as np

    from studylog.data.ordered import CountedValues

    counted = CountedValues(values, counts)
    n = counted.n
    half = (n + 1) // 2
    lower_hinge = counted.median_of(0, half)
    upper_hinge = counted.median_of(n - half, half)
    spread = upper_hinge - lower_hinge
    inner = (values < lower_hinge - 1.5 * spread) | (values > upper_hinge + 1.5 * spread)
    outer = (values < lower_hinge - 3 * spread) | (values > upper_hinge + 3 * spread)
    median = counted.median_of(0, n)
    mad = counted.mad(median)
    modified = None
    if mad != 0:
        # a MAD of a few ulps makes far values' scores overflow to inf, which is beyond 3.5 as it should be
        with np.errstate(over="ignore"):
            modified = int(counts[np.abs(0.6745 * (values - median) / mad) > 3.5].sum())
    return {"tukey": int(counts[inner].sum()), "tukey_far": int(counts[outer].sum()), "modified_z": modified}


def number(value: float) -> float | int:
    return int(value) if float(value).is_integer() and abs(value) < 2**53 else float(value)
