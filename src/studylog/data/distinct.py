"""Distinct counts of columns too large to count exactly: k minimum values of a 64-bit hash.

The k-minimum-values estimate (Bar-Yossef et al. 2002) keeps the k smallest distinct hashes seen;
with the k-th smallest at h (as a fraction of 2^64) the estimate is (k - 1) / h, with a relative
standard error of about 1 / sqrt(k - 2) (1.6% for k = 4096). Summaries of parts merge exactly (the k
smallest of a union). Used by the stored profiles (``summary``, ``numeric_summary``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa

KMV_K = 4096


class DistinctEstimate:
    """k minimum values of a 64-bit hash: a mergeable distinct-count estimate (Bar-Yossef et al. 2002)."""

    def __init__(self) -> None:
        import numpy as np

        self.smallest = np.empty(0, dtype=np.uint64)

    def add_hashes(self, hashes: np.ndarray) -> None:
        import numpy as np

        hashes = hashes.astype(np.uint64, copy=False)
        if len(self.smallest) == KMV_K:
            # only hashes below the k-th smallest so far can change the estimate
            hashes = hashes[hashes < self.smallest[-1]]
        candidates = np.concatenate([self.smallest, hashes])
        # the k smallest distinct values are among the m smallest values (with repeats) once those
        # hold k distinct ones: a partition, then a sort of only those
        m = KMV_K
        while True:
            if m >= len(candidates):
                merged = np.unique(candidates)
                break
            threshold = np.partition(candidates, m - 1)[m - 1]
            merged = np.unique(candidates[candidates <= threshold])
            if len(merged) >= KMV_K:
                break
            m *= 2
        self.smallest = merged[:KMV_K]

    def add_values(self, values: pa.Array | np.ndarray) -> None:
        self.add_hashes(hash_values(values))

    def merge(self, other: DistinctEstimate) -> None:
        self.add_hashes(other.smallest)

    def estimate(self) -> int:
        if len(self.smallest) < KMV_K:
            return int(len(self.smallest))
        kth = float(self.smallest[KMV_K - 1]) / 2.0**64
        return int(round((KMV_K - 1) / kth))


def hash_values(values: pa.Array | np.ndarray) -> np.ndarray:
    """A 64-bit hash per value, vectorised without pandas.

    Text: the first lane of ``repeats.text_digests`` (the check's own cell digest); numbers: the bits of
    the float64 (``-0.0`` folded onto ``0.0``) through the SplitMix64 finaliser. Only the k smallest
    hashes matter (k-minimum-values), so any well-mixed 64-bit hash does.
    """
    import numpy as np
    import pyarrow as pa

    from studylog.data.repeats import _finalise, text_digests

    if isinstance(values, pa.ChunkedArray):
        values = values.combine_chunks()
    if isinstance(values, pa.Array):
        if pa.types.is_string(values.type) or pa.types.is_large_string(values.type):
            return text_digests(values)[0]
        values = values.to_numpy(zero_copy_only=False)
    numbers = np.asarray(values)
    if numbers.dtype.kind in "iub":
        numbers = numbers.astype(np.float64)
    if numbers.dtype.kind == "M":
        numbers = numbers.astype(np.int64).astype(np.float64)
    if numbers.dtype.kind == "f":
        bits = (numbers.astype(np.float64) + 0.0).view(np.uint64)
        with np.errstate(over="ignore"):
            return _finalise(bits ^ np.uint64(0x9E3779B97F4A7C15))
    import pyarrow as pa  # other objects: through their text

    return text_digests(pa.array([str(v) for v in numbers], pa.string()))[0]


def merge_sorted(values: np.ndarray, new: np.ndarray, counts: np.ndarray | None = None,
                 new_counts: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray | None]:
    """The sorted distinct ``values`` with the sorted distinct ``new`` ones added, and with ``counts``
    (when given) grown by ``new_counts``: a search and an insertion, no sort of the whole."""
    import numpy as np

    position = np.searchsorted(values, new)
    found = position < len(values)
    found[found] = values[position[found]] == new[found]
    if counts is not None and new_counts is not None:
        counts = counts.copy()
        counts[position[found]] += new_counts[found]
    fresh = ~found
    if fresh.any():
        values = np.insert(values, position[fresh], new[fresh])
        if counts is not None and new_counts is not None:
            counts = np.insert(counts, position[fresh], new_counts[fresh])
    return values, counts
