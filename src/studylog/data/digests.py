"""Record digests: a fixed-size fingerprint of each record's key and of the whole record.

They let a drop be compared record by record with an earlier drop without re-reading the earlier file.
How the check uses it (keyed tables only; batches in file order, all columns strings)::

    from studylog.data.digests import RecordDigester
    from studylog.data.record_comparison import compare_records
    digester = RecordDigester(key_columns=["visit_id"], all_columns=source.columns)
    for batch in source.batches():
        digester.update(batch)
    later = digester.finish()                  # Records: in memory, in file order
    chunks = later.to_chunks()                 # [(kind, seq, bytes)] for ``digest_chunks``
    earlier = Records.from_chunks(rows)        # rows: (kind, seq, data) read back from the store
    result = compare_records(earlier, later)   # new, vanished, changed, examples, changed columns

The comparison of two drops' records and the lookup of foreign keys are in ``record_comparison``.

Method. Each cell is digested by ``studylog.data.repeats.text_digests`` (the same vectorised 2 x 64-bit
digest the key, unique and repeated-row checks use, so the check's per-column digests are reused when
it hands them over: ``update(batch, column_digest=context.digest)``); a composite key and a whole row
are combined from their cells' digests with ``repeats.combine``. The key digest covers the key columns in
the table's key order; the row digest covers all columns in name order (so a reordered file compares
equal). A single-column key's digest is the digest of that cell alone, so a foreign key's value is
looked up among a parent table's key digests directly. The digest function is part of the stored
format: changing it makes earlier drops' digests incomparable (bump FORMAT).

Collision probability. The digest is not cryptographic; it behaves as a 128-bit hash for ordinary data
(repeats.py), so for n distinct keys the chance that any two share a digest is about n^2 / 2^129 (about
1.5e-25 for 10 million keys) and the chance that a changed record keeps its row digest about 2^-128.

Memory. Each full chunk of ``CHUNK_ROWS`` records goes to a temporary file as it is filled, already
in its stored layout (:class:`SpilledRecords`), and the drop's chunks are stored one at a time; the
comparison reads both drops' digests (32 bytes a record each). The stored format is unchanged (FORMAT 1).

Layout in the store (``digest_chunks``, one drop): ``meta`` (seq 0, JSON: format, key, columns, rows,
chunk size), then per chunk c of CHUNK_ROWS records in file order (seq 3c + 1, 3c + 2, 3c + 3):
``records`` (n x 4
little-endian uint64: key digest, row digest; 32 bytes a record; record i of the drop is data row i + 1),
``keys`` (the key cells as text, joined by U+001F, an Arrow IPC stream compressed with zstd; used only
for example keys of vanished records), and, while the drop has at most COLUMN_DIGEST_CELLS cells,
``columns`` (n x columns uint16: a 16-bit digest of each cell, so that a changed record can say which
columns changed; a changed cell keeps its 16-bit digest with probability 1/65,536). For large drops
the per-column digests are not kept: they would cost 2 bytes a cell and a hash of every cell, and
"which columns changed" is then reported as unknown. Rows whose key has an empty cell get the zero
digest and take no part in the comparison (the key check reports them).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from collections.abc import Callable, Iterable, Iterator, Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import numpy as np
    import pyarrow as pa

FORMAT = 1
CHUNK_ROWS = 1 << 20
# per-cell digests are kept while the drop has at most this many cells (2 bytes each: 64 MB)
COLUMN_DIGEST_CELLS = 32_000_000
EXAMPLES = 20
# bytes of one record in the digester's temporary file: key digest, row digest (4 x uint64)
SPILL_RECORD = 32
SEPARATOR = "\x1f"
EMPTY_MARK = "\x1e"
MASKED_KEY = "[masked]"


def _as_strings(array: pa.Array | pa.ChunkedArray) -> pa.Array:
    import pyarrow as pa
    import pyarrow.compute as pc

    if isinstance(array, pa.ChunkedArray):
        array = array.combine_chunks()
    if not pa.types.is_string(array.type) and not pa.types.is_large_string(array.type):
        array = pc.cast(array, pa.string())
    return array


def join_cells(columns: list[pa.Array]) -> pa.Array:
    """The cells of each row joined by U+001F, empty or null cells written as U+001E (key texts)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    columns = [pc.if_else(pc.fill_null(pc.equal(c, ""), True), EMPTY_MARK, c).cast(pa.large_string())
               for c in map(_as_strings, columns)]
    if len(columns) == 1:
        return columns[0]
    return pc.binary_join_element_wise(*columns, pa.scalar(SEPARATOR, pa.large_string()))


def _stack(digest: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    import numpy as np

    return np.column_stack([digest[0], digest[1]]).astype(np.uint64, copy=False)


def cell_digest(column: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """The two 64-bit lanes of each cell's digest (``repeats.text_digests``)."""
    from studylog.data.repeats import text_digests

    return text_digests(_as_strings(column))


def digest_values(columns: list[pa.Array],
                  digests: list[tuple[np.ndarray, np.ndarray]] | None = None) -> np.ndarray:
    """Key digests (n, 2) of rows given their key columns in key order; zero where a key cell is empty."""
    import numpy as np
    import pyarrow.compute as pc

    from studylog.data.repeats import combine

    columns = [_as_strings(c) for c in columns]
    parts = digests if digests is not None else [cell_digest(c) for c in columns]
    out = _stack(combine(parts)).copy()
    empty = np.zeros(len(out), dtype=bool)
    for column in columns:
        empty |= pc.fill_null(pc.equal(pc.utf8_trim_whitespace(column), ""), True).to_numpy(
            zero_copy_only=False)
    out[empty] = 0
    return out


@dataclass
class Records:
    """The digests of one drop, in file order: (n, 4) uint64 (key digest, row digest), and extras."""

    key: list[str]
    columns: list[str]
    digests: np.ndarray
    # compressed key texts per chunk (Arrow IPC, zstd), aligned with CHUNK_ROWS chunks
    key_texts: Sequence[bytes] = field(default_factory=list)
    # (n, len(columns)) uint16 per-cell digests, or None when the drop was too large to keep them
    cells: np.ndarray | None = None

    @property
    def rows(self) -> int:
        return int(len(self.digests))

    def key_text(self, indices: np.ndarray) -> list[list[str | None]]:
        """The key cells of the records at these (0-based) positions, as lists of texts."""
        import numpy as np

        result: dict[int, list[str | None]] = {}
        wanted = np.asarray(indices, dtype=np.int64)
        for seq in np.unique(wanted // CHUNK_ROWS):
            if seq >= len(self.key_texts):
                continue
            texts = _decode_texts(self.key_texts[int(seq)])
            for index in wanted[wanted // CHUNK_ROWS == seq]:
                joined = texts[int(index - seq * CHUNK_ROWS)].as_py()
                result[int(index)] = [None if part == EMPTY_MARK else part
                                      for part in (joined or "").split(SEPARATOR)]
        return [result.get(int(i), []) for i in wanted]

    def chunk_digests(self, start: int, stop: int) -> np.ndarray:
        """The (m, 4) digests of records ``start`` to ``stop`` (file order)."""
        return self.digests[start:stop]

    def to_chunks(self) -> list[tuple[str, int, bytes]]:
        """(kind, seq, data) rows for the store's ``digest_chunks``."""
        return list(self.iter_chunks())

    def iter_chunks(self, *, views: bool = False) -> Iterator[tuple[str, int, Any]]:
        """``to_chunks`` one chunk at a time, so that a caller can store each before the next is made.

        ``views``: the per-cell digests as byte views of the array that holds them instead of copies
        (the database copies them as it writes them; a drop's cell digests are 2 bytes a cell).
        """
        import numpy as np

        meta = {"format": FORMAT, "key": self.key, "columns": self.columns, "rows": self.rows,
                "chunk_rows": CHUNK_ROWS, "cell_digests": self.cells is not None,
                "method": "SipHash-2-4 x 2 of cells joined by U+001F"}
        yield ("meta", 0, json.dumps(meta).encode())
        # ``digest_chunks`` has one seq per (drop, seq): chunk c of each kind takes 3c + 1, + 2, + 3
        for number, start in enumerate(range(0, self.rows, CHUNK_ROWS)):
            stop = min(start + CHUNK_ROWS, self.rows)
            yield ("records", 3 * number + 1, self.records_bytes(number))
            if number < len(self.key_texts):
                yield ("keys", 3 * number + 2, self.key_texts[number])
            if self.cells is not None:
                cells = np.ascontiguousarray(self.cells[start:stop], dtype="<u2")
                yield ("columns", 3 * number + 3, memoryview(cells).cast("B") if views else cells.tobytes())
                del cells

    def records_bytes(self, number: int) -> bytes:
        """The stored ``records`` chunk ``number``: lane-major, the chunk's key lanes, then its row lanes
        (each lane contiguous)."""
        start = number * CHUNK_ROWS
        return _lane_bytes(self.chunk_digests(start, min(start + CHUNK_ROWS, self.rows)))

    @classmethod
    def from_chunks(cls, chunks: Iterable[tuple[str, int, bytes]]) -> Records:
        """The records of stored chunks, in any order. When the meta chunk comes first (``seq`` order,
        as the store hands them), each records chunk is copied into place as it arrives, so a drop's
        digests are never held twice."""
        import numpy as np

        meta: dict[str, Any] | None = None
        digests: np.ndarray | None = None
        waiting: dict[int, bytes] = {}
        keys: dict[int, bytes] = {}
        stored: dict[int, bytes] = {}
        for kind, seq, data in chunks:
            if kind == "meta" and seq == 0:
                meta = json.loads(data)
                digests = np.empty((int(meta["rows"]), 4), dtype=np.uint64, order="F")
                for early, part in waiting.items():
                    _place(digests, meta, early, part)
                waiting.clear()
            elif kind == "records":
                if digests is None:
                    waiting[seq] = data
                else:
                    _place(digests, meta, seq, data)
            elif kind == "keys":
                keys[seq] = data
            elif kind == "columns":
                stored[seq] = data
        if meta is None or digests is None:
            return cls(key=[], columns=[], digests=np.zeros((0, 4), dtype=np.uint64))
        cells = None
        if meta.get("cell_digests") and stored:
            width = len(meta["columns"])
            cells = np.concatenate([np.frombuffer(stored[s], dtype="<u2").reshape(-1, width)
                                    for s in sorted(stored)])
        return cls(key=list(meta["key"]), columns=list(meta["columns"]), digests=digests,
                   key_texts=[keys[s] for s in sorted(keys)], cells=cells)


def _place(digests: np.ndarray, meta: dict[str, Any], seq: int, data: bytes) -> None:
    """Copy one stored records chunk (lane-major, chunk c at seq 3c + 1) into its rows."""
    import numpy as np

    lanes = np.frombuffer(data, dtype="<u8").reshape(4, -1)
    start = (seq - 1) // 3 * int(meta.get("chunk_rows", CHUNK_ROWS))
    digests[start:start + lanes.shape[1]] = lanes.T


class SpilledRecords(Records):
    """:class:`Records` whose full chunks wait in a temporary file, each as the bytes it is stored as
    (written during the pass); the last, partial chunk stays in memory.

    ``digests`` reads them all back when asked (the comparison needs them); ``iter_chunks`` hands each
    chunk's bytes on as read, so storing a drop's digests holds one chunk in memory, never the whole drop.
    """

    def __init__(self, key: list[str], columns: list[str], spill: Any, rows: int,
                 key_texts: Sequence[bytes], cells: np.ndarray | None, tail: np.ndarray) -> None:
        self.key, self.columns, self.key_texts, self.cells = key, columns, key_texts, cells
        self._spill = spill
        self._rows = rows
        # (m, 4) digests of the records after the last full chunk
        self._tail = tail
        self._spilled = (rows - len(tail)) // CHUNK_ROWS

    @property  # type: ignore[override]
    def rows(self) -> int:
        return self._rows

    @property  # type: ignore[override]
    def digests(self) -> np.ndarray:
        return self.chunk_digests(0, self._rows)

    def records_bytes(self, number: int) -> bytes:
        if number >= self._spilled:
            return _lane_bytes(self._tail)
        self._spill.seek(number * CHUNK_ROWS * SPILL_RECORD)
        return self._spill.read(CHUNK_ROWS * SPILL_RECORD)

    def chunk_digests(self, start: int, stop: int) -> np.ndarray:
        import numpy as np

        stop = min(stop, self._rows)
        out = np.empty((max(stop - start, 0), 4), dtype=np.uint64, order="F")
        for number in range(start // CHUNK_ROWS, -(-stop // CHUNK_ROWS)):
            first = number * CHUNK_ROWS
            if number >= self._spilled:
                lanes = self._tail.T
            else:
                self._spill.seek(first * SPILL_RECORD)
                lanes = np.fromfile(self._spill, dtype="<u8", count=4 * CHUNK_ROWS).reshape(4, CHUNK_ROWS)
            low, high = max(start, first), min(stop, first + lanes.shape[1])
            out[low - start:high - start] = lanes[:, low - first:high - first].T
        return out


class TextChunks(Sequence[bytes]):
    """Encoded key-text chunks (``_encode_texts``) in a temporary file, read back one at a time."""

    def __init__(self, chunks: Iterable[bytes] = ()) -> None:
        import tempfile

        self.file = tempfile.TemporaryFile(prefix="studylog-keys-")  # noqa: SIM115 - kept open
        self.places: list[tuple[int, int]] = []
        self.end = 0
        for chunk in chunks:
            self.append(chunk)

    def append(self, chunk: bytes) -> None:
        self.file.seek(self.end)
        self.file.write(chunk)
        self.places.append((self.end, len(chunk)))
        self.end += len(chunk)

    def __len__(self) -> int:
        return len(self.places)

    def __getitem__(self, index: Any) -> Any:
        if isinstance(index, slice):
            return [self[i] for i in range(*index.indices(len(self)))]
        start, size = self.places[index]
        self.file.flush()
        self.file.seek(start)
        return self.file.read(size)


def _lane_bytes(digests: np.ndarray) -> bytes:
    """(m, 4) digests as stored: lane by lane, little-endian."""
    return digests.T.astype("<u8", copy=False).tobytes()


def lane_major(parts: list[np.ndarray]) -> np.ndarray:
    """(n, 4) uint64 digests in Fortran order (each lane contiguous) from (4, m) or (m, 4) parts."""
    import numpy as np

    total = sum(p.shape[1] for p in parts)
    out = np.empty((total, 4), dtype=np.uint64, order="F")
    start = 0
    for part in parts:
        out[start:start + part.shape[1]] = part.T
        start += part.shape[1]
    return out


def _encode_texts(texts: pa.Array) -> bytes:
    import pyarrow as pa
    import pyarrow.ipc as ipc

    sink = pa.BufferOutputStream()
    table = pa.table({"key": texts})
    with ipc.new_stream(sink, table.schema,
                        options=ipc.IpcWriteOptions(compression="zstd")) as writer:
        writer.write_table(table)
    return sink.getvalue().to_pybytes()


def _decode_texts(data: bytes) -> pa.Array:
    import pyarrow.ipc as ipc

    return ipc.open_stream(data).read_all().column("key").combine_chunks()


class RecordDigester:
    """Feeds on batches in file order; ``finish()`` gives the drop's :class:`Records`.

    ``masked``: the key is a direct identifier or sensitive: its texts are not stored and examples show
    "[masked]" (the digests are still kept: they reveal nothing readable).

    The digests of each chunk of ``CHUNK_ROWS`` records are written during the pass straight into the
    layout they are stored in (lane-major, :meth:`Records.records_bytes`), and the per-cell digests
    into one array per chunk, so that nothing is concatenated or transposed once the pass is over. A
    full chunk goes to the temporary file once the full chunks hold more than ``spill_limit`` records
    (at once, by default).
    """

    def __init__(self, key_columns: list[str], all_columns: list[str], *, masked: bool = False) -> None:
        self.key = list(key_columns)
        self.columns = sorted(all_columns)
        self.masked = masked
        # the chunk being filled: (4, CHUNK_ROWS) lane-major digests and (CHUNK_ROWS, columns) cell
        # digests (allocated untouched: only the rows written take memory)
        self.block: np.ndarray | None = None
        self.cell_block: np.ndarray | None = None
        self.filled = 0
        # full chunks kept in memory (while they hold at most spill_limit records), else in the file
        self.chunks: list[np.ndarray] = []
        self.cell_chunks: list[np.ndarray] | None = []
        self.spill: Any = None
        self.spilled = 0
        self.spill_limit = 0
        self.texts: list[pa.Array] = []
        self.pending_texts = 0
        self.key_texts: list[bytes] | TextChunks = []
        self.rows = 0

    def update(self, batch: pa.RecordBatch,
               column_digest: Callable[[str], tuple[np.ndarray, np.ndarray]] | None = None) -> None:
        """Digest one batch. ``column_digest(name)`` may hand over the check's cached cell digests."""
        import numpy as np

        from studylog.data.repeats import combine

        names = batch.schema.names
        n = batch.num_rows
        cache: dict[str, tuple[np.ndarray, np.ndarray]] = {}

        def lanes(name: str) -> tuple[np.ndarray, np.ndarray]:
            if name not in cache:
                cache[name] = (column_digest(name) if column_digest is not None
                               else cell_digest(batch.column(names.index(name))))
            return cache[name]

        if any(c not in names for c in self.key):
            key_digests = np.zeros((n, 2), dtype=np.uint64)
            key_text = join_cells([_null_strings(n)])
        else:
            key_cells = [batch.column(names.index(c)) for c in self.key]
            key_digests = digest_values(key_cells, [lanes(c) for c in self.key])
            key_text = join_cells(key_cells)
        present = [c for c in self.columns if c in names]
        zero = np.zeros(n, np.uint64)
        row_hi, row_lo = combine([lanes(c) for c in present]) if present else (zero, zero)
        if self.cell_chunks is not None and (self.rows + n) * max(len(self.columns), 1) > COLUMN_DIGEST_CELLS:
            self.cell_chunks = None
            self.cell_block = None
        done = 0
        while done < n:
            if self.block is None:
                self.block = np.empty((4, CHUNK_ROWS), dtype=np.uint64)
                if self.cell_chunks is not None:
                    self.cell_block = np.empty((CHUNK_ROWS, len(self.columns)), dtype=np.uint16)
            take = min(n - done, CHUNK_ROWS - self.filled)
            rows, here = slice(done, done + take), slice(self.filled, self.filled + take)
            self.block[0:2, here] = key_digests[rows].T
            self.block[2, here] = row_hi[rows]
            self.block[3, here] = row_lo[rows]
            if self.cell_block is not None:
                # the top 16 bits of each cell's first lane, a column at a time into contiguous rows, then
                # one transposing copy (writing each column straight into the row-major block is slower)
                tops = np.zeros((len(self.columns), take), dtype=np.uint16)
                for i, name in enumerate(self.columns):
                    if name in names:
                        np.right_shift(lanes(name)[0][rows], np.uint64(48), out=tops[i], casting="unsafe")
                self.cell_block[here] = tops.T
                del tops
            self.filled += take
            done += take
            if self.filled == CHUNK_ROWS:
                self._full_chunk()
        self.rows += n
        if not self.masked:
            self._add_texts(key_text)

    def _full_chunk(self) -> None:
        """Put the chunk just filled away: kept, or written to the temporary file as it is stored."""
        import tempfile

        if self.spill is None and (len(self.chunks) + 1) * CHUNK_ROWS <= self.spill_limit:
            self.chunks.append(self.block)
        else:
            if self.spill is None:
                self.spill = tempfile.TemporaryFile(prefix="studylog-digests-")  # noqa: SIM115 - kept open
                for kept in self.chunks:
                    kept.astype("<u8", copy=False).tofile(self.spill)
                self.spilled, self.chunks = len(self.chunks), []
            self.spill.seek(0, 2)
            self.block.astype("<u8", copy=False).tofile(self.spill)
            self.spilled += 1
        if self.cell_chunks is not None and self.cell_block is not None:
            self.cell_chunks.append(self.cell_block)
        self.block, self.cell_block, self.filled = None, None, 0

    def _add_texts(self, texts: pa.Array) -> None:
        import pyarrow as pa

        self.texts.append(texts)
        self.pending_texts += len(texts)
        while self.pending_texts >= CHUNK_ROWS:
            joined = pa.concat_arrays([t.cast(pa.large_string()) for t in self.texts])
            if not isinstance(self.key_texts, TextChunks):
                # a drop of more than one chunk: its key texts wait in a temporary file too
                self.key_texts = TextChunks(self.key_texts)
            self.key_texts.append(_encode_texts(joined.slice(0, CHUNK_ROWS)))
            # a copy of the rest, so that the chunk's texts are let go
            rest = pa.concat_arrays([joined.slice(CHUNK_ROWS)])
            self.texts, self.pending_texts = [rest], len(rest)

    def finish(self) -> Records:
        import numpy as np
        import pyarrow as pa

        if self.pending_texts:
            joined = pa.concat_arrays([t.cast(pa.large_string()) for t in self.texts])
            self.key_texts.append(_encode_texts(joined))
            self.texts, self.pending_texts = [], 0
        width = len(self.columns)
        tail = self.block[:, :self.filled].T if self.block is not None else np.zeros((0, 4), np.uint64)
        cells = None
        if self.cell_chunks is not None:
            parts = self.cell_chunks + ([self.cell_block[:self.filled]] if self.cell_block is not None else [])
            cells = (parts[0] if len(parts) == 1 else np.concatenate(parts) if parts
                     else np.zeros((0, width), dtype=np.uint16))
        self.block = self.cell_block = None
        self.cell_chunks = []
        if self.spill is not None:
            self.spill.flush()
            return SpilledRecords(self.key, self.columns, self.spill, self.rows, self.key_texts, cells, tail)
        digests = tail if not self.chunks else lane_major(self.chunks + [tail.T])
        self.chunks = []
        return Records(key=self.key, columns=self.columns, digests=digests,
                       key_texts=self.key_texts, cells=cells)


def _null_strings(n: int) -> pa.Array:
    import pyarrow as pa

    return pa.nulls(n, pa.string())
