"""Who and when: the author and the timestamp stamped on every record."""

from __future__ import annotations

import os
import subprocess
from datetime import datetime, timezone
from functools import lru_cache


def now() -> str:
    """The current time as ISO-8601 UTC with microseconds, e.g. ``2026-12-01T18:54:08.123456Z``."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


@lru_cache(maxsize=1)
def author() -> str:
    """``STUDYLOG_AUTHOR``, else git's ``user.name``, else the login name."""
    named = os.environ.get("STUDYLOG_AUTHOR", "").strip()
    if named:
        return named
    try:
        found = subprocess.run(
            ["git", "config", "user.name"], capture_output=True, text=True, timeout=2, check=False
        ).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        found = ""
    if found:
        return found
    import getpass  # here: it brings termios, which a run with STUDYLOG_AUTHOR or git's name never needs

    try:
        return getpass.getuser()
    except (KeyError, OSError):
        return "unknown"
