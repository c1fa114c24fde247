"""Reading a whole CSV at once (profile, draft): one parse outside Python's lock while another thread
scans the bytes, or None for anything unusual, which then takes the streaming reader of
:mod:`studylog.data.read` (and its errors, the same as a check's)."""

from __future__ import annotations

import codecs
from pathlib import Path
from typing import TYPE_CHECKING, Any

from studylog.data.read import QUOTE, Source, Watch, csv_options, WatchedFile
from studylog.errors import StudylogError

if TYPE_CHECKING:
    import pyarrow as pa

SCAN_BLOCK = 1 << 23
SCAN_PIECE = 1 << 20
# Blocks of the whole-file read: the parser's memory stays small beside the table.
WHOLE_BLOCK = 1 << 20


def csv_whole(source: Source, watch: Watch | None = None) -> pa.Table | None:
    """The whole CSV in one read, header row first, or None when the read meets anything unusual.

    A caller that needs every row at once (profile, draft) holds the whole table anyway, so the
    parser's blocks are kept as they come instead of being joined into batches. Any error, a NUL byte
    or an odd number of quotes sends the caller back to the streaming reader, which reads the file
    again and reports exactly what a check would (with the line).

    Without a progress callback pyarrow reads the file itself, outside Python, while another thread
    looks for NUL bytes and counts quotes: the read then never waits for Python's lock, and other
    threads of the caller work meanwhile. One parsing thread: a multithreaded parse of a file on two
    cores saved little time for half as much CPU again, which the caller's other threads lacked.
    ``watch``: see ``read_table`` (the caller is told of a read given up).
    """
    import pyarrow as pa

    width = len(source.columns)
    watch_nul = not source.encoding.startswith(("utf-16", "utf-32"))
    if source.progress is not None:
        handle = WatchedFile(source.path, source.size, source.progress, watch_nul=watch_nul)
        with handle:
            table = read_whole(handle, csv_options(source, width, WHOLE_BLOCK, threads=False))
        nul_at, quotes, valid = handle.nul_at, handle.quotes, True
    else:
        from concurrent.futures import ThreadPoolExecutor

        # UTF-8 text is validated by the scan (on another core) instead of cell by cell by the parser,
        # a fifth of its time; any invalid byte sends the file to the streaming reader
        utf8 = source.encoding == "utf-8"
        options = csv_options(source, width, WHOLE_BLOCK, threads=False, check_utf8=not utf8)
        with ThreadPoolExecutor(max_workers=1, thread_name_prefix="studylog-scan") as pool:
            scanned = pool.submit(scan_bytes, source.path, watch_nul, utf8)
            try:
                with pa.OSFile(str(source.path)) as native:
                    table = read_whole(native, options, watch)
            except OSError:
                table = None
            try:
                nul_at, quotes, valid = scanned.result()
            except OSError:
                return None
    if table is None or nul_at is not None or quotes % 2 or not valid or table.num_columns != width:
        return None
    return table


def read_whole(handle: Any, options: dict[str, Any], watch: Watch | None = None) -> pa.Table | None:
    import pyarrow as pa
    import pyarrow.csv as pacsv

    try:
        if watch is None:
            return pacsv.read_csv(handle, **options)
        # the same parse a batch at a time (as fast), so that the watcher can work on each batch
        # while the next is parsed
        reader = pacsv.open_csv(handle, **options)
        batches = []
        for batch in reader:
            watch(batch.slice(1) if not batches else batch)  # the header row is no data
            batches.append(batch)
        return pa.Table.from_batches(batches, schema=reader.schema)
    except StudylogError:
        raise
    except (pa.ArrowException, UnicodeError, OSError, ValueError, LookupError):
        return None


def scan_bytes(path: Path, watch_nul: bool, check_utf8: bool = False) -> tuple[int | None, int, bool]:
    """The offset of the first NUL byte (None without one, or when not watched) and the number of
    quote characters, as ``WatchedFile`` finds them, and whether the bytes are valid UTF-8 (True
    when not checked). A file is valid UTF-8 exactly when each of its cells is: the cells are cut
    at ASCII bytes, which no multi-byte character holds."""
    import numpy as np

    done = quotes = 0
    nul_at: int | None = None
    decoder = codecs.getincrementaldecoder("utf-8")()
    pending = False  # the decoder holds the start of a character cut by the end of a block
    valid = True
    # one buffer read into again and again; each block looked at in pieces that stay in the cache,
    # and a NUL byte or a non-ASCII one looked for by the block's least and largest byte
    buffer = bytearray(SCAN_BLOCK)
    array = np.frombuffer(buffer, dtype=np.uint8)
    with open(path, "rb", buffering=0) as handle:
        while got := handle.readinto(buffer):
            block = array[:got]
            for start in range(0, got, SCAN_PIECE):
                quotes += int(np.count_nonzero(block[start:start + SCAN_PIECE] == QUOTE))
            if watch_nul and nul_at is None and int(block.min()) == 0:
                nul_at = done + buffer.find(b"\x00", 0, got)
            if check_utf8 and valid and (pending or int(block.max()) >= 0x80):
                try:
                    decoder.decode(memoryview(buffer)[:got])
                except UnicodeDecodeError:
                    valid = False
                pending = bool(decoder.getstate()[0])
            done += got
    if check_utf8 and valid and pending:
        valid = False  # the file ends inside a character
    return nul_at, quotes, valid
