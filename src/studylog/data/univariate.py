"""One variable at a time: the numeric summary, levels, dates, texts, normality (reading the cells as
values, and finding the missing ones, is :mod:`studylog.data.cells`'s).

The definitions are part of the product (DESIGN.md, "Statistical definitions") and stated in
``studylog profile --help``:

- quantiles by linear interpolation, Hyndman & Fan (1996) type 7 (numpy's default), at rank
  1 + (n - 1) p; the NIST e-Handbook's p(N + 1) definition (type 6) is available as ``quantile_type6``;
- standard deviation with n - 1; skewness as the adjusted Fisher-Pearson coefficient G1; kurtosis as the
  adjusted excess kurtosis G2 (0 for a normal distribution);
- Tukey's fences on Tukey's hinges (the medians of the lower and upper halves, the median included in both
  halves when n is odd, as box plots draw them): inner fences 1.5 x the hinge spread beyond the hinges,
  outer fences 3 x; ``tukey`` counts values beyond the inner fences, ``tukey_far`` beyond the outer;
- modified z-score M = 0.6745 (x - median) / MAD, flagged when |M| > 3.5 (Iglewicz & Hoaglin 1993); when
  MAD = 0 (half the values or more equal the median) M is undefined and the count is null, with a note;
- near-zero variance: frequency ratio (most common / second most common value) > 95/5 and distinct values
  fewer than 10% of the present values (Kuhn & Johnson 2013, section 3.5);
- normality: Shapiro-Wilk for 3 <= n <= 5000, D'Agostino-Pearson K^2 above.

Everything here is vectorised (pyarrow.compute, numpy): no Python loop over rows.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from studylog.data.cells import Encoded, as_bool, to_numpy
from studylog.data.ordered import CountedValues, OrderedValues, SortedValues

SHAPIRO_MAX_N = 5000
MODIFIED_Z_CONSTANT = 0.6745
MODIFIED_Z_LIMIT = 3.5
TUKEY_INNER = 1.5
TUKEY_OUTER = 3.0
NZV_FREQUENCY_RATIO = 95 / 5
NZV_DISTINCT_SHARE = 0.10
MANY_LEVELS = 50
HISTOGRAM_MAX_BINS = 50
LEVELS_KEPT = 1000
LARGE_N_CAUTION = (
    "at large n a normality test finds trivial departures significant; judge by skewness, kurtosis "
    "and a plot"
)
MAD_ZERO_NOTE = "MAD is 0 (half the values or more equal the median): the modified z-score is undefined"


# --------------------------------------------------------------------------------------------------
# quantiles and summaries on sorted values


def _ordered(values: np.ndarray | OrderedValues) -> OrderedValues:
    return values if isinstance(values, (SortedValues, CountedValues)) else SortedValues(values)


def quantile_type7(sorted_values: np.ndarray | OrderedValues, p: float | np.ndarray) -> float | np.ndarray:
    """Hyndman & Fan type 7: linear interpolation at 0-based position (n - 1) p (numpy's default)."""
    ordered = _ordered(sorted_values)
    n = ordered.n
    h = (n - 1) * np.asarray(p, dtype=float)
    lo = np.floor(h).astype(np.int64)
    hi = np.minimum(lo + 1, n - 1)
    low, high = ordered.at(lo), ordered.at(hi)
    result = low + (h - lo) * (high - low)
    return float(result) if np.ndim(result) == 0 else result


def quantile_type6(sorted_values: np.ndarray, p: float) -> float:
    """NIST/SEMATECH e-Handbook 7.2.5.2: rank p (N + 1) = k + d; Y[k] + d (Y[k+1] - Y[k]), clamped."""
    n = sorted_values.size
    rank = p * (n + 1)
    k = math.floor(rank)
    d = rank - k
    if k < 1:
        return float(sorted_values[0])
    if k >= n:
        return float(sorted_values[-1])
    return float(sorted_values[k - 1] + d * (sorted_values[k] - sorted_values[k - 1]))


def tukey_hinges(sorted_values: np.ndarray | OrderedValues) -> tuple[float, float]:
    """Tukey's (1977) hinges: depth of the median (n + 1) / 2, hinge depth (floor(that) + 1) / 2."""
    ordered = _ordered(sorted_values)
    n = ordered.n
    depth = (math.floor((n + 1) / 2) + 1) / 2
    a, b = math.floor(depth) - 1, math.ceil(depth) - 1
    low_a, low_b, high_a, high_b = ordered.at(np.array([a, b, n - 1 - a, n - 1 - b]))
    return float((low_a + low_b) / 2), float((high_a + high_b) / 2)


def tukey_fences(sorted_values: np.ndarray | OrderedValues) -> dict[str, Any]:
    """Hinges, inner and outer fences, and the counts beyond them (strictly outside)."""
    ordered = _ordered(sorted_values)
    lower, upper = tukey_hinges(ordered)
    spread = upper - lower
    inner = (lower - TUKEY_INNER * spread, upper + TUKEY_INNER * spread)
    outer = (lower - TUKEY_OUTER * spread, upper + TUKEY_OUTER * spread)
    n = ordered.n

    def beyond(low: float, high: float) -> int:
        return int(ordered.below(low, "left")) + n - int(ordered.below(high, "right"))

    return {
        "hinges": [lower, upper],
        "inner_fences": list(inner),
        "outer_fences": list(outer),
        "tukey": beyond(*inner),
        "tukey_far": beyond(*outer),
    }


def modified_z(values: np.ndarray, median: float) -> tuple[float, int | None]:
    """MAD and the number of values with |0.6745 (x - median) / MAD| > 3.5; None when MAD = 0."""
    deviations = np.abs(values - median)
    mad = float(np.median(deviations))
    if mad == 0.0:
        return mad, None
    # |0.6745 d / MAD| > 3.5  <=>  d > 3.5 MAD / 0.6745: no division by the data
    limit = MODIFIED_Z_LIMIT * mad / MODIFIED_Z_CONSTANT
    return mad, int(np.count_nonzero(deviations > limit))


def modified_z_sorted(sorted_values: np.ndarray | OrderedValues, median: float) -> tuple[float, int | None]:
    """``modified_z`` of values in ascending order (or counted), without selecting among all the
    deviations (see ``SortedValues.absolute_deviations``)."""
    return _ordered(sorted_values).absolute_deviations(median, MODIFIED_Z_LIMIT, MODIFIED_Z_CONSTANT)


def moments(values: np.ndarray | OrderedValues) -> dict[str, float | None]:
    """Mean, sample sd (n - 1), skewness G1 and excess kurtosis G2 (both adjusted, as scipy bias=False)."""
    ordered = _ordered(values)
    n = ordered.n
    out: dict[str, float | None] = {"mean": None, "sd": None, "skewness": None, "kurtosis": None}
    if n == 0:
        return out
    mean, m2, m3, m4 = ordered.central_sums()
    out["mean"] = mean
    if n < 2:
        return out
    out["sd"] = math.sqrt(m2 * n / (n - 1))
    if m2 == 0.0:
        return out
    if n >= 3:
        g1 = m3 / m2**1.5
        out["skewness"] = g1 * math.sqrt(n * (n - 1)) / (n - 2)
    if n >= 4:
        g2 = m4 / (m2 * m2) - 3.0
        out["kurtosis"] = ((n + 1) * g2 + 6.0) * (n - 1) / ((n - 2) * (n - 3))
    return out


def histogram(sorted_values: np.ndarray | OrderedValues, integer: bool, iqr: float) -> dict[str, list[float]]:
    """Equal-width bins: one per value for integers spanning <= 50 values, else max(Sturges, Freedman-
    Diaconis) bins capped at 50; a value on an inner edge falls in the bin to its right."""
    ordered = _ordered(sorted_values)
    n = ordered.n
    low, high = (float(v) for v in ordered.at(np.array([0, n - 1])))
    if low == high:
        return {"edges": [low, high], "counts": [n]}
    if integer and high - low < HISTOGRAM_MAX_BINS:
        edges = np.arange(low - 0.5, high + 1.0, 1.0)
    else:
        bins = math.ceil(math.log2(n)) + 1
        if iqr > 0:
            width = 2.0 * iqr * n ** (-1 / 3)
            bins = max(bins, math.ceil((high - low) / width))
        edges = np.linspace(low, high, min(bins, HISTOGRAM_MAX_BINS) + 1)
    cuts = ordered.below(edges[1:-1], "left")
    bounds = np.concatenate(([0], cuts, [n]))
    return {"edges": edges.tolist(), "counts": np.diff(bounds).tolist()}


def run_lengths(sorted_values: np.ndarray) -> np.ndarray:
    """How often each distinct value occurs, from sorted values."""
    return SortedValues(sorted_values).run_lengths()


def near_zero_variance(counts: np.ndarray, present: int) -> dict[str, Any]:
    """Kuhn & Johnson (2013, 3.5): frequency ratio > 95/5 and < 10% distinct; binary minority shown."""
    distinct = int(counts.size)
    out: dict[str, Any] = {"near_zero_variance": False, "frequency_ratio": None}
    if present == 0 or distinct == 0:
        return out
    if distinct == 1:
        # one value only: zero variance, the ratio is unbounded
        out["near_zero_variance"] = True
        return out
    first = int(np.argmax(counts))
    top = int(counts[first])
    second = max(int(counts[:first].max()) if first else 0,
                 int(counts[first + 1:].max()) if first + 1 < distinct else 0)
    top_two = (second, top)
    ratio = float(top) / float(second)
    out["frequency_ratio"] = ratio
    out["near_zero_variance"] = bool(ratio > NZV_FREQUENCY_RATIO and distinct / present < NZV_DISTINCT_SHARE)
    if distinct == 2:
        minority = int(top_two[0])
        out["minority_count"] = minority
        out["minority_share"] = minority / present
    return out


def normality(values: np.ndarray | OrderedValues, skewness: float | None,
              kurtosis: float | None) -> dict[str, Any] | None:
    """Shapiro-Wilk for 3 <= n <= 5000, D'Agostino-Pearson above; None below 3 or for constant data."""
    from studylog.data.significance import dagostino_pearson_from_moments

    ordered = _ordered(values)
    n = ordered.n
    if n < 3 or skewness is None:
        return None
    if n <= SHAPIRO_MAX_N:
        from scipy import stats

        statistic, p_value = stats.shapiro(ordered.materialized())
        test = "shapiro-wilk"
    else:
        # the biased moments back from G1 and G2 (exact algebra, no second pass over the values)
        g1 = skewness * (n - 2) / math.sqrt(n * (n - 1))
        g2 = ((kurtosis or 0.0) * (n - 2) * (n - 3) / (n - 1) - 6.0) / (n + 1)
        statistic, p_value = dagostino_pearson_from_moments(n, g1, g2 + 3.0)
        test = "dagostino-pearson"
    result: dict[str, Any] = {
        "test": test, "statistic": float(statistic), "p_value": float(p_value), "n": int(n),
        "skewness": skewness, "kurtosis": kurtosis,
    }
    if n > SHAPIRO_MAX_N:
        result["caution"] = LARGE_N_CAUTION
    return result


# --------------------------------------------------------------------------------------------------
# summaries


def numeric_summary(sorted_values: np.ndarray | OrderedValues, integer: bool,
                    counts: np.ndarray | None = None) -> dict[str, Any]:
    """Five-number summary, moments, fences, modified z-score, histogram, near-zero variance, normality,
    of values in ascending order or counted (``data.ordered``). ``counts``: ``run_lengths`` of sorted
    values when the caller has them."""
    ordered = _ordered(sorted_values)
    n = ordered.n
    out: dict[str, Any] = {
        "distinct": 0, "min": None, "q1": None, "median": None, "q3": None, "max": None,
        "mean": None, "sd": None, "skewness": None, "kurtosis": None, "deciles": None, "mad": None,
        "outliers": {"tukey": None, "tukey_far": None, "modified_z": None},
        "fences": None, "histogram": None, "normality": None,
        "near_zero_variance": False, "frequency_ratio": None,
    }
    if n == 0:
        return out
    q1, median, q3 = quantile_type7(ordered, np.array([0.25, 0.5, 0.75])).tolist()
    counts = ordered.run_lengths() if counts is None else counts
    low, high = (float(v) for v in ordered.at(np.array([0, n - 1])))
    out.update(
        distinct=int(counts.size), min=low, q1=q1, median=median, q3=q3, max=high,
        deciles=quantile_type7(ordered, np.arange(1, 10) / 10).tolist(),
    )
    out.update(moments(ordered))
    fences = tukey_fences(ordered)
    mad, modified = modified_z_sorted(ordered, median)
    out["mad"] = mad
    out["outliers"] = {"tukey": fences.pop("tukey"), "tukey_far": fences.pop("tukey_far"), "modified_z": modified}
    if modified is None:
        out["outliers"]["modified_z_note"] = MAD_ZERO_NOTE
    out["fences"] = fences
    out["histogram"] = histogram(ordered, integer, q3 - q1)
    out.update(near_zero_variance(counts, n))
    out["normality"] = normality(ordered, out["skewness"], out["kurtosis"])
    out["negative"] = int(ordered.below(0.0, "left"))
    return out


def level_counts(strings: pa.ChunkedArray, missing: np.ndarray) -> tuple[list[str], np.ndarray, np.ndarray]:
    """Distinct present texts, their counts, and each row's level index (-1 where missing)."""
    encoded = pc.dictionary_encode(strings).combine_chunks()
    levels = encoded.dictionary.to_pylist()
    indices = encoded.indices
    codes = to_numpy(indices, -1).astype(np.int64)
    codes[missing] = -1
    counts = np.bincount(codes[codes >= 0], minlength=len(levels))
    return levels, counts, codes


def level_counts_encoded(encoded: Encoded, counts: np.ndarray) -> tuple[list[str], np.ndarray]:
    """``level_counts`` of an encoded column, given the counts ``find_missing_encoded`` gives."""
    return encoded.dictionary.to_pylist(), counts


def variants(levels: Sequence[str], counts: np.ndarray) -> list[list[str]]:
    """Groups of present values that differ only by letter case or surrounding whitespace (most
    frequent value first in each group; the groups with the most rows first)."""
    present = np.flatnonzero(counts > 0)
    if present.size < 2:
        return []
    values = pa.array([levels[i] for i in present.tolist()], pa.string())
    keys = pc.dictionary_encode(pc.utf8_lower(pc.utf8_trim_whitespace(values))).indices
    key = to_numpy(keys, -1).astype(np.int64)
    sizes = np.bincount(key)
    grouped = np.flatnonzero(sizes[key] > 1)
    if grouped.size == 0:
        return []
    member_counts = counts[present[grouped]]
    group_rows = np.bincount(key[grouped], weights=member_counts)
    # by group (most rows first), then by count (descending) within the group
    order = np.lexsort((-member_counts, -group_rows[key[grouped]], key[grouped]))
    order = order[np.argsort(-group_rows[key[grouped]][order], kind="stable")]
    out: list[list[str]] = []
    current = None
    for position in order.tolist():
        group = int(key[grouped][position])
        if group != current:
            out.append([])
            current = group
        out[-1].append(levels[int(present[grouped[position]])])
    return out


def level_summary(levels: list[str], counts: np.ndarray, masked: bool, kind: str) -> dict[str, Any]:
    """Frequency table (most frequent first, at most 1000), variants, many levels, near-zero variance."""
    present_levels = np.flatnonzero(counts > 0)
    order = present_levels[np.lexsort((np.asarray(levels, dtype=object)[present_levels].astype(str),
                                       -counts[present_levels]))]
    kept = order[:LEVELS_KEPT]
    shown = [{"value": "[masked]" if masked else levels[i], "count": int(counts[i])} for i in kept.tolist()]
    present = int(counts.sum())
    out: dict[str, Any] = {
        "distinct": int(present_levels.size),
        "levels": shown,
        "levels_other": int(counts[order[LEVELS_KEPT:]].sum()) if order.size > LEVELS_KEPT else 0,
        "variants": [] if masked or kind == "text" else variants(levels, counts),
        "many_levels": bool(present_levels.size > MANY_LEVELS),
    }
    out.update(near_zero_variance(counts[present_levels], present))
    return out


GRANULARITY_SECONDS = {"second": 1, "minute": 60, "hour": 3600, "day": 86400}


def date_summary(seconds_sorted: np.ndarray, kind: str) -> dict[str, Any]:
    """Range (ISO text), granularity, and gaps: periods of that granularity with no value."""
    out: dict[str, Any] = {"min": None, "max": None, "distinct": 0, "granularity": None, "gaps": None}
    if seconds_sorted.size == 0:
        return out
    stamps = seconds_sorted.astype(np.int64)
    unique = stamps[np.concatenate(([True], stamps[1:] != stamps[:-1]))]  # sorted already
    as_dt = unique.astype("datetime64[s]")
    unit = "D" if kind == "date" else "s"
    out["min"] = str(as_dt[0].astype(f"datetime64[{unit}]"))
    out["max"] = str(as_dt[-1].astype(f"datetime64[{unit}]"))
    out["distinct"] = int(unique.size)
    if np.all(unique % 86400 == 0):
        days = as_dt.astype("datetime64[D]")
        months = days.astype("datetime64[M]")
        if np.all(days == months.astype("datetime64[D]")):
            years = months.astype("datetime64[Y]")
            if np.all(months == years.astype("datetime64[M]")):
                granularity, periods = "year", years.astype(np.int64)
            else:
                granularity, periods = "month", months.astype(np.int64)
        else:
            day_numbers = days.astype(np.int64)
            # 1970-01-01 was a Thursday; (day + 3) % 7 is 0 on Mondays
            weekday = (day_numbers + 3) % 7
            if unique.size > 1 and np.all(weekday == weekday[0]):
                granularity, periods = "week", (day_numbers - weekday[0]) // 7
            else:
                granularity, periods = "day", day_numbers
    else:
        granularity = "second"
        for name in ("hour", "minute"):
            if np.all(unique % GRANULARITY_SECONDS[name] == 0):
                granularity = name
                break
        periods = unique // GRANULARITY_SECONDS[granularity]
    out["granularity"] = granularity
    span = int(periods[-1] - periods[0]) + 1
    steps = np.diff(periods)
    gaps: dict[str, Any] = {"periods": span, "periods_without_data": span - int(periods.size),
                            "largest": None}
    if steps.size and steps.max() > 1:
        at = int(np.argmax(steps))
        gaps["largest"] = {
            "after": str(as_dt[at].astype(f"datetime64[{unit}]")),
            "before": str(as_dt[at + 1].astype(f"datetime64[{unit}]")),
            "periods_without_data": int(steps[at] - 1),
        }
    out["gaps"] = gaps
    return out


PACKED_BYTES = 15  # texts this short are told apart by sorting numbers made of their bytes
_LOW_BYTES = np.array([(1 << (8 * k)) - 1 for k in range(9)], dtype=np.uint64)


def distinct_texts(strings: pa.ChunkedArray | pa.Array) -> int:
    """How many distinct texts there are (nulls not counted).

    numpy sorts a million 64-bit numbers many times faster than a hash table takes a million texts.
    A text of at most 15 bytes is three numbers: its first eight bytes, the rest, and its length.
    Only the bits that differ between some of the texts tell them apart; when those are 64 bits or
    fewer (codes and numbers written as text: digits differ in four bits of a byte) they make one
    number per text, equal for equal texts and different for different ones. Other texts go to
    Arrow's hash table."""
    # one chunk: the work is then a few calls on whole columns
    try:
        whole = strings.combine_chunks() if isinstance(strings, pa.ChunkedArray) else strings
    except pa.ArrowException:  # more text than one chunk's 32-bit offsets reach
        return _hashed_distinct(strings)
    if not len(whole):
        return 0
    words = _text_words(whole)
    if words is None:
        return _hashed_distinct(strings)
    heads, tails, lengths = words
    if lengths.size and int(lengths.max()) <= 7:
        keys = heads | (lengths << np.uint64(56))  # the bytes and the length fit as they are
    else:
        keys = _packed_keys([heads, tails, lengths])
    if keys is None:
        return _hashed_distinct(strings)
    ordered = np.sort(keys)
    return int(np.count_nonzero(ordered[1:] != ordered[:-1])) + (1 if ordered.size else 0)


def _hashed_distinct(strings: pa.ChunkedArray | pa.Array) -> int:
    unique = pc.unique(strings)
    return len(unique) - (1 if unique.null_count else 0)


def _text_words(chunk: pa.Array) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Bytes 0-7 and 8-15 of each non-null text of a chunk as little-endian numbers (zero beyond the
    text) and the texts' lengths, or None when a text is longer than PACKED_BYTES (or the chunk is
    not of texts)."""
    if not (pa.types.is_string(chunk.type) or pa.types.is_binary(chunk.type)):
        return None
    _validity, offsets_buffer, data_buffer = chunk.buffers()
    offsets = np.frombuffer(offsets_buffer, dtype=np.int32)[chunk.offset:chunk.offset + len(chunk) + 1]
    starts = offsets[:-1]
    lengths = offsets[1:] - starts
    if chunk.null_count:
        kept = as_bool(pc.is_valid(chunk))
        starts, lengths = starts[kept], lengths[kept]
    longest = int(lengths.max()) if lengths.size else 0
    if longest > PACKED_BYTES:
        return None
    data = np.frombuffer(data_buffer, dtype=np.uint8) if data_buffer is not None else np.zeros(0, np.uint8)
    padded = np.zeros(data.size + 16, dtype=np.uint8)
    padded[:data.size] = data
    # eight bytes from any start: a view of the bytes as 64-bit numbers one byte apart
    words = np.ndarray(shape=(data.size + 9,), dtype="<u8", buffer=padded, strides=(1,))
    starts = starts.astype(np.intp)
    heads = words[starts]
    heads &= _LOW_BYTES[lengths if longest <= 8 else np.minimum(lengths, 8)]
    if longest <= 8:
        tails = np.zeros(lengths.size, dtype=np.uint64)
    else:
        tails = words[starts + 8]
        tails &= _LOW_BYTES[np.clip(lengths - 8, 0, 8)]
    return heads, tails, lengths.astype(np.uint64)


def _packed_keys(words: list[np.ndarray]) -> np.ndarray | None:
    """One number per row made of the bits that vary in ``words`` (unsigned 64-bit), or None when
    they are more than 64."""
    spans = []
    for index, word in enumerate(words):
        varying = int(np.bitwise_and.reduce(word) ^ np.bitwise_or.reduce(word)) if word.size else 0
        bit = 0
        while varying >> bit:
            if not (varying >> bit) & 1:
                bit += 1
                continue
            width = 0
            while (varying >> (bit + width)) & 1:
                width += 1
            spans.append((index, bit, width))
            bit += width
    if sum(width for _index, _bit, width in spans) > 64:
        return None
    keys = np.zeros(words[0].size, dtype=np.uint64)
    position = 0
    for index, bit, width in spans:
        part = words[index] >> np.uint64(bit)
        part &= np.uint64((1 << width) - 1)
        if position:
            part <<= np.uint64(position)
        keys |= part
        position += width
    return keys


def text_summary(strings: pa.ChunkedArray, missing: np.ndarray) -> dict[str, Any]:
    """Distinct values and lengths, without listing any text (no copy of the column is made)."""
    present = len(strings) - int(np.count_nonzero(missing))
    if present == 0:
        return {"distinct": 0, "length": {"min": None, "max": None, "mean": None}, "repeated": 0}
    # distinct non-null texts, less the distinct texts that are missing (codes, blanks)
    distinct = distinct_texts(strings)
    missing_present = missing & as_bool(pc.is_valid(strings))
    lengths = pc.utf8_length(strings)
    if missing_present.any():
        distinct -= distinct_texts(strings.take(pa.array(np.flatnonzero(missing_present))))
        kept = to_numpy(pc.cast(lengths, pa.int64()), 0)[~missing]
        low, high, total = int(kept.min()), int(kept.max()), int(kept.sum())
    else:
        # only the nulls are missing, and Arrow's aggregates skip them
        extremes = pc.min_max(lengths)
        low, high = extremes["min"].as_py(), extremes["max"].as_py()
        total = pc.sum(pc.cast(lengths, pa.int64())).as_py()
    return {
        "distinct": distinct,
        "length": {"min": low, "max": high, "mean": total / present},
        "repeated": present - distinct,
    }
