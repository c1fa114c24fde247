"""Several processes on one store at once: no write lost, no lock error reaching the user, ids unique.

Figures of one run are printed (``pytest -s``): how many writes ran concurrently and how many reads the
reader made meanwhile.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from collections import Counter
from pathlib import Path

WORKERS = Path(__file__).with_name("workers.py")
WRITERS = 4
SECONDS = 3.0


def _studylog(*args: str, env: dict[str, str] | None = None, timeout: float = 60):  # type: ignore[no-untyped-def]
    return subprocess.run([sys.executable, "-m", "studylog", *args], capture_output=True, text=True,
                          env=env or dict(os.environ), timeout=timeout)


def test_four_writers_and_a_reader_lose_nothing(study: Path, tmp_path: Path) -> None:
    assert _studylog("table", "add", "visits", "--key", "visit_id").returncode == 0
    names = [f"w{n}" for n in range(WRITERS)]
    children = [subprocess.Popen([sys.executable, str(WORKERS), "writer", str(tmp_path), str(SECONDS), name])
                for name in names]
    children.append(subprocess.Popen([sys.executable, str(WORKERS), "reader", str(tmp_path), str(SECONDS)]))
    deadline = time.monotonic() + 60
    while not all((tmp_path / f"{name}.ready").exists() for name in [*names, "reader"]):
        assert time.monotonic() < deadline and all(c.poll() is None for c in children)
        time.sleep(0.02)
    (tmp_path / "go").touch()  # all warmed up: every child begins now
    for child in children:
        assert child.wait(timeout=60) == 0
    writes = [w for name in names for w in json.loads((tmp_path / f"{name}.json").read_text())["writes"]]
    reads = json.loads((tmp_path / "reader.json").read_text())["reads"]

    # every command succeeded; a busy store made them wait, never fail
    failed = [w for w in writes if w["code"] != 0] + [r for r in reads if r["code"] != 0]
    assert failed == []
    assert not any("locked" in w["stderr"].lower() for w in writes + reads)
    kinds = Counter(w["kind"] for w in writes)
    assert min(kinds.values()) >= WRITERS  # each kind was written by every writer at least once

    # every id handed out is unique within its kind
    for kind in kinds:
        ids = [w["id"] for w in writes if w["kind"] == kind]
        assert len(ids) == len(set(ids)), kind

    # nothing lost: the store holds exactly the records the writers were told were written
    decisions = json.loads(_studylog("decisions", "--json").stdout)["decisions"]
    questions = json.loads(_studylog("questions", "--status", "all", "--json").stdout)["questions"]
    variables = json.loads(_studylog("var", "list", "--json").stdout)
    by_id = {d["id"]: d["text"] for d in decisions}
    assert by_id == {w["id"]: f"decision {w['key']}: drop rows with a missing outcome"
                     for w in writes if w["kind"] == "decision"}
    assert {q["id"]: q["text"] for q in questions} == {
        w["id"]: f"question {w['key']}: is -99 a refusal?" for w in writes if w["kind"] == "question"}
    assert {v["name"] for v in variables} == {w["key"] for w in writes if w["kind"] == "variable"}

    # the reader read all along and never saw the timeline shrink
    counts = [r["events"] for r in reads]
    assert len(counts) >= 5 and counts == sorted(counts)
    assert _studylog("doctor").returncode == 0
    print(f"\n{len(writes)} writes by {WRITERS} processes in {SECONDS} s "
          f"({dict(kinds)}), {len(reads)} timeline reads meanwhile, 0 lost")


_HOLDER = """
import sqlite3, sys, time
connection = sqlite3.connect(sys.argv[1], isolation_level=None)
connection.execute("BEGIN IMMEDIATE")
connection.execute("INSERT INTO studylog_meta (key, value) VALUES ('holder', 'x')")
print("holding", flush=True)
time.sleep(float(sys.argv[2]))
connection.execute("ROLLBACK")
"""


def test_a_store_locked_past_the_timeout_gives_exit_3_and_says_so(study: Path) -> None:
    holder = subprocess.Popen([sys.executable, "-c", _HOLDER, str(study), "20"],
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout is not None and holder.stdout.readline().strip() == "holding"
        env = dict(os.environ, STUDYLOG_BUSY_TIMEOUT_MS="300")
        began = time.monotonic()
        result = _studylog("log", "a decision that has to wait", env=env)
        waited = time.monotonic() - began
        assert result.returncode == 3
        assert result.stderr.startswith("error: the store is locked by another process")
        assert "0.3 s" in result.stderr and result.stderr.count("\n") == 1
        assert "Traceback" not in result.stderr and result.stdout == ""
        assert waited < 10  # it gave up after the lowered timeout, not the default 10 s
        # readers are not blocked by a writer under the write-ahead log
        assert _studylog("decisions", "--json", env=env).returncode == 0
    finally:
        holder.kill()
        holder.wait()
    # once the other process is gone the same command goes through, and nothing of the holder stayed
    assert _studylog("log", "a decision that has to wait").returncode == 0
    assert _studylog("doctor").returncode == 0
    assert len(json.loads(_studylog("decisions", "--json").stdout)["decisions"]) == 1
