"""Crash safety: a command killed with SIGKILL at any moment leaves a healthy store holding all of its
writes or none of them.

Each command is first run to the end once (its duration D, the peak size of its write-ahead log, and the
store it leaves: "all"); then it is started again from the same store and killed, three times after a
random delay in [0.15 D, 1.05 D] (while it starts, reads its input, computes, writes, or just after it
finished), and twice while it writes: as soon as its log holds a first frame, and when the log reaches
half of its peak. Afterwards ``studylog doctor`` must pass and
the number of records in every table must equal either the store before ("none") or the store after the
complete run ("all"). The kill points tried and the outcomes are printed (``pytest -s``).
"""

from __future__ import annotations

import csv
import io
import random
import signal
import sqlite3
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

from studylog import questions
from studylog.store import schema
from studylog.store.models import Base
from studylog.store.session import StoreLocation, create_store, dispose_engines, transaction

RANDOM_POINTS = 3
WRITE_POINTS = 2


def _let_go() -> None:
    dispose_engines()
    schema.forget_checked()


def _counts(store: Path) -> dict[str, int]:
    with sqlite3.connect(store) as raw:
        return {t.name: raw.execute(f'SELECT count(*) FROM "{t.name}"').fetchone()[0]
                for t in Base.metadata.sorted_tables}


def _reset(store: Path, pristine: bytes) -> None:
    for suffix in ("-wal", "-shm"):
        Path(f"{store}{suffix}").unlink(missing_ok=True)
    store.write_bytes(pristine)


def _command(*args: str) -> list[str]:
    return [sys.executable, "-m", "studylog", *args]


@dataclass
class Outcome:
    command: str
    duration: float = 0.0
    tried: int = 0
    killed: int = 0
    killed_after_writing_began: int = 0
    none: int = 0
    all: int = 0
    delays: list[dict] = field(default_factory=list)

    def line(self) -> str:
        return (f"{self.command}: run {self.duration:.2f} s; {self.tried} kill points, {self.killed} killed "
                f"while running ({self.killed_after_writing_began} after the log file had grown); "
                f"outcomes: {self.none} none, {self.all} all")


def _run_and_kill(args: list[str], wal: Path, *, delay: float | None = None,
                  wal_bytes: int | None = None) -> tuple[bool, int]:
    """Run the command; SIGKILL it after ``delay`` seconds or once its log holds ``wal_bytes``.

    Returns whether it was killed while running, and the size of the write-ahead log at that moment
    (its peak when it was not killed).
    """
    child = subprocess.Popen(_command(*args), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = None if delay is None else time.monotonic() + delay
    peak = 0
    while child.poll() is None:
        try:
            size = wal.stat().st_size
        except FileNotFoundError:
            size = 0
        peak = max(peak, size)
        if (deadline is not None and time.monotonic() >= deadline) or (
                wal_bytes is not None and size >= wal_bytes):
            child.send_signal(signal.SIGKILL)
            child.wait(timeout=60)
            return True, size
        time.sleep(0.001)
    return False, peak


def kill_at_random_points(  # type: ignore[no-untyped-def]
    cli, store: Path, args: list[str], name: str, seed: int, *,
    doctor_args: tuple[str, ...] = (), cleanup=lambda: None,
) -> tuple[Outcome, dict[str, int], dict[str, int]]:
    """Run ``args`` once to the end, then kill it at RANDOM_POINTS random moments and at WRITE_POINTS
    moments while it writes its log (the first frame, half of its peak); check each outcome."""
    _let_go()
    pristine = store.read_bytes()
    wal = Path(f"{store}-wal")
    assert not wal.exists() or wal.stat().st_size == 0
    before = _counts(store)
    outcome = Outcome(name)

    began = time.monotonic()
    killed, peak = _run_and_kill(args, wal)
    outcome.duration = time.monotonic() - began
    assert not killed
    after = _counts(store)
    assert after != before  # the command wrote, so "all" and "none" differ
    assert cli(*doctor_args, "doctor").exit_code == 0
    _let_go()

    rng = random.Random(seed)
    triggers: list[dict[str, float | int]] = [
        {"delay": round(rng.uniform(0.15, 1.05) * outcome.duration, 3)} for _ in range(RANDOM_POINTS)]
    triggers += [{"wal_bytes": 1}, {"wal_bytes": max(1, peak // 2)}][:WRITE_POINTS]
    for trigger in triggers:
        _reset(store, pristine)
        cleanup()
        outcome.tried += 1
        killed, size = _run_and_kill(args, wal, **trigger)  # type: ignore[arg-type]
        outcome.delays.append(trigger)
        if killed:
            outcome.killed += 1
            outcome.killed_after_writing_began += size > 0
        doctor = cli(*doctor_args, "doctor", "--json")
        _let_go()
        assert doctor.exit_code == 0, doctor.stdout
        found = _counts(store)
        assert found in (before, after), (trigger, found)
        if found == before:
            outcome.none += 1
        else:
            outcome.all += 1
    assert outcome.killed >= 1  # at least one kill landed while the command was running
    print(f"\n{outcome.line()}; log peak {peak} bytes; triggers {outcome.delays}")
    return outcome, before, after


def test_a_large_var_import_killed_at_random_points(cli, study: Path, tmp_path: Path) -> None:
    assert cli("table", "add", "visits", "--key", "visit_id").exit_code == 0
    rows = ["name,type,label,description,levels"] + [
        f"v{i:04d},categorical,Answer {i},Question {i} of the intake form,\"1=yes,2=no,9=unsure\""
        for i in range(400)
    ]
    source = tmp_path / "dictionary.csv"
    source.write_text("\n".join(rows) + "\n")
    _, before, after = kill_at_random_points(cli, study, ["var", "import", str(source)], "var import", 11)
    assert after["variables"] - before["variables"] == 400


def test_a_check_recording_thousands_of_findings_killed_at_random_points(
    cli, study: Path, tmp_path: Path
) -> None:
    assert cli("table", "add", "visits").exit_code == 0
    assert cli("var", "add", "visit_id", "--type", "identifier", "--required").exit_code == 0
    columns = [f"c{i}" for i in range(1200)]  # not in the dictionary: one finding each
    body = "\n".join(",".join(str((r * 7 + i) % 13) for i in range(len(columns))) for r in range(20))
    source = tmp_path / "drop.csv"
    source.write_text(",".join(columns) + "\n" + body + "\n")
    _, before, after = kill_at_random_points(
        cli, study, ["check", str(source), "--fail-on", "never"], "check", 12)
    assert after["findings"] - before["findings"] >= 1200
    assert after["drops"] - before["drops"] == 1


def _packet_with_answers(cli, study: Path, tmp_path: Path, count: int) -> Path:  # type: ignore[no-untyped-def]
    location = StoreLocation(f"sqlite:///{study}", study)
    with transaction(location, write=True) as session:
        for i in range(count):
            questions.ask(session, f"Question {i}: is code -9{i % 10} a refusal?", to="data owner")
    exported = cli("questions", "export", "--format", "csv")
    assert exported.exit_code == 0
    reader = csv.DictReader(io.StringIO(exported.stdout))
    rows = list(reader)
    assert len(rows) == count
    for row in rows:
        row["answer"] = f"Yes, -9x in question {row['id']} is a refusal (field manual, p. 12)"
    packet = tmp_path / "answers.csv"
    with packet.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.DictWriter(handle, fieldnames=reader.fieldnames or [])
        writer.writeheader()
        writer.writerows(rows)
    return packet


def test_a_questions_import_killed_at_random_points(cli, study: Path, tmp_path: Path) -> None:
    packet = _packet_with_answers(cli, study, tmp_path, 600)
    _, before, after = kill_at_random_points(
        cli, study, ["questions", "import", str(packet)], "questions import", 13)
    assert after["changes"] - before["changes"] >= 2 * 600  # each answer: its text and its status


def _healthy_records(store: Path, count: int) -> None:
    """Questions and variables written through their own operations (so with a history that replays)."""
    from studylog import dictionary

    location = StoreLocation(f"sqlite:///{store}", store)
    with transaction(location, write=True) as session:
        dictionary.add_table(session, "visits")
        for i in range(count):
            questions.ask(session, f"Question {i}: what does code -9{i % 10} mean?", to="field team")
            dictionary.add_variable(session, f"v{i:04d}", {"type": "integer", "label": f"Item {i}"})
    _let_go()


def test_a_load_killed_at_random_points(cli, study: Path, tmp_path: Path) -> None:
    _healthy_records(study, 300)
    assert cli("dump", str(tmp_path / "d")).exit_code == 0
    target = tmp_path / "copy" / "studylog.db"
    target.parent.mkdir()
    create_store(StoreLocation(f"sqlite:///{target}", target))  # an empty store, as load makes one
    _let_go()
    _, before, after = kill_at_random_points(
        cli, target, ["--store", str(target), "load", str(tmp_path / "d")], "load", 14,
        doctor_args=("--store", str(target)))
    assert after["variables"] == 300 and before["variables"] == 0


def test_a_restore_killed_at_random_points(cli, study: Path, tmp_path: Path) -> None:
    saved = tmp_path / "saved.db"
    assert cli("backup", str(saved)).exit_code == 0
    _healthy_records(study, 300)
    _, before, after = kill_at_random_points(
        cli, study, ["restore", str(saved), "--force"], "restore", 15,
        cleanup=lambda: [old.unlink() for old in study.parent.glob("*.replaced-*")])
    assert before["questions"] == 300 and after["questions"] == 0
