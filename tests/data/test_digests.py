"""Record digests: planted new, vanished and changed records (composite key), store round trip,
the digest against its definition, and foreign-key lookups."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import pyarrow as pa
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data import digests, record_comparison
from studylog.data.digests import RecordDigester, Records, digest_values
from studylog.data.record_comparison import OrphanCheck, compare_records
from studylog.data.repeats import combine, text_digests


def records(table: pa.Table, key: list[str], batch: int = 4) -> Records:
    digester = RecordDigester(key, table.column_names)
    for part in table.to_batches(max_chunksize=batch):
        digester.update(part)
    return digester.finish()


def seeded_drop(n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "site": np.where(np.arange(n) % 2 == 0, "north", "south"),
        "member": [f"M{i // 2:05d}" for i in range(n)],
        "age": rng.integers(18, 90, n).astype(str),
        "plan": rng.choice(["basic", "plus"], n),
    })


def test_digests_are_the_checks_cell_digests_combined() -> None:
    # definition (module docstring): a key digest is repeats.combine of the key cells' text_digests,
    # and a single-column key's digest is that cell's digest (what foreign-key lookups rely on)
    first, second = pa.array(["a", "b"]), pa.array(["x", "y"])
    hi, lo = combine([text_digests(first), text_digests(second)])
    assert digest_values([first, second]).tolist() == np.column_stack([hi, lo]).tolist()
    hi, lo = text_digests(first)
    assert digest_values([first]).tolist() == np.column_stack([hi, lo]).tolist()
    # a key with an empty cell gets the zero digest and takes no part in comparisons
    assert digest_values([first, pa.array(["x", None])])[1].tolist() == [0, 0]
    # the row digest ignores column order
    frame = pa.table({"a": ["1", "2"], "b": ["3", "4"]})
    swapped = frame.select(["b", "a"])
    assert np.array_equal(records(frame, ["a"]).digests, records(swapped, ["a"]).digests)


def test_planted_new_vanished_changed_with_composite_key() -> None:
    earlier = seeded_drop(200, 1)
    later = earlier.copy()
    later.loc[[10, 11, 50], "age"] = ["999", "998", "997"]  # three changed records
    later.loc[70, "plan"] = "gold"  # a fourth, in another column
    vanished = later.index[[5, 120]]
    later = later.drop(index=vanished)
    new = pd.DataFrame({"site": ["east", "west"], "member": ["M90000", "M00001"],
                        "age": ["40", "41"], "plan": ["basic", "plus"]})
    later = pd.concat([later, new], ignore_index=True)
    later = later[["plan", "age", "member", "site"]]  # column order does not matter
    key = ["site", "member"]
    before = records(pa.Table.from_pandas(earlier, preserve_index=False), key, batch=33)
    after = records(pa.Table.from_pandas(later, preserve_index=False), key, batch=17)
    result = compare_records(Records.from_chunks(before.to_chunks()), after)
    assert (result.new, result.vanished, result.changed) == (2, 2, 4)
    assert result.unchanged == 200 - 2 - 4 and result.repeated_later == 0
    assert result.changed_columns == {"age": 3, "plan": 1}
    examples = result.examples(Records.from_chunks(before.to_chunks()), after)
    # composite keys are shown as the check's findings show them, cells joined by "|"
    assert examples["new_examples"] == [{"row": 199, "key": "east|M90000"},
                                        {"row": 200, "key": "west|M00001"}]
    assert examples["vanished_examples"] == [{"row": 6, "key": "south|M00002"},
                                             {"row": 121, "key": "north|M00060"}]
    assert [e["key"] for e in examples["changed_examples"]] == [
        "north|M00005", "south|M00005", "north|M00025", "north|M00035"]
    assert examples["changed_examples"][3]["columns"] == ["plan"]
    # a key repeated within the later drop is compared once, by its first row
    repeated = pd.concat([later, later.iloc[[0]]], ignore_index=True)
    again = compare_records(before, records(pa.Table.from_pandas(repeated, preserve_index=False), key))
    assert (again.new, again.changed, again.repeated_later) == (2, 4, 1)


def test_large_drops_keep_no_cell_digests(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setattr(digests, "COLUMN_DIGEST_CELLS", 100)
    frame = seeded_drop(60, 3)
    before = records(pa.Table.from_pandas(frame, preserve_index=False), ["site", "member"])
    frame.loc[3, "age"] = "1000"
    after = records(pa.Table.from_pandas(frame, preserve_index=False), ["site", "member"])
    assert before.cells is None
    result = compare_records(before, after)
    assert result.changed == 1 and result.changed_columns is None


def test_chunks_round_trip_across_chunk_boundaries(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setattr(digests, "CHUNK_ROWS", 7)
    frame = seeded_drop(30, 4)
    stored = records(pa.Table.from_pandas(frame, preserve_index=False), ["site", "member"], batch=5)
    chunks = stored.to_chunks()
    assert sum(1 for kind, _, _ in chunks if kind == "records") == 5
    back = Records.from_chunks(chunks)
    assert np.array_equal(back.digests, stored.digests)
    assert np.array_equal(back.cells, stored.cells)
    assert back.key_text(np.array([0, 8, 29])) == [["north", "M00000"], ["north", "M00004"],
                                                   ["south", "M00014"]]
    # chunks in any order (the store hands them meta first, each copied into place as it comes)
    for order in (list(reversed(chunks)), chunks[1:] + chunks[:1], iter(chunks)):
        again = Records.from_chunks(order)
        assert np.array_equal(again.digests, stored.digests)
        assert np.array_equal(again.cells, stored.cells)
        assert again.key_texts == back.key_texts


@settings(max_examples=40, deadline=None)
@given(st.sets(st.integers(0, 60), max_size=40), st.sets(st.integers(0, 60), max_size=40),
       st.sets(st.integers(0, 60), max_size=20))
def test_comparison_equals_set_arithmetic(before: set[int], after: set[int], touched: set[int]) -> None:
    # reference: Python set operations on the keys themselves
    def table(keys: set[int], bump: set[int]) -> pa.Table:
        ordered = sorted(keys)
        return pa.table({"id": [str(k) for k in ordered],
                         "v": [str(k + (1000 if k in bump else 0)) for k in ordered]})

    result = compare_records(records(table(before, set()), ["id"], 3),
                             records(table(after, touched), ["id"], 5))
    assert result.new == len(after - before)
    assert result.vanished == len(before - after)
    assert result.changed == len(after & before & touched)


def test_orphans_against_parent_keys() -> None:
    parent = records(pa.table({"member": ["M1", "M2", "M3"], "age": ["1", "2", "3"]}), ["member"])
    check = OrphanCheck("member", parent.digests, ["visit"])
    child = pa.table({"visit": ["V1", "V2", "V3", "V4", "V5"],
                      "member": ["M1", "M9", "", "M3", "M7"]})
    for part in child.to_batches(max_chunksize=2):
        check.update(part)
    assert check.count == 2  # the empty foreign key is a missing value, not an orphan
    assert check.rows == [2, 5] and check.keys == ["V2", "V5"] and check.values == ["M9", "M7"]


def test_keys_sharing_their_top_bits_stay_distinct() -> None:
    # the sort packs positions into the low bits of the first lane; keys that differ only there (or
    # only in the second lane) must still be told apart, and repeats found exactly
    rng = np.random.default_rng(9)
    k0 = np.full(40, 0xABCD_0000_0000_0000, dtype=np.uint64) + rng.integers(0, 4, 40).astype(np.uint64)
    k1 = rng.integers(1, 6, 40).astype(np.uint64)
    digests_ = np.column_stack([k0, k1, np.ones(40, np.uint64), np.ones(40, np.uint64)])
    first, repeats = record_comparison.unique_keys(digests_)
    pairs = list(zip(k0.tolist(), k1.tolist()))
    expected_first = sorted({p: i for i, p in reversed(list(enumerate(pairs)))}.values())
    assert sorted(first.tolist()) == expected_first
    assert len(repeats) == 40 - len(expected_first)
    ordered = [pairs[i] for i in first]
    assert [a for a, _ in ordered] == sorted(a for a, _ in ordered)
    found = record_comparison.lookup(k0[first], k1[first], k0, k1)
    assert all(pairs[first[f]] == p for f, p in zip(found, pairs))


def test_digests_written_to_a_temporary_file_during_the_pass_equal_those_kept_in_memory(
        monkeypatch) -> None:  # type: ignore[no-untyped-def]
    # a large drop's digests wait in a temporary file, chunk by chunk; stored and compared, they must be
    # exactly the digests of the same drop kept in memory (reference: the in-memory digester)
    monkeypatch.setattr(digests, "CHUNK_ROWS", 7)
    frame = pa.Table.from_pandas(seeded_drop(50, 5), preserve_index=False)
    keeper = RecordDigester(["site", "member"], frame.column_names)
    keeper.spill_limit = 10**9
    for part in frame.to_batches(max_chunksize=4):
        keeper.update(part)
    kept = keeper.finish()
    assert not isinstance(kept, digests.SpilledRecords)
    digester = RecordDigester(["site", "member"], frame.column_names)
    digester.spill_limit = 6
    for part in frame.to_batches(max_chunksize=4):
        digester.update(part)
    spilled = digester.finish()
    assert isinstance(spilled, digests.SpilledRecords) and spilled.rows == kept.rows == 50
    assert np.array_equal(spilled.digests, kept.digests)
    assert spilled.to_chunks() == kept.to_chunks()
    # the key texts of full chunks wait in a temporary file as well
    assert isinstance(spilled.key_texts, digests.TextChunks) and len(spilled.key_texts) == 8
    shown = np.array([0, 8, 27, 49])
    assert spilled.key_text(shown) == kept.key_text(shown) == Records.from_chunks(kept.to_chunks()).key_text(shown)
    # (site, member) is unique in the seeded drop: compared with itself, every record is unchanged
    result = compare_records(Records.from_chunks(spilled.to_chunks()), spilled)
    assert result.unchanged == 50 and result.new == result.vanished == result.changed == 0
    assert result.repeated_later == 0


@settings(max_examples=30, deadline=None)
@given(st.lists(st.integers(0, 30), max_size=60), st.lists(st.integers(0, 30), max_size=60),
       st.sets(st.integers(0, 30), max_size=10), st.integers(1, 8))
def test_comparison_a_chunk_at_a_time_equals_the_comparison_at_once(
        before: list[int], after: list[int], touched: set[int], chunk: int) -> None:
    # repeated and empty keys included; the later keys are looked up and compared chunk by chunk
    def table(keys: list[int], bump: set[int]) -> pa.Table:
        return pa.table({"id": ["" if k == 0 else str(k) for k in keys],
                         "v": [str(k + (1000 if k in bump else 0)) for k in keys]})

    earlier, later = records(table(before, set()), ["id"], 3), records(table(after, touched), ["id"], 5)
    whole = compare_records(earlier, later)
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(digests, "CHUNK_ROWS", chunk)
        pieces = compare_records(earlier, later)
    for name in ("new", "vanished", "changed", "unchanged", "repeated_earlier", "repeated_later",
                 "no_key_later", "changed_columns"):
        assert getattr(pieces, name) == getattr(whole, name), name
    for name in ("new_rows", "vanished_rows", "changed_rows", "changed_pairs"):
        assert np.array_equal(getattr(pieces, name), getattr(whole, name)), name
