"""The set of seen digests gives the same answers whether its runs are held whole or split in halves."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data import repeats
from studylog.data.repeats import SeenDigests


def _reference(values: list[int]) -> list[bool]:
    earlier: set[int] = set()
    found = []
    for value in values:
        found.append(value in earlier)
        earlier.add(value)
    return found


# values sharing their high 32 bits (and a few sharing their low ones), so that a high half found is
# often not the whole value
HIGH = st.sampled_from([0, 1, 0xFFFFFFFF, 0x9E3779B9])
LOW = st.sampled_from([0, 1, 2, 0xFFFFFFFF, 0x7F4A7C15])
VALUES = st.lists(st.tuples(HIGH, LOW).map(lambda p: (p[0] << 32) | p[1]), min_size=1, max_size=200)


@settings(max_examples=80, deadline=None)
@given(values=VALUES, batch_rows=st.integers(1, 40), split=st.integers(1, 20), block=st.integers(1, 9),
       on_disk=st.booleans())
def test_split_runs_find_exactly_the_repeats(values: list[int], batch_rows: int, split: int,
                                             block: int, on_disk: bool) -> None:
    seen = SeenDigests(on_disk=on_disk)
    found: list[bool] = []
    digests = np.array(values, dtype=np.uint64)
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(repeats, "SPLIT_ROWS", split)
        patch.setattr(repeats, "MERGE_BLOCK", block)
        patch.setattr(repeats, "READ_BLOCK", block + 1)
        for start in range(0, len(values), batch_rows):
            found.extend(seen.observe(digests[start:start + batch_rows]).tolist())
    assert found == _reference(values)
    assert len(seen) == len(set(values))
    seen.close()


def test_large_runs_keep_four_bytes_a_digest_in_memory() -> None:
    rng = np.random.default_rng(7)
    values = rng.integers(0, 2**63, 1_200_000, dtype=np.uint64)
    seen = SeenDigests()
    for start in range(0, len(values), 65_536):
        assert not seen.observe(values[start:start + 65_536]).any()
    assert seen.observe(values[::1000]).all()
    assert len(seen) == len(values)
    assert seen.nbytes < 5 * len(values)
    seen.close()


@settings(max_examples=60, deadline=None)
@given(values=VALUES, batch_rows=st.integers(1, 40), split=st.integers(1, 20), on_disk=st.booleans())
def test_rows_not_looked_up_are_still_remembered_and_compared_within_their_batch(
        values: list[int], batch_rows: int, split: int, on_disk: bool) -> None:
    # looked up: the repeats (as the caller knows them) and every third row; a row not looked up is
    # then never a repeat of an earlier batch, but a later row may repeat it
    expected = _reference(values)
    digests = np.array(values, dtype=np.uint64)
    asked = np.array(expected) | (np.arange(len(values)) % 3 == 0)
    seen = SeenDigests(on_disk=on_disk)
    found: list[bool] = []
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(repeats, "SPLIT_ROWS", split)
        patch.setattr(repeats, "READ_BLOCK", split % 5 + 1)
        for start in range(0, len(values), batch_rows):
            part = slice(start, start + batch_rows)
            found.extend(seen.observe(digests[part], looked_up=asked[part]).tolist())
    assert found == expected
    seen.close()
