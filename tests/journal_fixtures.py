"""Helpers for the journal, question and threat tests: a unit of work on the test store, dictionary entries,
a checked drop with stored profiles written straight through the models, and a throwaway git repository."""

from __future__ import annotations

import os
import subprocess
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from sqlalchemy.orm import Session

from studylog import dictionary
from studylog.clock import now
from studylog.store.models import Drop, Finding, Profile
from studylog.store.session import locate, transaction


@contextmanager
def tx() -> Iterator[Session]:
    with transaction(locate(), write=True) as session:
        yield session


def add_var(name: str, table: str | None = None, **fields: Any) -> int:
    fields.setdefault("type", "integer")
    with tx() as session:
        return dictionary.add_variable(session, name, fields, table=table).id


def add_drop(profiles: dict[str, dict[str, Any]], *, table: str | None = None, rows: int = 100,
             label: str | None = None, findings: list[dict[str, Any]] | None = None) -> int:
    """A checked drop of ``table`` with a stored profile per variable (the shape the check writes)."""
    with tx() as session:
        owner = dictionary.resolve_table(session, table)
        drop = Drop(table_id=owner.id, label=label, file_name=f"{label or 'drop'}.csv", sha256="0" * 64,
                    size=1000, rows=rows, columns=len(profiles), columns_seen=list(profiles),
                    checked_at=now(), author="checker")
        session.add(drop)
        session.flush()
        for name, data in profiles.items():
            session.add(Profile(drop_id=drop.id, variable=name, data={"name": name, "rows": rows, **data}))
        for finding in findings or []:
            session.add(Finding(drop_id=drop.id, **finding))
        return drop.id


def git(repo: Path, *args: str) -> str:
    env = {**os.environ, "GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.org",
           "GIT_COMMITTER_NAME": "t", "GIT_COMMITTER_EMAIL": "t@example.org"}
    done = subprocess.run(["git", "-C", str(repo), *args], capture_output=True, text=True, env=env, check=True)
    return done.stdout.strip()


def make_repo(folder: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    git(folder, "init", "-q")
    (folder / "clean.py").write_text("print('clean')\n")
    git(folder, "add", "clean.py")
    git(folder, "commit", "-q", "-m", "first")
    return folder
