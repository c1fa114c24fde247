"""The code state a decision rests on: the git commit of the work tree and whether it had uncommitted changes.

Captured when the current folder, or else the store's folder, lies in a git work tree. Fast on purpose:
a walk up the folders for ``.git`` decides whether git is worth asking at all (no subprocess outside a
repository), and one ``git status --porcelain=v2 --branch -z`` call gives both the commit (its
``# branch.oid`` header) and the changed paths. The store's own files (``studylog.db``, its ``-wal``/``-shm``
and backup copies) are not counted as changes: every command writes them.
"""

from __future__ import annotations

import os
import subprocess
from dataclasses import dataclass
from pathlib import Path

GIT_TIMEOUT_S = 3.0


@dataclass(frozen=True)
class CodeState:
    """The commit checked out (None before the first commit) and whether tracked or new files differ."""

    commit: str | None
    dirty: bool
    root: str


def _inside_work_tree(folder: Path) -> bool:
    # GIT_DIR points git elsewhere; then only git itself can tell
    if os.environ.get("GIT_DIR"):
        return True
    for candidate in (folder, *folder.parents):
        if (candidate / ".git").exists():
            return True
    return False


def _parse(output: str, ignore_prefix: str | None) -> tuple[str | None, bool]:
    """The commit and dirtiness from ``git status --porcelain=v2 --branch -z`` output."""
    commit: str | None = None
    dirty = False
    fields = output.split("\0")
    index = 0
    while index < len(fields):
        entry = fields[index]
        index += 1
        if not entry:
            continue
        if entry.startswith("# branch.oid "):
            oid = entry[len("# branch.oid "):].strip()
            commit = None if oid == "(initial)" else oid
            continue
        if entry.startswith("#"):
            continue
        kind = entry[0]
        # the path is the last field; renames ("2 ...") are followed by their original path
        if kind == "1":
            path = entry.split(" ", 8)[-1]
        elif kind == "2":
            path = entry.split(" ", 9)[-1]
            index += 1
        elif kind == "u":
            path = entry.split(" ", 10)[-1]
        elif kind in "?!":
            path = entry[2:]
        else:
            path = entry
        if kind == "!":
            continue
        if ignore_prefix and Path(path).name.startswith(ignore_prefix):
            continue
        dirty = True
    return commit, dirty


def _ask_git(folder: Path, ignore_prefix: str | None) -> CodeState | None:
    try:
        done = subprocess.run(
            ["git", "-C", str(folder), "status", "--porcelain=v2", "--branch", "-z",
             "--untracked-files=normal", "--ignore-submodules=dirty"],
            capture_output=True, text=True, timeout=GIT_TIMEOUT_S, check=False,
            env={**os.environ, "GIT_OPTIONAL_LOCKS": "0", "LC_ALL": "C"},
        )
    except (OSError, subprocess.SubprocessError):
        return None
    if done.returncode != 0:
        return None
    commit, dirty = _parse(done.stdout, ignore_prefix)
    return CodeState(commit=commit, dirty=dirty, root=str(folder))


def capture(store_path: Path | None = None, cwd: Path | None = None) -> CodeState | None:
    """The code state of the current folder's work tree, else the store folder's; None outside git."""
    here = (cwd or Path.cwd()).resolve()
    ignore = store_path.name if store_path is not None else "studylog.db"
    folders = [here]
    if store_path is not None:
        store_folder = store_path.resolve().parent
        if store_folder != here:
            folders.append(store_folder)
    for folder in folders:
        if _inside_work_tree(folder):
            state = _ask_git(folder, ignore)
            if state is not None:
                return state
    return None
