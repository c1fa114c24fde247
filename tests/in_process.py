"""A script that runs the command line inside a fresh ``python -c`` process and then reports on it, for
tests that look at what a run loaded or called (``sys.argv[1:]`` are the command's arguments)."""

from __future__ import annotations

# run() is what the entry point calls before it leaves (without the interpreter's teardown, which would
# not let the script report)
RUN_THE_COMMAND_LINE = """
import sys
sys.argv = ["studylog", *sys.argv[1:]]
from studylog.cli.app import run
try:
    run()
except SystemExit as exc:
    code = exc.code
else:
    code = 0
"""


def script(before: str = "", after: str = "") -> str:
    """``before``, the command line run (its exit code left in ``code``), then ``after``."""
    return before + RUN_THE_COMMAND_LINE + after
