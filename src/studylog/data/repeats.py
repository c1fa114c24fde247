"""Fixed-size digests of cells and rows, and a compact set of the digests seen so far.

The ``unique``, ``key`` and ``repeated-row`` checks must know whether a row repeats any earlier row of a
file far larger than memory. They keep one digest per distinct value, never the values: the first
64-bit lane of the 16-byte digest (:class:`SeenDigests`, whose docstring states the chance of a false
repeat), of which large runs keep half in memory and half in a temporary file, so memory is bounded by
rows x 4 bytes per rule, whatever the width of the data.

The digest of a text is computed with numpy over Arrow's buffers, a whole column at a time: the UTF-8
bytes are read as little-endian 64-bit words (zero-padded), each word is folded into two independently
seeded lanes with a multiply-xorshift step, and the byte length is folded in last, followed by the
SplitMix64 finaliser (Steele, Lea & Flood 2014) for avalanche. A text's digest depends only on its bytes,
never on the batch it arrived in, so digests of the same file read in batches of any size are equal.
This is a hash for telling values apart, not a cryptographic one: two different texts share a digest with
probability about 2^-128 per pair, which for 10^9 rows is far below one in a million.

A missing cell (null) has its own digest, different from that of every text.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import numpy as np

# cells looked at to decide whether a column is worked on per distinct value, and how many of them
# may be distinct for that
SAMPLE = 2048
FEW = SAMPLE // 2
MERGE_LIMIT = 1 << 22
MERGE_RATIO = 2
_SEED_HI = 0x9E3779B97F4A7C15
_SEED_LO = 0xD6E8FEB86659FD93
_MUL_HI = 0xFF51AFD7ED558CCD
_MUL_LO = 0xC4CEB9FE1A85EC53
_NULL_HI = 0x2545F4914F6CDD1D
_NULL_LO = 0x5851F42D4C957F2D
_ROW_MUL = 0x100000001B3
ROW_SEPARATOR = "\x1f"
# the low m bytes of a word, m = 0 .. 8
_BYTE_MASKS_LIST = [(1 << (8 * m)) - 1 for m in range(9)]
NULL_CELL = "\x1e"


def _finalise(h: np.ndarray) -> np.ndarray:
    import numpy as np

    h = h ^ (h >> np.uint64(30))
    h = h * np.uint64(0xBF58476D1CE4E5B9)
    h = h ^ (h >> np.uint64(27))
    h = h * np.uint64(0x94D049BB133111EB)
    return h ^ (h >> np.uint64(31))


def encode_if_few(strings: Any) -> Any:
    """The array dictionary-encoded when it holds few distinct values, else None.

    Few: at most half of its first ``SAMPLE`` cells are distinct (categorical, coded, count and
    date columns, mostly), so that work done once per distinct value and spread to the rows is far
    cheaper than work done per cell. Short arrays are never encoded.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(strings, pa.ChunkedArray):
        strings = strings.combine_chunks()
    if len(strings) < 4 * SAMPLE:
        return None
    if pc.count_distinct(strings.slice(0, SAMPLE), mode="all").as_py() > FEW:
        return None
    encoded = strings.dictionary_encode()
    return encoded if len(encoded.dictionary) else None


def spread(encoded: Any, per_value: Any, fill: Any = None) -> Any:
    """Values computed for each distinct value of ``encoded`` (an Arrow array), given to its rows;
    a null cell gets ``fill`` (null when None)."""
    import pyarrow.compute as pc

    taken = per_value.take(encoded.indices)
    return taken if fill is None or not encoded.indices.null_count else pc.fill_null(taken, fill)


def text_digests(strings: Any, encoded: Any = None) -> tuple[np.ndarray, np.ndarray]:
    """Two 64-bit digest lanes for each text of an Arrow string array (null has its own digest).

    A column of few distinct values (``encode_if_few``; ``encoded`` when the caller has it already) is
    digested once per distinct value and the digests are spread to the rows; other columns are
    digested cell by cell. The digests are the same either way.
    """
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(strings, pa.ChunkedArray):
        strings = strings.combine_chunks()
    if encoded is None:
        encoded = encode_if_few(strings)
    if encoded is None:
        return _cell_digests(strings)
    hi, lo = _cell_digests(encoded.dictionary)
    index = encoded.indices
    if index.null_count:
        where = pc.fill_null(index, 0).to_numpy(zero_copy_only=False)
        nulls = index.is_null().to_numpy(zero_copy_only=False)
        hi, lo = hi[where], lo[where]
        hi[nulls], lo[nulls] = _NULL_HI, _NULL_LO
        return hi, lo
    where = index.to_numpy(zero_copy_only=False)
    return hi[where], lo[where]


def _cell_digests(strings: Any) -> tuple[np.ndarray, np.ndarray]:
    """``text_digests`` cell by cell, straight from the array's offsets and character data.

    Word k of a text is its bytes 8k to 8k + 7 (zero past its end), read from an aligned copy of the
    character data as two aligned words shifted together, so that no padded copy of each cell is made.
    """
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    n = len(strings)
    hi = np.full(n, _SEED_HI, dtype=np.uint64)
    lo = np.full(n, _SEED_LO, dtype=np.uint64)
    if n == 0:
        return hi, lo
    large = pa.types.is_large_string(strings.type) or pa.types.is_large_binary(strings.type)
    offset_type = np.dtype(np.int64 if large else np.int32)
    buffers = strings.buffers()
    offsets = np.frombuffer(buffers[1], dtype=offset_type, count=n + 1,
                            offset=strings.offset * offset_type.itemsize).astype(np.int64)
    first, last = int(offsets[0]), int(offsets[-1])
    starts = offsets[:-1] - first
    lengths = np.diff(offsets)
    nulls = pc.is_null(strings).to_numpy(zero_copy_only=False) if strings.null_count else None
    if nulls is not None:
        lengths[nulls] = 0
    data = np.frombuffer(buffers[2], dtype=np.uint8)[first:last] if last > first else np.zeros(0, np.uint8)
    longest, shortest = int(lengths.max()), int(lengths.min())
    width = -(-longest // 8)
    mul_hi, mul_lo, shift = np.uint64(_MUL_HI), np.uint64(_MUL_LO), np.uint64(29)
    masks = np.array(_BYTE_MASKS_LIST, dtype=np.uint64)
    with np.errstate(over="ignore"):
        if longest == shortest and nulls is None:
            # every cell the same length: the cells are the rows of a byte matrix, padded to whole words
            matrix = np.zeros((n, width * 8), dtype=np.uint8)
            matrix[:, :longest] = data.reshape(n, longest)
            words = matrix.view("<u8")
            for k in range(width):
                hi = (hi ^ words[:, k]) * mul_hi
                lo = (lo ^ words[:, k]) * mul_lo
                hi ^= hi >> shift
                lo ^= lo >> shift
        elif width:
            # one word more than the data, so that the word after a cell's last one can be read
            padded = np.zeros((last - first) // 8 + 2, dtype="<u8")
            padded.view(np.uint8)[: last - first] = data
            first_word = starts >> 3
            low_bits = ((starts & 7) * 8).astype(np.uint64)
            # the high part is shifted in two steps, so that an aligned cell (a shift of 64) gets 0
            high_bits = np.uint64(63) - low_bits
            one = np.uint64(1)
            top = len(padded) - 2
            for k in range(width):
                remaining = lengths - 8 * k
                count = n if 8 * k < shortest else int(np.count_nonzero(remaining > 0))
                if count * 4 >= n:
                    q = first_word + k if count == n else np.minimum(first_word + k, top)
                    word = (padded[q] >> low_bits) | ((padded[q + 1] << one) << high_bits)
                    word &= masks[np.clip(remaining, 0, 8)]
                    next_hi = (hi ^ word) * mul_hi
                    next_lo = (lo ^ word) * mul_lo
                    next_hi ^= next_hi >> shift
                    next_lo ^= next_lo >> shift
                    if count == n:
                        hi, lo = next_hi, next_lo
                    else:
                        inside = remaining > 0
                        hi = np.where(inside, next_hi, hi)
                        lo = np.where(inside, next_lo, lo)
                else:
                    # the few texts this long
                    rows = np.flatnonzero(remaining > 0)
                    q = first_word[rows] + k
                    word = (padded[q] >> low_bits[rows]) | ((padded[q + 1] << one) << high_bits[rows])
                    word &= masks[np.minimum(remaining[rows], 8)]
                    sub_hi = (hi[rows] ^ word) * mul_hi
                    sub_lo = (lo[rows] ^ word) * mul_lo
                    sub_hi ^= sub_hi >> shift
                    sub_lo ^= sub_lo >> shift
                    hi[rows], lo[rows] = sub_hi, sub_lo
        length_bits = lengths.astype(np.uint64)
        hi = _finalise(hi ^ (length_bits * mul_lo))
        lo = _finalise(lo ^ (length_bits * mul_hi))
    if nulls is not None:
        hi[nulls] = _NULL_HI
        lo[nulls] = _NULL_LO
    return hi, lo


def combine(parts: Sequence[tuple[np.ndarray, np.ndarray]]) -> tuple[np.ndarray, np.ndarray]:
    """One digest of several cells in order (a composite key, or a whole row).

    Each cell digest is already finalised, so the lanes are folded with one multiply-xorshift step per
    cell and finalised once at the end.
    """
    import numpy as np

    if len(parts) == 1:
        return parts[0]
    hi = np.full(len(parts[0][0]), _SEED_LO, dtype=np.uint64)
    lo = np.full(len(parts[0][0]), _SEED_HI, dtype=np.uint64)
    mul = np.uint64(_ROW_MUL)
    shift = np.uint64(31)
    with np.errstate(over="ignore"):
        for part_hi, part_lo in parts:
            hi ^= part_hi
            hi *= mul
            hi ^= hi >> shift
            lo ^= part_lo
            lo *= mul
            lo ^= lo >> shift
        return _finalise(hi), _finalise(lo)


def row_digests(columns: Sequence[Any]) -> tuple[np.ndarray, np.ndarray]:
    """One digest per row of several string columns: the digest of the cells joined by U+001F.

    An empty (null) cell is written as U+001E, so that an empty cell and an empty text differ. Cells
    that themselves contain these control characters could make two different rows join to the same
    text; they do not occur in ordinary data files. One join and one digest of the joined text cost
    far less than a digest per cell.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    if len(columns) == 1:
        return text_digests(columns[0])
    strings = [c.cast(pa.large_string()) if not pa.types.is_large_string(c.type) else c for c in columns] \
        if any(pa.types.is_large_string(c.type) for c in columns) else list(columns)
    separator = pa.scalar(ROW_SEPARATOR, strings[0].type)
    options = pc.JoinOptions(null_handling="replace", null_replacement=NULL_CELL)
    joined = pc.binary_join_element_wise(*strings, separator, options=options)
    return text_digests(joined)


def packed(digest: tuple[np.ndarray, np.ndarray]) -> bytes:
    """The digests as 16 bytes per row (hi then lo, big-endian), e.g. to store them."""
    import numpy as np

    hi, lo = digest
    out = np.empty((len(hi), 2), dtype=">u8")
    out[:, 0] = hi
    out[:, 1] = lo
    return out.tobytes()


class SeenDigests:
    """The set of digests seen so far, as a few sorted runs of their first 64-bit lane (no Python object
    per row).

    A check of a file far larger than memory keeps one of these per remembering rule (``unique``, ``key``,
    ``repeated-row``), so it keeps only the first 64-bit lane of each 16-byte digest. The price is a false
    repeat when two different values share their first lane: for n distinct values the chance that this
    happens at all in a file is about n^2 / 2^65 (2.7e-6 for 10 million distinct values, 2.7e-4 for 100
    million). The record digests that are stored and compared between drops keep both lanes.

    ``observe`` marks which digests of a batch were seen before (in an earlier batch, or earlier in the
    same batch) and adds the new ones. New digests form a sorted run; runs of similar size are merged
    (like a binary counter, by a linear merge a block at a time) up to ``MERGE_LIMIT`` entries, so a lookup
    searches O(log n) runs. A run of at least ``SPLIT_ROWS`` entries keeps only the high 32 bits of each
    lane in memory and its low 32 bits in a temporary file (:class:`_Halves`): 4 bytes a row in memory,
    40 MB per rule for 10 million rows. A digest is looked up by its high half, and the few whose high half
    is found (a repeat, or one in n / 2^32 others) have their low half read back, so a repeat is still a
    repeat of the whole 64-bit lane: the same answers as a set held in memory.
    """

    def __init__(self, *, on_disk: bool = False) -> None:
        self.runs: list[Any] = []
        # large runs wholly in temporary files (:class:`_OnDisk`), for a set looked up only for a few
        # rows of each batch (``observe(..., looked_up=...)``)
        self.on_disk = on_disk

    def __len__(self) -> int:
        return sum(len(run) for run in self.runs)

    @property
    def nbytes(self) -> int:
        """Bytes held in memory (the low halves of large runs are in temporary files)."""
        return sum(run.nbytes for run in self.runs)

    def observe(self, hi: np.ndarray, lo: np.ndarray | None = None, *,
                looked_up: np.ndarray | None = None) -> np.ndarray:
        """A boolean mask: True where the digest repeats one seen before (the first occurrence is False).

        Only the first lane ``hi`` is remembered (``lo`` is accepted for the callers' convenience).
        ``looked_up``: a mask of the rows that may repeat a digest of an earlier batch; the others are
        only compared within the batch (all are remembered). None: every row may.
        """
        import numpy as np

        n = len(hi)
        repeat = np.zeros(n, dtype=bool)
        if n == 0:
            return repeat
        # an unstable sort is several times faster than a stable one; equal digests (rare) may then
        # come in any order, so the earliest row of each run of equal digests is found afterwards
        order = np.argsort(hi)
        sorted_hi = hi[order]
        seen_sorted = np.empty(n, dtype=bool)
        seen_sorted[0] = False
        np.equal(sorted_hi[1:], sorted_hi[:-1], out=seen_sorted[1:])
        if seen_sorted.any():
            group = np.cumsum(~seen_sorted) - 1
            earliest = np.minimum.reduceat(order, np.flatnonzero(~seen_sorted))
            seen_sorted = order != earliest[group]
        if looked_up is None:
            for run in self.runs:
                seen_sorted |= _contains(run, sorted_hi)
        elif self.runs:
            asked = np.flatnonzero(looked_up[order] & ~seen_sorted)
            if len(asked):
                needles = sorted_hi[asked]
                found = np.zeros(len(asked), dtype=bool)
                for run in self.runs:
                    found |= _contains(run, needles)
                seen_sorted[asked] |= found
        repeat[order] = seen_sorted
        self._add(sorted_hi[~seen_sorted])
        return repeat

    def _add(self, values: np.ndarray) -> None:
        import numpy as np

        if len(values) == 0:
            return
        kind = _OnDisk if self.on_disk else _Halves
        self.runs.append(_kept(np.ascontiguousarray(values, dtype=np.uint64), kind))
        while len(self.runs) > 1:
            a, b = self.runs[-2], self.runs[-1]
            if len(a) > MERGE_RATIO * len(b) or len(a) + len(b) > MERGE_LIMIT:
                break
            self.runs[-2:] = [_merged(a, b, kind)]
            _close(a)
            _close(b)

    def close(self) -> None:
        """Let go of the runs and their temporary files at once (else when the set is collected)."""
        for run in self.runs:
            _close(run)
        self.runs = []


# a run this long keeps its low halves in a temporary file; a merge handles this many entries at a time
SPLIT_ROWS = 1 << 18
MERGE_BLOCK = 1 << 18
_LOW = 0xFFFFFFFF


class _Halves:
    """A sorted run of 64-bit digests: the high 32 bits in memory, the low 32 bits in a temporary file."""

    def __init__(self, size: int) -> None:
        import tempfile

        import numpy as np

        self.top = np.empty(size, dtype=np.uint32)
        self.file = tempfile.TemporaryFile(prefix="studylog-seen-")  # noqa: SIM115 - kept open
        self.filled = 0

    def append(self, values: np.ndarray) -> None:
        """Add the next sorted values (while the run is being built)."""
        import numpy as np

        stop = self.filled + len(values)
        np.right_shift(values, np.uint64(32), out=self.top[self.filled:stop], casting="unsafe")
        values.astype("<u4").tofile(self.file)
        self.filled = stop

    def __len__(self) -> int:
        return len(self.top)

    @property
    def nbytes(self) -> int:
        return int(self.top.nbytes)

    def values(self, start: int, stop: int) -> np.ndarray:
        """The whole 64-bit values of entries ``start`` to ``stop``."""
        import numpy as np

        self.file.seek(4 * start)
        low = np.fromfile(self.file, dtype="<u4", count=stop - start)
        out = self.top[start:stop].astype(np.uint64)
        out <<= np.uint64(32)
        out |= low
        return out

    def lows(self, positions: np.ndarray) -> np.ndarray:
        """The low halves of the entries at these positions."""
        import numpy as np

        return _read_at(self.file, np.dtype("<u4"), positions).astype(np.uint64)

    def close(self) -> None:
        self.file.close()


class _OnDisk:
    """A sorted run of 64-bit digests wholly in a temporary file; every ``READ_BLOCK``-th value stays in
    memory, so that a lookup reads only the blocks its needles fall in."""

    def __init__(self, size: int) -> None:
        import tempfile

        self.size = size
        self.file = tempfile.TemporaryFile(prefix="studylog-seen-")  # noqa: SIM115 - kept open
        self.filled = 0
        self.fences: list[np.ndarray] = []

    def append(self, values: np.ndarray) -> None:
        first = -self.filled % READ_BLOCK
        self.fences.append(values[first::READ_BLOCK].copy())
        values.astype("<u8", copy=False).tofile(self.file)
        self.filled += len(values)

    def __len__(self) -> int:
        return self.size

    @property
    def nbytes(self) -> int:
        return sum(f.nbytes for f in self.fences)

    def values(self, start: int, stop: int) -> np.ndarray:
        import numpy as np

        data = os.pread(self.file.fileno(), 8 * (stop - start), 8 * start)
        return np.frombuffer(data, dtype="<u8").astype(np.uint64, copy=False)

    def contains(self, needles: np.ndarray) -> np.ndarray:
        import numpy as np

        if len(self.fences) > 1:
            self.fences = [np.concatenate(self.fences)]
        self.file.flush()
        fence = self.fences[0]
        found = np.zeros(len(needles), dtype=bool)
        # the block whose first value is the last one at most the needle (none: the needle is smaller
        # than every value)
        block = np.searchsorted(fence, needles, side="right") - 1
        inside = np.flatnonzero(block >= 0)
        if not len(inside):
            return found
        order = inside[np.argsort(block[inside], kind="stable")]
        blocks = block[order]
        starts = np.flatnonzero(np.r_[True, blocks[1:] != blocks[:-1]])
        for start, stop in zip(starts, np.r_[starts[1:], len(order)]):
            which = order[start:stop]
            data = self.values(int(blocks[start]) * READ_BLOCK,
                               min((int(blocks[start]) + 1) * READ_BLOCK, self.size))
            position = np.minimum(np.searchsorted(data, needles[which]), len(data) - 1)
            found[which] = data[position] == needles[which]
        return found

    def close(self) -> None:
        self.file.close()


# entries read at a time from a run's temporary file, to look a few up
READ_BLOCK = 4096


def _read_at(file: Any, dtype: np.dtype, positions: np.ndarray) -> np.ndarray:
    """The entries of a file of ``dtype`` values at these positions, read a block at a time.

    Ordinary reads, not a map of the file: a mapped file puts the pages around each one read into the
    process's resident memory. One read per block touched (the positions are few: repeats, and the
    rare digests whose high half another digest shares).
    """
    import numpy as np

    out = np.empty(len(positions), dtype=dtype)
    if not len(positions):
        return out
    order = np.argsort(positions, kind="stable")
    ordered = positions[order]
    blocks = ordered // READ_BLOCK
    starts = np.flatnonzero(np.r_[True, blocks[1:] != blocks[:-1]])
    stops = np.r_[starts[1:], len(ordered)]
    handle = file.fileno()
    for start, stop in zip(starts.tolist(), stops.tolist()):
        first = int(ordered[start])
        data = np.frombuffer(os.pread(handle, (int(ordered[stop - 1]) - first + 1) * dtype.itemsize,
                                      first * dtype.itemsize), dtype=dtype)
        out[order[start:stop]] = data[ordered[start:stop] - first]
    return out


def _kept(values: np.ndarray, kind: Any = _Halves) -> Any:
    """A new sorted run as it is kept: in memory while short, else split into halves (or on disk)."""
    if len(values) < SPLIT_ROWS:
        return values
    run = kind(len(values))
    for start in range(0, len(values), MERGE_BLOCK):
        run.append(values[start:start + MERGE_BLOCK])
    run.file.flush()
    return run


def _close(run: Any) -> None:
    if isinstance(run, (_Halves, _OnDisk)):
        run.close()


def _values(run: Any, start: int, stop: int) -> np.ndarray:
    return run.values(start, stop) if isinstance(run, (_Halves, _OnDisk)) else run[start:stop]


def _contains(run: Any, needles: np.ndarray) -> np.ndarray:
    """Which of the sorted ``needles`` are in the run."""
    import numpy as np

    if isinstance(run, _OnDisk):
        return run.contains(needles)
    if not isinstance(run, _Halves):
        # needles in sorted order: numpy's binary search narrows from the previous answer
        position = np.searchsorted(run, needles)
        np.minimum(position, len(run) - 1, out=position)
        return run[position] == needles
    found = np.zeros(len(needles), dtype=bool)
    tops = (needles >> np.uint64(32)).astype(np.uint32)
    position = np.searchsorted(run.top, tops)
    # only the needles whose high half is there have their low half compared; equal high halves are
    # consecutive, so each such needle walks its (practically always one-long) run of them
    active = np.flatnonzero(position < len(run))
    active = active[run.top[position[active]] == tops[active]]
    lows = needles & np.uint64(_LOW)
    while len(active):
        hit = run.lows(position[active]) == lows[active]
        found[active[hit]] = True
        active = active[~hit]
        position[active] += 1
        active = active[position[active] < len(run)]
        active = active[run.top[position[active]] == tops[active]]
    return found


def _merged(a: Any, b: Any, kind: Any = _Halves) -> Any:
    """The linear merge of two sorted runs, a block at a time (never both runs whole in 64 bits)."""
    import numpy as np

    total = len(a) + len(b)
    if total < SPLIT_ROWS:
        return _merge_sorted(_values(a, 0, len(a)), _values(b, 0, len(b)))
    out = kind(total)
    i = j = 0
    while i < len(a) or j < len(b):
        x = _values(a, i, min(i + MERGE_BLOCK, len(a)))
        y = _values(b, j, min(j + MERGE_BLOCK, len(b)))
        # what is certainly final: the entries up to the lower of the two blocks' last values (all of a
        # block when its run ends with it)
        more_x, more_y = i + len(x) < len(a), j + len(y) < len(b)
        if more_x and (not more_y or x[-1] <= y[-1]):
            x_count, y_count = len(x), int(np.searchsorted(y, x[-1], side="right"))
        elif more_y:
            x_count, y_count = int(np.searchsorted(x, y[-1], side="right")), len(y)
        else:
            x_count, y_count = len(x), len(y)
        out.append(_merge_sorted(x[:x_count], y[:y_count]))
        i += x_count
        j += y_count
    out.file.flush()
    return out


def _merge_sorted(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Two sorted arrays as one: numpy's stable sort finds the two runs and merges them in one sweep."""
    import numpy as np

    out = np.concatenate([x, y])
    out.sort(kind="stable")
    return out
