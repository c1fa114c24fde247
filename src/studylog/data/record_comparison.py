"""Comparing two drops' record digests (``digests.Records``): new, vanished and changed records; and the
lookup of a foreign key among a parent table's key digests (orphans).

Both work from the stored digests alone (``studylog.data.digests``), never from the files.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from studylog.data.digests import (
    CHUNK_ROWS,
    EXAMPLES,
    MASKED_KEY,
    Records,
    _as_strings,
    digest_values,
)

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa


def _position_bits(n: int) -> int:
    return max(int(n).bit_length(), 1)


def unique_keys(digests: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Positions of the first record of each distinct non-empty key, sorted by key digest; and the
    positions of later repeats of a key (they take no part in the comparison).

    Sorting 64-bit values is several times faster than an argsort, so each record's position is put
    into the low bits of its key's first lane and the values are sorted; runs whose truncated first
    lanes tie (repeated keys, or different keys sharing the top bits) are then ordered exactly by
    (lane 0, lane 1, position).
    """
    import numpy as np

    n = len(digests)
    k0 = digests[:, 0]
    k1 = digests[:, 1]
    bits = np.uint64(_position_bits(n))
    low = np.uint64((1 << int(bits)) - 1)
    keyed = (k0 != 0) | (k1 != 0)
    # in place, a piece at a time: a 10-million-record drop's temporaries are 80 MB each
    packed = k0 & ~low
    for start in range(0, n, CHUNK_ROWS):
        stop = min(start + CHUNK_ROWS, n)
        packed[start:stop] |= np.arange(start, stop, dtype=np.uint64)
    if not keyed.all():
        packed = packed[keyed]
    del keyed
    packed.sort()
    order = np.bitwise_and(packed, low).view(np.int64)
    if len(order) == 0:
        return order, np.zeros(0, dtype=np.int64)
    packed >>= bits
    tie = packed[1:] == packed[:-1]
    del packed
    if tie.any():
        in_run = np.zeros(len(order), dtype=bool)
        in_run[1:] |= tie
        in_run[:-1] |= tie
        slots = np.flatnonzero(in_run)
        members = order[slots]
        order[slots] = members[np.lexsort((members, k1[members], k0[members]))]
        first = np.ones(len(order), dtype=bool)
        a, b = order[slots[:-1]], order[slots[1:]]
        same = (k0[a] == k0[b]) & (k1[a] == k1[b]) & (slots[1:] == slots[:-1] + 1)
        first[slots[1:][same]] = False
        return order[first], order[~first]
    return order, np.zeros(0, dtype=np.int64)


def lookup(k0: np.ndarray, k1: np.ndarray, want0: np.ndarray, want1: np.ndarray) -> np.ndarray:
    """For each wanted key (lanes want0, want1), its index among the keys (k0, k1) sorted by k0, or -1."""
    import numpy as np

    size = len(k0)
    found = np.full(len(want0), -1, dtype=np.int64)
    if size == 0 or len(want0) == 0:
        return found
    candidate = np.searchsorted(k0, want0, side="left")
    # walk the run of equal first lanes (practically always of length 0 or 1) looking for lane 1
    active = np.flatnonzero(candidate < size)
    active = active[k0[candidate[active]] == want0[active]]
    while len(active):
        hit = k1[candidate[active]] == want1[active]
        found[active[hit]] = candidate[active[hit]]
        active = active[~hit]
        candidate[active] += 1
        active = active[candidate[active] < size]
        active = active[k0[candidate[active]] == want0[active]]
    return found


@dataclass
class RecordComparison:
    new: int
    vanished: int
    changed: int
    unchanged: int
    repeated_earlier: int
    repeated_later: int
    no_key_later: int
    new_rows: np.ndarray  # 0-based positions in the later drop, ascending
    vanished_rows: np.ndarray  # 0-based positions in the earlier drop, ascending
    changed_rows: np.ndarray  # 0-based positions in the later drop, ascending
    changed_pairs: np.ndarray  # (positions in later, positions in earlier) for changed_rows
    # {column: number of changed records where that column changed}, or None when unknown
    changed_columns: dict[str, int] | None
    columns_added: list[str]
    columns_removed: list[str]

    def examples(self, earlier: Records, later: Records, limit: int = EXAMPLES) -> dict[str, Any]:
        """Example rows (1-based) and keys of new, vanished and changed records."""
        def listing(records: Records, positions: np.ndarray) -> list[dict[str, Any]]:
            shown = positions[:limit]
            keys = records.key_text(shown)
            return [{"row": int(p) + 1, "key": _key_value(k)} for p, k in zip(shown, keys)]

        changed = listing(later, self.changed_rows)
        if self.changed_columns is not None and later.cells is not None and earlier.cells is not None:
            pairs = self.changed_pairs[:limit]
            for item, (mine, theirs) in zip(changed, pairs):
                item["columns"] = _differing(earlier, later, int(theirs), int(mine))
        return {"new_examples": listing(later, self.new_rows),
                "vanished_examples": listing(earlier, self.vanished_rows),
                "changed_examples": changed}


def _key_value(parts: list[str | None]) -> str | None:
    """A key as the check's findings show it: the cell, or a composite key's cells joined by "|"."""
    if not parts:
        return MASKED_KEY
    return parts[0] if len(parts) == 1 else "|".join("" if p is None else p for p in parts)


def _common_columns(earlier: Records, later: Records) -> list[tuple[str, int, int]]:
    earlier_index = {c: i for i, c in enumerate(earlier.columns)}
    return [(c, earlier_index[c], j) for j, c in enumerate(later.columns) if c in earlier_index]


def _differing(earlier: Records, later: Records, earlier_pos: int, later_pos: int) -> list[str]:
    return [c for c, i, j in _common_columns(earlier, later)
            if earlier.cells[earlier_pos, i] != later.cells[later_pos, j]]


def compare_records(earlier: Records, later: Records) -> RecordComparison:
    """Which records of the later drop are new, which of the earlier drop vanished, which changed.

    One pass: both drops' keys are sorted once (numpy lexsort) and the later keys are located among
    the earlier ones by binary search; row digests are compared at the matched positions.
    """
    import numpy as np

    e, d = earlier.digests, later.digests  # read once (a spilled drop reads its temporary file)
    earlier_first, earlier_repeats = unique_keys(e)
    later_first, later_repeats = unique_keys(d)
    # the later keys are looked up a chunk at a time, so that only the earlier keys are gathered whole
    keys0, keys1 = e[:, 0][earlier_first], e[:, 1][earlier_first]
    found = np.empty(len(later_first), dtype=np.int64)
    for start in range(0, len(later_first), CHUNK_ROWS):
        part = later_first[start:start + CHUNK_ROWS]
        found[start:start + len(part)] = lookup(keys0, keys1, d[:, 0][part], d[:, 1][part])
    del keys0, keys1
    matched = found >= 0
    new_rows = np.sort(later_first[~matched])
    seen = np.zeros(len(earlier_first), dtype=bool)
    seen[found[matched]] = True
    vanished_rows = np.sort(earlier_first[~seen])
    mine = later_first[matched]
    del later_first
    theirs = earlier_first[found[matched]]
    del found, matched
    differs = np.empty(len(mine), dtype=bool)
    for start in range(0, len(mine), CHUNK_ROWS):
        a, b = mine[start:start + CHUNK_ROWS], theirs[start:start + CHUNK_ROWS]
        differs[start:start + len(a)] = (d[:, 2][a] != e[:, 2][b]) | (d[:, 3][a] != e[:, 3][b])
    order = np.argsort(mine[differs], kind="stable")
    changed_mine, changed_theirs = mine[differs][order], theirs[differs][order]
    changed_columns = None
    if earlier.cells is not None and later.cells is not None:
        common = _common_columns(earlier, later)
        changed_columns = {}
        for name, i, j in common:
            count = int(np.count_nonzero(earlier.cells[changed_theirs, i] != later.cells[changed_mine, j]))
            if count:
                changed_columns[name] = count
    no_key = int(np.count_nonzero((d[:, 0] == 0) & (d[:, 1] == 0)))
    return RecordComparison(
        new=int(len(new_rows)), vanished=int(len(vanished_rows)), changed=int(len(changed_mine)),
        unchanged=int(len(mine) - len(changed_mine)),
        repeated_earlier=int(len(earlier_repeats)), repeated_later=int(len(later_repeats)),
        no_key_later=no_key, new_rows=new_rows, vanished_rows=vanished_rows,
        changed_rows=changed_mine, changed_pairs=np.column_stack([changed_mine, changed_theirs]),
        changed_columns=changed_columns,
        columns_added=[c for c in later.columns if c not in earlier.columns],
        columns_removed=[c for c in earlier.columns if c not in later.columns],
    )


class OrphanCheck:
    """A foreign key's values looked up among the referenced table's key digests, batch by batch."""

    def __init__(self, column: str, parent_keys: np.ndarray, key_columns: list[str], *,
                 masked: bool = False) -> None:
        self.masked = masked
        self.column = column
        self.key_columns = key_columns
        first, _ = unique_keys(parent_keys)
        self.parent = (parent_keys[:, 0][first], parent_keys[:, 1][first])
        self.count = 0
        self.rows: list[int] = []
        self.keys: list[Any] = []
        self.values: list[str] = []
        self.seen_rows = 0

    def update(self, batch: pa.RecordBatch) -> None:
        import numpy as np
        import pyarrow as pa

        names = batch.schema.names
        if self.column not in names:
            self.seen_rows += batch.num_rows
            return
        values = _as_strings(batch.column(names.index(self.column)))
        digests = digest_values([values])
        present = (digests[:, 0] != 0) | (digests[:, 1] != 0)
        orphan = present & (lookup(*self.parent, digests[:, 0], digests[:, 1]) < 0)
        positions = np.flatnonzero(orphan)
        self.count += int(len(positions))
        room = EXAMPLES - len(self.rows)
        if room > 0 and len(positions):
            shown = positions[:room]
            self.rows.extend(int(p) + self.seen_rows + 1 for p in shown)
            shown_values = values.take(pa.array(shown)).to_pylist()
            self.values.extend([MASKED_KEY] * len(shown) if self.masked else shown_values)
            if self.key_columns and all(c in names for c in self.key_columns):
                cells = [batch.column(names.index(c)).take(pa.array(shown)).to_pylist()
                         for c in self.key_columns]
                self.keys.extend(_key_value(list(parts)) for parts in zip(*cells))
            else:
                self.keys.extend([None] * len(shown))
        self.seen_rows += batch.num_rows
