"""The journal's commands start fast: run as real processes against a real store, they import no pandas,
pyarrow, numpy, scipy or pydantic. Checked twice: by the import log of ``python -X importtime`` and by ``sys.modules``
after the command ran (the import log does not show modules loaded through ``importlib.import_module``,
as the command modules are)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

import in_process

# pydantic: typer from 0.29 on coerces every option through it (a tenth of a second); pyproject keeps
# typer below that
HEAVY = ("pandas", "pyarrow", "numpy", "scipy", "pydantic")

COMMANDS = [
    ["log", "cap income", "--kind", "outliers", "--var", "income", "--why", "a typo"],
    ["log", "impute income", "--kind", "missing", "--assumption", "MAR", "--proposed", "--json"],
    ["decisions", "--json"],
    ["decision", "show", "1"],
    ["decision", "implement", "1", "--code", "clean.py:3"],
    ["note", "heaping at 5-year marks", "--var", "age", "--tag", "eda"],
    ["conclude", "renewal falls with age"],
    ["next", "repeat on April"],
    ["ask", "Is -99 a refusal?", "--var", "income", "--to", "owner"],
    ["answer", "1", "yes"],
    ["questions", "--status", "all"],
    ["threat", "add", "self-report", "--kind", "construct", "--var", "income"],
    ["threat", "set", "1", "--status", "accepted", "--why", "inherent"],
    ["threats", "--json"],
    ["timeline"],
    ["plan", "freeze"],
]


def _run(args: list[str], env: dict[str, str], cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-X", "importtime", "-m", "studylog", *args], env=env, cwd=cwd,
                          capture_output=True, text=True, timeout=60, check=False)


def _imported(stderr: str) -> set[str]:
    names = set()
    for line in stderr.splitlines():
        if line.startswith("import time:") and "|" in line:
            names.add(line.rsplit("|", 1)[1].strip().split(".")[0])
    return names


@pytest.fixture(scope="module")
def real_store(tmp_path_factory: pytest.TempPathFactory) -> tuple[dict[str, str], Path]:
    folder = tmp_path_factory.mktemp("fast")
    env = {**os.environ, "STUDYLOG_STORE": str(folder / "studylog.db"), "STUDYLOG_AUTHOR": "tester",
           "NO_COLOR": "1"}
    assert _run(["init", "--title", "fast"], env, folder).returncode == 0
    # the variables the commands name, and a checked drop, through the library
    code = (
        "from studylog import dictionary\n"
        "from studylog.store.session import locate, transaction\n"
        "from studylog.store.models import Drop, Profile\n"
        "with transaction(locate(), write=True) as s:\n"
        "    dictionary.add_variable(s, 'income', {'type': 'number'})\n"
        "    dictionary.add_variable(s, 'age', {'type': 'integer'})\n"
        "    d = Drop(table_id=1, file_name='a.csv', sha256='0'*64, size=1, rows=10, columns=2,\n"
        "             checked_at='2026-01-01T00:00:00.000000Z', author='x')\n"
        "    s.add(d); s.flush()\n"
        "    s.add(Profile(drop_id=d.id, variable='income', data={'rows': 10, 'count': 9, 'missing': 1}))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], env=env, cwd=folder, capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    return env, folder


IN_PROCESS = in_process.script(after="""
heavy = sorted({m.split(".")[0] for m in sys.modules} & {"pandas", "pyarrow", "numpy", "scipy"})
sys.stderr.write(f"\\nexit={code} heavy={','.join(heavy)} journal={'studylog.journal' in sys.modules}\\n")
""")


@pytest.mark.parametrize("args", COMMANDS, ids=[" ".join(a[:2]) for a in COMMANDS])
def test_journal_commands_import_nothing_heavy(real_store: tuple[dict[str, str], Path], args: list[str]) -> None:
    env, folder = real_store
    done = _run(args, env, folder)
    assert done.returncode == 0, done.stderr[-2000:]
    loaded = _imported(done.stderr)
    assert "studylog" in loaded and "sqlalchemy" in loaded  # the log is really an import log
    heavy = sorted(loaded & set(HEAVY))
    assert heavy == [], f"'studylog {' '.join(args)}' imported {heavy}"


@pytest.mark.parametrize("args", [COMMANDS[0], COMMANDS[8], COMMANDS[11], COMMANDS[14]],
                         ids=["log", "ask", "threat add", "timeline"])
def test_nothing_heavy_in_sys_modules_after_the_command(real_store: tuple[dict[str, str], Path],
                                                        args: list[str]) -> None:
    env, folder = real_store
    done = subprocess.run([sys.executable, "-c", IN_PROCESS, *args], env=env, cwd=folder, capture_output=True,
                          text=True, timeout=60, check=False)
    last = done.stderr.strip().splitlines()[-1]
    assert last == "exit=0 heavy= journal=True", done.stderr[-2000:]


def test_profile_without_a_study_does_not_load_the_store_library(tmp_path: Path) -> None:
    # profiling needs no study: with none found, SQLAlchemy (a fifth of a second of imports) stays unloaded
    data = tmp_path / "small.csv"
    data.write_text("id,score\n1,2.5\n2,3.5\n3,\n", encoding="utf-8")
    env = {**os.environ, "STUDYLOG_STORE": str(tmp_path / "none"), "NO_COLOR": "1"}
    done = _run(["profile", str(data), "--json"], env, tmp_path)
    assert done.returncode == 0, done.stderr[-2000:]
    loaded = _imported(done.stderr)
    assert "pyarrow" in loaded and "studylog" in loaded  # the log is really an import log
    assert "sqlalchemy" not in loaded
