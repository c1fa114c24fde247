"""Time and store growth of a record-by-record comparison of two 10,000,000-row drops.

Two drops of a keyed table (a key and five value columns, all text as the reader gives them) are
generated batch by batch (seeded): the later drop loses 0.5% of the earlier records, gains 0.5% new
ones and changes one value in 1% of the rest. Each drop goes through ``RecordDigester`` as in the
check's pass, its digests are stored in a real studylog store (``digest_chunks``), and the later drop is
compared with the earlier one loaded back from the store, as ``studylog check`` does. Reported: the
time to digest each drop, the growth of the store file per drop, the time to load the earlier digests
and compare, the counts found (against the planted ones), and the peak resident memory.

    python benchmarks/records.py [--rows 10000000] [--batch 65536] [--keep DIR]
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path

SEED = 20260402
VANISH, NEW, CHANGE = 0.005, 0.005, 0.01
PLANTED = {"new": 0, "vanished": 0, "changed": 0}


def batches(rows: int, batch: int, later: bool):  # type: ignore[no-untyped-def]
    """Batches of the earlier or later drop: keys K000000001.., five value columns."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    for start in range(0, rows, batch):
        ids = np.arange(start, min(start + batch, rows), dtype=np.int64)
        rng = np.random.default_rng([SEED, start])
        values = {
            "age": rng.integers(18, 90, len(ids)),
            "minutes": np.round(rng.gamma(2.0, 15.0, len(ids)), 2),
            "site": rng.integers(0, 40, len(ids)),
            "score": rng.integers(0, 1000, len(ids)),
            "plan": rng.integers(0, 3, len(ids)),
        }
        if later:
            marks = np.random.default_rng([SEED, start, 1]).random(len(ids))
            keep = marks >= VANISH
            changed = (marks >= VANISH) & (marks < VANISH + CHANGE)
            values["score"] = np.where(changed, values["score"] + 1000, values["score"])
            new_count = int(round(len(ids) * NEW))
            PLANTED["vanished"] += int((~keep).sum())
            PLANTED["changed"] += int(changed.sum())
            PLANTED["new"] += new_count
            ids = np.concatenate([ids[keep], rows + start + np.arange(new_count)])
            values = {k: np.concatenate([v[keep], v[:new_count]]) for k, v in values.items()}
        columns = {"member_id": pc.binary_join_element_wise(
            "K", pc.utf8_lpad(pa.array(ids).cast(pa.string()), 10, "0"), "")}
        columns.update({k: pa.array(v).cast(pa.string()) for k, v in values.items()})
        yield pa.RecordBatch.from_pydict(columns)


def digest(rows: int, batch: int, later: bool):  # type: ignore[no-untyped-def]
    from studylog.data.digests import RecordDigester

    digester = RecordDigester(["member_id"], ["member_id", "age", "minutes", "site", "score", "plan"])
    for part in batches(rows, batch, later):
        digester.update(part)
    return digester.finish()


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--batch", type=int, default=65_536)
    parser.add_argument("--keep", help="Keep the store in this folder.")
    args = parser.parse_args()

    from studylog.clock import now
    from studylog.comparison import load_records
    from studylog.data.record_comparison import compare_records
    from studylog.store.models import DataTable, DigestChunk, Drop
    from studylog.store.session import dispose_engines, locate, transaction
    from studylog.study import create

    folder = Path(args.keep or tempfile.mkdtemp(prefix="studylog-records-"))
    folder.mkdir(parents=True, exist_ok=True)
    store = folder / "studylog.db"
    location = locate(str(store)) if store.exists() else None
    if location is None:
        from studylog.store.session import location_for_new

        location = location_for_new(str(folder))
        create(location, title="records benchmark")
    with transaction(location, write=True) as session:
        table = DataTable(name=f"members{int(time.time())}", key=["member_id"], created_at=now(),
                          updated_at=now(), author="benchmark")
        session.add(table)
        session.flush()
        table_id = table.id

    def stored(records, label: str) -> tuple[int, float, float]:  # type: ignore[no-untyped-def]
        before = store.stat().st_size
        started = time.perf_counter()
        with transaction(location, write=True) as session:
            drop = Drop(table_id=table_id, label=label, file_name=f"{label}.csv", sha256="0" * 64, size=0,
                        rows=records.rows, columns=6, columns_seen=[], comparison={}, checked_at=now(),
                        author="benchmark")
            session.add(drop)
            session.flush()
            for kind, seq, data in records.to_chunks():
                session.add(DigestChunk(drop_id=drop.id, seq=seq, kind=kind, data=data))
            drop_id = drop.id
        dispose_engines()
        return drop_id, (store.stat().st_size - before) / 1e6, time.perf_counter() - started

    print(f"rows per drop: {args.rows:,}; batch rows: {args.batch:,}")
    started = time.perf_counter()
    earlier = digest(args.rows, args.batch, later=False)
    print(f"earlier drop: digested in {time.perf_counter() - started:.1f} s "
          f"({earlier.digests.nbytes / 1e6:.0f} MB of digests; per-cell digests kept: "
          f"{earlier.cells is not None})")
    earlier_id, growth, seconds = stored(earlier, "earlier")
    print(f"earlier drop: stored in {seconds:.1f} s; store grew by {growth:.0f} MB "
          f"({growth * 1e6 / args.rows:.1f} bytes a record)")
    del earlier
    started = time.perf_counter()
    later = digest(args.rows, args.batch, later=True)
    print(f"later drop: {later.rows:,} rows digested in {time.perf_counter() - started:.1f} s")
    started = time.perf_counter()
    with transaction(location, write=False) as session:
        loaded = load_records(session, earlier_id)
    loading = time.perf_counter() - started
    started = time.perf_counter()
    result = compare_records(loaded, later)
    examples = result.examples(loaded, later)
    comparing = time.perf_counter() - started
    print(f"comparison: earlier digests loaded from the store in {loading:.1f} s, compared in "
          f"{comparing:.1f} s (one pass: sort + binary search, with examples)")
    print(f"found: new {result.new:,}, vanished {result.vanished:,}, changed {result.changed:,}, "
          f"unchanged {result.unchanged:,}")
    print(f"planted: new {PLANTED['new']:,}, vanished {PLANTED['vanished']:,}, "
          f"changed {PLANTED['changed']:,}")
    print(f"examples: new {examples['new_examples'][0]}, vanished {examples['vanished_examples'][0]}, "
          f"changed {examples['changed_examples'][0]}")
    _, growth, seconds = stored(later, "later")
    print(f"later drop: stored in {seconds:.1f} s; store grew by {growth:.0f} MB")
    print(f"store file: {store.stat().st_size / 1e6:.0f} MB; peak resident memory: {peak_mb():.0f} MB")
    if not args.keep:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "src"))
    os.environ.setdefault("STUDYLOG_AUTHOR", "benchmark")
    main()
