"""The k-minimum-values distinct count: within its stated error, and mergeable exactly."""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from studylog.data.distinct import KMV_K, DistinctEstimate, hash_values


def test_estimate_within_its_standard_error_and_exact_below_k() -> None:
    # relative standard error about 1 / sqrt(k - 2) (Bar-Yossef et al. 2002); allow four of them
    true = 250_000
    estimate = DistinctEstimate()
    values = np.arange(true, dtype=np.float64)
    for part in np.array_split(values, 7):
        estimate.add_hashes(hash_values(np.concatenate([part, part[:100]])))  # repeats count once
    assert abs(estimate.estimate() - true) / true < 4 / np.sqrt(KMV_K - 2)
    small = DistinctEstimate()
    small.add_values(pa.array(["a", "b", "a", "c"]))
    assert small.estimate() == 3


def test_merged_parts_keep_the_k_smallest_of_the_union() -> None:
    rng = np.random.default_rng(4)
    hashes = rng.integers(0, 2**63, size=50_000, dtype=np.int64).astype(np.uint64)
    whole, left, right = DistinctEstimate(), DistinctEstimate(), DistinctEstimate()
    whole.add_hashes(hashes)
    left.add_hashes(hashes[:20_000])
    right.add_hashes(hashes[15_000:])
    left.merge(right)
    # the reference: numpy's own k smallest distinct values of all the hashes
    assert np.array_equal(left.smallest, np.unique(hashes)[:KMV_K])
    assert np.array_equal(whole.smallest, left.smallest)


def test_merge_sorted_equals_numpys_union_and_summed_counts() -> None:
    # the reference: np.unique over both with their counts added by np.bincount
    from studylog.data.distinct import merge_sorted

    rng = np.random.default_rng(8)
    for _ in range(50):
        a = np.unique(rng.integers(0, 60, rng.integers(0, 30)).astype(np.float64))
        b = np.unique(rng.integers(0, 60, rng.integers(1, 30)).astype(np.float64))
        ca, cb = rng.integers(1, 9, len(a)), rng.integers(1, 9, len(b))
        values, counts = merge_sorted(a, b, ca, cb)
        union, index = np.unique(np.concatenate([a, b]), return_inverse=True)
        assert np.array_equal(values, union)
        assert np.array_equal(counts, np.bincount(index, weights=np.concatenate([ca, cb]), minlength=len(union)))
        assert np.array_equal(merge_sorted(a, b)[0], union) and merge_sorted(a, b)[1] is None
