"""A script that runs the command line inside a fresh ``python -c`` process and then reports on it, for
tests that look at what a run loaded or called (``sys.argv[1:]`` are the command's arguments)."""

from __future__ import annotations

RUN_THE_COMMAND_LINE = """
import runpy, sys
sys.argv = ["studylog", *sys.argv[1:]]
try:
    runpy.run_module("studylog", run_name="__main__", alter_sys=True)
except SystemExit as exc:
    code = exc.code
else:
    code = 0
"""


def script(before: str = "", after: str = "") -> str:
    """``before``, the command line run (its exit code left in ``code``), then ``after``."""
    return before + RUN_THE_COMMAND_LINE + after
