"""A full disk and a read-only store: exit 3 with a clear message, and the store intact afterwards.

Where the tests may mount filesystems (root with mount rights, as in our development containers), the
store sits on a small tmpfs that is really filled up or remounted read-only. Elsewhere the same tests
run on an equivalent simulation: a full disk as a file-size limit (RLIMIT_FSIZE) on the command's
process, so that no file of the store can grow; a read-only store as a read-only file and folder
(``chmod``), or for root, who ignores permissions, an immutable file (``chattr +i``). ``Disk.how``
says which was used.
"""

from __future__ import annotations

import json
import os
import resource
import shutil
import signal
import subprocess
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest

from studylog.store import schema
from studylog.store.session import dispose_engines

SIZE_KB = 4096


def _run(args: list[str], cwd: Path | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run(args, capture_output=True, text=True, cwd=cwd, check=False)


class Disk:
    """A folder for a store, which can be filled up or made read-only, and put back."""

    def __init__(self, root: Path) -> None:
        self.root = root
        self.mounted = False
        self.how = ""
        self.limit: int | None = None
        self.readonly_by: str | None = None
        self.cli = None  # the in-process command line, for setting up and reading back

    # -- full ----------------------------------------------------------------------------------------
    def fill(self, leave_bytes: int = 0) -> None:
        if self.mounted:
            self.how = "a full tmpfs"
            with (self.root / "filler").open("wb", buffering=0) as handle:
                try:
                    while handle.write(b"\0" * 4096):
                        pass
                except OSError:  # no space left on the device: full
                    pass
            if leave_bytes:
                filler = self.root / "filler"
                os.truncate(filler, max(0, filler.stat().st_size - leave_bytes))
        else:
            # no file may grow past leave_bytes: the write-ahead log (and its 32 KiB shared-memory
            # index) cannot take more than a full disk would leave
            self.how = "a file-size limit (RLIMIT_FSIZE) on the command"
            self.limit = leave_bytes

    def free(self) -> None:
        (self.root / "filler").unlink(missing_ok=True)
        self.limit = None

    # -- read-only -----------------------------------------------------------------------------------
    def make_readonly(self) -> None:
        if self.mounted:
            assert _run(["mount", "-o", "remount,ro", str(self.root)]).returncode == 0
            self.how, self.readonly_by = "a tmpfs remounted read-only", "mount"
        elif os.geteuid() != 0:
            for path in self.root.iterdir():
                path.chmod(0o444)
            self.root.chmod(0o555)
            self.how, self.readonly_by = "a read-only file and folder (chmod)", "chmod"
        else:
            assert _run(["chattr", "+i", str(self.root / "studylog.db")]).returncode == 0
            self.how, self.readonly_by = "an immutable file (chattr +i)", "chattr"

    def make_writable(self) -> None:
        if self.readonly_by == "mount":
            assert _run(["mount", "-o", "remount,rw", str(self.root)]).returncode == 0
        elif self.readonly_by == "chmod":
            self.root.chmod(0o755)
            for path in self.root.iterdir():
                path.chmod(0o644)
        elif self.readonly_by == "chattr":
            _run(["chattr", "-i", str(self.root / "studylog.db")])
        self.readonly_by = None

    # -- running studylog on it ----------------------------------------------------------------------
    def studylog(self, *args: str) -> subprocess.CompletedProcess[str]:
        limit = self.limit

        def limited() -> None:
            if limit is not None:
                signal.signal(signal.SIGXFSZ, signal.SIG_IGN)  # a write past the limit fails instead
                resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))

        return subprocess.run([sys.executable, "-m", "studylog", *args], capture_output=True, text=True,
                              env=dict(os.environ), preexec_fn=limited, timeout=120, check=False)


@contextmanager
def small_disk(where: Path) -> Iterator[Disk]:
    where.mkdir()
    disk = Disk(where)
    # STUDYLOG_TEST_SIMULATE_DISK=1 runs the simulation even where mounting works (to test it)
    disk.mounted = not os.environ.get("STUDYLOG_TEST_SIMULATE_DISK") and _run(
        ["mount", "-t", "tmpfs", "-o", f"size={SIZE_KB}k", "tmpfs", str(where)]).returncode == 0
    try:
        yield disk
    finally:
        disk.make_writable()
        if disk.mounted:
            _run(["umount", str(where)])


def _let_go() -> None:
    """Close this process's connections, so that only the command under test touches the store."""
    dispose_engines()
    schema.forget_checked()


@pytest.fixture
def disk(tmp_path: Path, monkeypatch: pytest.MonkeyPatch, cli) -> Iterator[Disk]:  # type: ignore[no-untyped-def]
    with small_disk(tmp_path / "disk") as found:
        monkeypatch.setenv("STUDYLOG_STORE", str(found.root / "studylog.db"))
        for args in (["init", "--title", "On a small disk"], ["table", "add", "visits", "--key", "visit_id"],
                     ["var", "add", "visit_id", "--type", "identifier"],
                     ["log", "first decision", "--kind", "missing"]):
            assert cli(*args).exit_code == 0
        _let_go()
        found.cli = cli
        yield found
        _let_go()


def _dump(disk: Disk, where: Path) -> dict[str, bytes]:
    result = disk.cli("dump", str(where))
    _let_go()
    assert result.exit_code == 0, result.stderr
    files = {p.name: p.read_bytes() for p in sorted(where.iterdir())}
    shutil.rmtree(where)
    return files


def _import_file(tmp_path: Path, rows: int) -> Path:
    lines = ["name,type,label,description"] + [
        f"v{i:05d},number,Measurement {i},{'a long description of the measurement ' * 6}" for i in range(rows)
    ]
    path = tmp_path / "dictionary.csv"
    path.write_text("\n".join(lines) + "\n")
    return path


def _one_clear_line(result: subprocess.CompletedProcess[str], *words: str) -> None:
    assert result.returncode == 3, (result.returncode, result.stderr)
    assert result.stderr.startswith("error: ") and result.stderr.count("\n") == 1, result.stderr
    assert "Traceback" not in result.stderr and result.stdout == ""
    assert any(word in result.stderr for word in words), result.stderr


def test_a_full_disk_gives_exit_3_and_leaves_the_store_intact(disk: Disk, tmp_path: Path) -> None:
    before = _dump(disk, tmp_path / "before")
    disk.fill()
    _one_clear_line(disk.studylog("log", "x" * 60_000), "disk", "full")
    _one_clear_line(disk.studylog("var", "import", str(_import_file(tmp_path, 500))), "disk", "full")
    # the doctor can still look at the store while the disk is full
    assert disk.studylog("doctor").returncode == 0, disk.how
    disk.free()
    assert disk.studylog("doctor").returncode == 0
    assert _dump(disk, tmp_path / "after") == before
    print(f"\nfull disk simulated by {disk.how}")


def test_a_disk_that_fills_during_a_large_import_writes_none_of_it(disk: Disk, tmp_path: Path) -> None:
    before = _dump(disk, tmp_path / "before")
    source = _import_file(tmp_path, 600)
    disk.fill(leave_bytes=96 * 1024)  # room to begin, not to finish
    _one_clear_line(disk.studylog("var", "import", str(source)), "disk", "full")
    disk.free()
    assert disk.studylog("doctor").returncode == 0
    assert _dump(disk, tmp_path / "after") == before
    # with room again the same import goes through whole
    result = disk.studylog("var", "import", str(source), "--json")
    assert result.returncode == 0, result.stderr
    assert json.loads(result.stdout)["added"] == 600


def test_a_read_only_store_gives_exit_3_and_stays_intact(disk: Disk, tmp_path: Path) -> None:
    before = _dump(disk, tmp_path / "before")
    disk.make_readonly()
    _one_clear_line(disk.studylog("log", "a decision that cannot be written"),
                    "read-only", "cannot be opened")
    _one_clear_line(disk.studylog("var", "add", "age", "--type", "integer"), "read-only", "cannot be opened")
    assert disk.studylog("doctor").returncode == 0, disk.how
    disk.make_writable()
    assert disk.studylog("doctor").returncode == 0
    assert _dump(disk, tmp_path / "after") == before
    print(f"\nread-only store simulated by {disk.how}")
