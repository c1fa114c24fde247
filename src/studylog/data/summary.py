"""Mergeable per-column summaries: the stored profile of each variable in a checked drop.

How the check uses it (one summary per column, fed batch by batch in the same pass as the rules)::

    from studylog.data.summary import ColumnSummary
    summary = ColumnSummary(spec, spec.type)          # spec: VariableSpec, or None for an undeclared column
    for batch in source.batches():
        summary.update(batch.column(name))             # a string array; null or empty cells are missing
    profile = summary.to_dict()                        # the stored profile (``profiles.data``)

Summaries of parts of a file merge into the summary of the whole (``a.merge(b)``): counts add, means and
variances combine by Chan, Golub & LeVeque's pairwise formulas, KLL sketches merge, level counts add.

What is exact and what is estimated (stated in every profile):

- counts, missing, missing codes, min, max, mean and sd (n - 1) are exact;
- quantiles (q1, median, q3, deciles; linear interpolation, Hyndman & Fan type 7) are exact while the
  column holds at most ``EXACT_LIMIT`` (100,000) distinct numeric values, whatever its number of rows
  (they come from the exact value counts, ``studylog.data.numeric_summary``); beyond that they come
  from a KLL sketch (Apache DataSketches, k = 200) and ``quantile_error`` is its normalized rank error
  bound (about 1.33% of the ranks, at 99% confidence); ``quantile_error`` is 0 when exact. The sketch
  (base64 of ``kll_doubles_sketch.serialize()``) is stored whenever the value counts are not, so drift
  can read the later drop's CDF at any edges;
- ``value_counts``: every distinct numeric value with its count, when there are at most 1,000 (else
  null); drift bins such columns exactly;
- ``histogram``: 20 equal-width bins from min to max; counts exact while exact, else from the sketch;
- distinct counts are exact up to ``LEVEL_LIMIT`` (100,000) distinct values, then a k-minimum-values
  estimate (Bar-Yossef et al. 2002; relative standard error about 1/sqrt(k - 2), k = 4096, ~1.6%);
- level counts are exact up to ``LEVEL_LIMIT`` distinct values; past that the 1,000 most frequent levels
  seen so far keep being counted exactly and every other value goes to ``levels_other``
  (``levels_exact`` false);
- outliers (Tukey fences on Tukey's hinges, modified z-score with |M| > 3.5) are computed while exact,
  else null.

Missing: a null cell, a cell that is empty after trimming spaces, or a cell equal (after trimming) to
one of the variable's missing codes; each code is counted on its own. ``invalid`` counts present cells
that do not parse as the variable's type (they are in ``count`` but in none of the numeric statistics).
Values of direct-identifier variables and of free text are never stored: their ``levels`` are empty
and ``levels_withheld`` is true. Profiles are unweighted.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, Any

from studylog.data.distinct import DistinctEstimate, hash_values, merge_sorted
from studylog.data.numeric_summary import NumericSummary
from studylog.data.spec import NUMERIC_TYPES, VariableSpec

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa

LEVEL_LIMIT = 100_000
LEVELS_STORED = 1_000
NUMBER_PATTERN = r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$"
DEFAULT_DATE_FORMAT = "%Y-%m-%d"
DATETIME_FORMATS = ("%Y-%m-%dT%H:%M:%S", "%Y-%m-%d %H:%M:%S", "%Y-%m-%dT%H:%M", "%Y-%m-%d %H:%M")
DATE_TYPES = ("date", "datetime")
WITHHELD_SENSITIVITY = ("direct-identifier",)


class LevelCounts:
    """Counts of each distinct value, mergeable; exact up to LEVEL_LIMIT distinct values."""

    def __init__(self) -> None:
        self.values: pa.Array | None = None
        self.counts: np.ndarray | None = None
        self.pending: list[tuple[pa.Array, np.ndarray]] = []
        self.pending_size = 0
        self.exact = True
        self.other = 0  # counts of values not tracked once inexact
        self.distinct = DistinctEstimate()

    def update(self, values: pa.Array, hashes: Callable[[], np.ndarray] | None = None,
               counted: Callable[[], tuple[pa.Array, np.ndarray]] | None = None) -> None:
        """Count the (non-missing) values of one batch.

        ``hashes()``: the values' ``hash_values``, when the caller already has them (the check's cell
        digests); the distinct estimate is the same either way. ``counted()``: the distinct values in
        order of first appearance and their counts, as ``pc.value_counts`` gives them, when the caller
        can count them more cheaply (from a dictionary encoding).
        """
        import pyarrow.compute as pc

        if len(values) == 0:
            return
        if not self.exact:
            self._count_tracked(values)
            self.distinct.add_hashes(hashes() if hashes is not None else hash_values(pc.unique(values)))
            return
        if counted is not None:
            self._add_pending(*counted())
            return
        found = pc.value_counts(values)
        self._add_pending(found.field("values"), found.field("counts").to_numpy())

    def _add_pending(self, values: pa.Array, counts: np.ndarray) -> None:
        self.pending.append((values, counts))
        self.pending_size += len(values)
        if self.pending_size > LEVEL_LIMIT:
            self._compact()

    def _count_tracked(self, values: pa.Array) -> None:
        import numpy as np
        import pyarrow.compute as pc

        index = pc.index_in(values, value_set=self.values).to_numpy(zero_copy_only=False)
        known = ~np.isnan(index) if index.dtype.kind == "f" else np.ones(len(index), dtype=bool)
        found = index[known].astype(np.int64)
        self.counts = self.counts + np.bincount(found, minlength=len(self.values))
        self.other += int(len(values) - len(found))

    def _compact(self) -> None:
        import numpy as np
        import pyarrow as pa

        parts = self.pending
        if self.values is not None:
            parts = [(self.values, self.counts), *parts]
        self.pending, self.pending_size = [], 0
        if not parts:
            return
        # the sum of the counts of each value, values in order of first appearance (a dictionary
        # encoding: no need for Arrow's query engine, whose import alone costs 25 ms)
        encoded = pa.concat_arrays([p[0].cast(parts[0][0].type) for p in parts]).dictionary_encode()
        weights = np.concatenate([p[1] for p in parts]).astype(np.float64)
        index = encoded.indices.to_numpy(zero_copy_only=False)
        summed = np.bincount(index, weights=weights, minlength=len(encoded.dictionary))
        self.values, self.counts = encoded.dictionary, np.rint(summed).astype(np.int64)
        if len(self.values) > LEVEL_LIMIT:
            self._go_inexact()

    def _go_inexact(self) -> None:
        import numpy as np

        self.exact = False
        self.distinct.add_values(self.values)
        order = np.lexsort((np.arange(len(self.counts)), -self.counts))
        keep, rest = order[:LEVELS_STORED], order[LEVELS_STORED:]
        self.other += int(self.counts[rest].sum())
        self.values, self.counts = self.values.take(keep), self.counts[keep]

    def merge(self, other: LevelCounts) -> None:
        import numpy as np

        other._compact()
        if other.values is None:
            return
        if self.exact and other.exact:
            self._add_pending(other.values, other.counts)
            return
        self._compact()
        if self.exact:
            self._go_inexact()
        # other's tracked values add where we track them; the rest is "other"
        if self.values is not None:
            import pyarrow.compute as pc

            index = pc.index_in(other.values, value_set=self.values).to_numpy(zero_copy_only=False)
            known = ~np.isnan(index) if index.dtype.kind == "f" else np.ones(len(index), dtype=bool)
            np.add.at(self.counts, index[known].astype(np.int64), other.counts[known])
            self.other += int(other.counts[~known].sum())
        self.other += other.other
        self.distinct.merge(other.distinct)
        if other.exact:
            self.distinct.add_values(other.values)

    def result(self) -> tuple[list[dict[str, Any]], int, int, bool]:
        """(levels most frequent first, at most LEVELS_STORED; count of the rest; distinct; exact)."""
        import numpy as np

        self._compact()
        if self.values is None:
            return [], 0, 0, True
        values = self.values.to_pylist()
        order = sorted(range(len(values)), key=lambda i: (-int(self.counts[i]), str(values[i])))
        shown = order[:LEVELS_STORED]
        levels = [{"value": values[i], "count": int(self.counts[i])} for i in shown]
        other = self.other + int(np.sum(self.counts[order[LEVELS_STORED:]])) if len(order) > LEVELS_STORED else self.other
        distinct = len(values) if self.exact else max(self.distinct.estimate(), len(values))
        return levels, int(other), int(distinct), self.exact


def _dictionary_counts(encoded: pa.DictionaryArray, missing: pa.Array) -> tuple[pa.Array, np.ndarray]:
    """The present values of a dictionary-encoded column and their counts, in order of first appearance.

    Whether a cell is missing depends on its text alone, so each distinct value is missing in all its
    cells or in none; the dictionary's order is the order of first appearance.
    """
    import numpy as np
    import pyarrow.compute as pc

    present = ~missing.to_numpy(zero_copy_only=False)
    index = pc.fill_null(encoded.indices, 0).to_numpy(zero_copy_only=False)
    counts = np.bincount(index[present], minlength=len(encoded.dictionary))
    seen = counts > 0
    return encoded.dictionary.filter(seen), counts[seen].astype(np.int64)


def _parse_numbers(text: pa.Array) -> pa.Array:
    """float64 of each text in decimal notation, null elsewhere and where not finite ('1e309')."""
    import pyarrow as pa
    import pyarrow.compute as pc

    valid = pc.fill_null(pc.match_substring_regex(text, NUMBER_PATTERN), False)
    numbers = pc.cast(pc.if_else(valid, text, pa.scalar(None, text.type)), pa.float64())
    return pc.if_else(pc.fill_null(pc.is_finite(numbers), False), numbers, pa.scalar(None, pa.float64()))


def _finite_numbers(present: pa.Array) -> np.ndarray:
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    valid = pc.match_substring_regex(present, NUMBER_PATTERN)
    numbers = pc.cast(pc.filter(present, valid), pa.float64()).to_numpy(zero_copy_only=False)
    # '1e309' matches the pattern but overflows to inf: not a finite number (the check agrees)
    return numbers[np.isfinite(numbers)]


class WithheldCounts:
    """The counts kept for a column whose values are withheld (free text, direct identifiers): how many
    values, and how many distinct ones, from the 64-bit digests of the values alone.

    Exact (up to ``LEVEL_LIMIT`` distinct digests; two values share a digest with probability about
    2^-64 per pair) and then the k-minimum-values estimate of the same digests that ``LevelCounts`` uses,
    so the profile is ``LevelCounts``'s without counting each value's text.
    """

    def __init__(self) -> None:
        import numpy as np

        self.count = 0
        self.seen: np.ndarray | None = np.empty(0, dtype=np.uint64)
        self.distinct = DistinctEstimate()

    def update(self, values: pa.Array, hashes: Callable[[], np.ndarray] | None = None,
               counted: Callable[[], tuple[pa.Array, np.ndarray]] | None = None) -> None:
        if len(values) == 0:
            return
        self.count += len(values)
        self._add(hashes() if hashes is not None else hash_values(values))

    def _add(self, digests: np.ndarray) -> None:
        import numpy as np

        if self.seen is None:
            self.distinct.add_hashes(digests)
            return
        self.seen, _ = merge_sorted(self.seen, np.unique(digests.astype(np.uint64, copy=False)))
        if len(self.seen) > LEVEL_LIMIT:
            self.distinct.add_hashes(self.seen)
            self.seen = None

    def merge(self, other: WithheldCounts) -> None:
        self.count += other.count
        if other.seen is not None:
            self._add(other.seen)
        else:
            if self.seen is not None:
                self.distinct.add_hashes(self.seen)
                self.seen = None
            self.distinct.merge(other.distinct)

    def result(self) -> tuple[list[dict[str, Any]], int, int, bool]:
        """As ``LevelCounts.result``, with no levels: every value is among the others."""
        if self.seen is not None:
            return [], self.count, int(len(self.seen)), True
        return [], self.count, max(self.distinct.estimate(), min(LEVELS_STORED, self.count)), False


class ColumnSummary:
    """The mergeable summary of one column of a drop; ``to_dict()`` is its stored profile."""

    def __init__(self, spec: VariableSpec | None = None, type: str | None = None, *,
                 name: str | None = None) -> None:
        self.spec = spec
        self.type = type or (spec.type if spec else "text")
        self.name = name or (spec.name if spec else "")
        self.codes: list[str] = [c.code.strip() for c in spec.missing_codes] if spec else []
        self.rows = 0
        self.empty = 0
        self.code_counts = [0] * len(self.codes)
        self.present = 0
        self.invalid = 0
        self.withheld = self.type == "text" or bool(spec and spec.sensitivity in WITHHELD_SENSITIVITY)
        self.numeric = NumericSummary() if self.type in NUMERIC_TYPES else None
        self.levels: LevelCounts | WithheldCounts | None = None
        if self.type not in NUMERIC_TYPES + DATE_TYPES:
            self.levels = WithheldCounts() if self.withheld else LevelCounts()
        self.date_min: str | None = None
        self.date_max: str | None = None
        self.dates = LevelCounts() if self.type in DATE_TYPES else None

    def update(self, strings: pa.Array, spec: VariableSpec | None = None, *, parsed: Any = None,
               digests: Callable[[], np.ndarray] | None = None, encoded: Any = None) -> None:
        """Add one batch of a column (strings, null or empty where the cell is empty).

        ``parsed``: the same cells already read as this summary's variable by the check
        (``typed.parse``, ``BatchContext.parsed``); its missing mask and typed values are reused instead
        of reading the cells a second time. ``digests()``: the first lane of the check's digest of each
        cell (``BatchContext.digest``), reused for distinct counts; ``encoded``: the cells
        dictionary-encoded (``BatchContext.encoded``), from which levels are counted. The profile is
        the same with or without them.
        """
        import numpy as np
        import pyarrow as pa
        import pyarrow.compute as pc

        if isinstance(strings, pa.ChunkedArray):
            strings = strings.combine_chunks()
        if not pa.types.is_string(strings.type) and not pa.types.is_large_string(strings.type):
            strings = pc.cast(strings, pa.string())
        if parsed is not None and self.spec is not None and self.type == self.spec.type:
            self._update_parsed(strings, parsed, digests, encoded)
            return
        self.rows += len(strings)
        trimmed = pc.utf8_trim_whitespace(strings)
        empty = pc.fill_null(pc.equal(trimmed, ""), True)
        missing = empty
        self.empty += int(pc.sum(empty).as_py() or 0)
        if self.codes:
            index = pc.index_in(trimmed, value_set=pa.array(self.codes, trimmed.type))
            self._count_codes(index)
            missing = pc.or_(missing, pc.is_valid(index))
        kept = pc.invert(missing)
        present = pc.filter(trimmed, kept)
        self.present += len(present)
        if self.numeric is not None:
            numbers = _finite_numbers(present)
            self.invalid += len(present) - len(numbers)
            self.numeric.update(numbers)
        elif self.dates is not None:
            self._update_dates(present)
        else:
            present_digests = None if digests is None else (
                lambda: digests()[kept.to_numpy(zero_copy_only=False)])
            self.levels.update(pc.filter(strings, kept), present_digests)

    def _count_codes(self, index: pa.Array) -> None:
        import numpy as np

        found = index.drop_null().to_numpy()
        self.code_counts = (np.asarray(self.code_counts) +
                            np.bincount(found, minlength=len(self.codes))).tolist()

    def _update_parsed(self, strings: pa.Array, parsed: Any,
                       digests: Callable[[], np.ndarray] | None = None, encoded: Any = None) -> None:
        """``update`` from the check's reading of the cells (``typed.Parsed``): same counts, no re-parse."""
        import numpy as np
        import pyarrow as pa
        import pyarrow.compute as pc

        n = len(strings)
        self.rows += n
        self.empty += int(pc.sum(parsed.empty).as_py() or 0)
        if self.codes:
            coded = pc.and_(parsed.missing, pc.invert(parsed.empty))
            if pc.any(coded).as_py():
                trimmed = pc.utf8_trim_whitespace(pc.if_else(coded, strings, pa.scalar(None, strings.type)))
                self._count_codes(pc.index_in(trimmed, value_set=pa.array(self.codes, trimmed.type)))
        present = n - int(pc.sum(parsed.missing).as_py() or 0)
        self.present += present
        if self.numeric is not None:
            numbers = parsed.values.drop_null().to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
            if self.type == "integer" and pc.any(parsed.invalid).as_py():
                # the stored profile takes any finite number in an integer column ('1.5'), as the
                # summary of the raw text does; the check's reading calls it invalid. Only the
                # invalid cells are read again, and put back in their places (null is NaN here)
                where = pc.indices_nonzero(parsed.invalid)
                numbers = np.array(parsed.values.to_numpy(zero_copy_only=False), dtype=np.float64)
                more = _parse_numbers(pc.utf8_trim_whitespace(strings.take(where)))
                numbers[where.to_numpy()] = more.to_numpy(zero_copy_only=False)
                numbers = numbers[~np.isnan(numbers)]
            self.invalid += present - len(numbers)
            self.numeric.update(numbers)
        elif self.dates is not None:
            self.invalid += int(pc.sum(parsed.invalid).as_py() or 0)
            self._add_dates(parsed.values.drop_null())
        elif pa.types.is_string(parsed.values.type) or pa.types.is_large_string(parsed.values.type):
            # the raw text of the present cells
            present_digests = None if digests is None else (
                lambda: digests()[~parsed.missing.to_numpy(zero_copy_only=False)])
            self.levels.update(parsed.values.drop_null(), present_digests,
                               None if encoded is None else lambda: _dictionary_counts(encoded, parsed.missing))
        else:
            self.levels.update(pc.filter(strings, pc.invert(parsed.missing)), None,
                               None if encoded is None else lambda: _dictionary_counts(encoded, parsed.missing))

    def _update_dates(self, present: pa.Array) -> None:
        import pyarrow as pa
        import pyarrow.compute as pc

        if len(present) == 0:
            return
        formats = (self.spec.date_format,) if self.spec and self.spec.date_format else (
            (DEFAULT_DATE_FORMAT,) if self.type == "date" else DATETIME_FORMATS)
        parsed = None
        for fmt in formats:
            attempt = pc.strptime(present, format=fmt, unit="s", error_is_null=True)
            # strptime rolls impossible days over (30 February -> 1 March): keep only exact round trips
            exact = pc.equal(pc.strftime(attempt, format=fmt), present)
            attempt = pc.if_else(pc.fill_null(exact, False), attempt, None)
            parsed = attempt if parsed is None else pc.coalesce(parsed, attempt)
        self.invalid += int(parsed.null_count)
        self._add_dates(parsed.drop_null())

    def _add_dates(self, valid: pa.Array) -> None:
        import pyarrow as pa
        import pyarrow.compute as pc

        if len(valid) == 0:
            return
        values = pc.cast(valid, pa.date32()) if self.type == "date" else valid
        self.dates.update(values)
        low, high = pc.min(values).as_py().isoformat(), pc.max(values).as_py().isoformat()
        self.date_min = low if self.date_min is None else min(self.date_min, low)
        self.date_max = high if self.date_max is None else max(self.date_max, high)

    def merge(self, other: ColumnSummary) -> ColumnSummary:
        """Fold another part's summary of the same column into this one (returns self)."""
        self.rows += other.rows
        self.empty += other.empty
        self.code_counts = [a + b for a, b in zip(self.code_counts, other.code_counts)]
        self.present += other.present
        self.invalid += other.invalid
        if self.numeric is not None and other.numeric is not None:
            self.numeric.merge(other.numeric)
        if self.levels is not None and other.levels is not None:
            self.levels.merge(other.levels)
        if self.dates is not None and other.dates is not None:
            self.dates.merge(other.dates)
            for value in (other.date_min, other.date_max):
                if value is not None:
                    self.date_min = value if self.date_min is None else min(self.date_min, value)
                    self.date_max = value if self.date_max is None else max(self.date_max, value)
        return self

    def to_dict(self) -> dict[str, Any]:
        """The stored profile of the column (the format in the brief's "Stored profile")."""
        missing_codes = [{"code": c, "count": int(n)} for c, n in zip(self.codes, self.code_counts)]
        profile: dict[str, Any] = {
            "name": self.name, "type": self.type, "rows": self.rows, "count": self.present,
            "missing": self.empty + sum(self.code_counts), "empty": self.empty,
            "missing_codes": missing_codes, "invalid": self.invalid,
        }
        if self.numeric is not None:
            distinct, exact = self.numeric.distinct_count()
            profile.update(distinct=distinct, distinct_exact=exact)
            profile.update(self.numeric.to_dict())
        elif self.dates is not None:
            _, _, distinct, exact = self.dates.result()
            profile.update(distinct=distinct, distinct_exact=exact, min=self.date_min, max=self.date_max)
        else:
            levels, other, distinct, exact = self.levels.result()
            profile.update(distinct=distinct, distinct_exact=exact, levels_exact=exact)
            if self.withheld:
                profile.update(levels=[], levels_other=sum(level["count"] for level in levels) + other,
                               levels_withheld=True)
            else:
                profile.update(levels=levels, levels_other=other, levels_withheld=False)
        return profile
