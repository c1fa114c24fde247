"""Process-wide settings of the data libraries (``studylog.data.runtime``), in fresh processes: they
depend on what is already loaded."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import in_process  # noqa: E402

from studylog.data import runtime  # noqa: E402

FRESH = """
import os, sys
from studylog.data import runtime
before = runtime.one_blas_thread()
import numpy
after = runtime.one_blas_thread()
print(before, after, os.environ.get("OPENBLAS_NUM_THREADS"))
"""

# the command line with one_blas_thread watched: what it returned when the command called it
WATCHED = in_process.script(before="""
from studylog.data import runtime
answers = []
original = runtime.one_blas_thread
runtime.one_blas_thread = lambda: answers.append(original()) or answers[-1]
""", after="""
sys.stderr.write(f"\\nexit={code} answers={answers}\\n")
""")


def _python(script: str, *args: str, env: dict[str, str], cwd: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-c", script, *args], env=env, cwd=cwd, capture_output=True,
                          text=True, timeout=120, check=False)


def _env(tmp_path: Path, **extra: str) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k != "OPENBLAS_NUM_THREADS"}
    return {**env, "STUDYLOG_STORE": str(tmp_path / "none"), "NO_COLOR": "1", **extra}


def test_one_blas_thread_takes_effect_only_before_numpy_loads(tmp_path: Path) -> None:
    done = _python(FRESH, env=_env(tmp_path), cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["True", "False", "1"]


def test_one_blas_thread_keeps_the_users_choice(tmp_path: Path) -> None:
    done = _python(FRESH, env=_env(tmp_path, OPENBLAS_NUM_THREADS="4"), cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["True", "False", "4"]


@pytest.mark.parametrize("command", ["profile", "check"])
def test_the_commands_ask_for_one_blas_thread_before_numpy_loads(tmp_path: Path, command: str) -> None:
    data = tmp_path / "small.csv"
    data.write_text("id,score\n1,2.5\n2,3.5\n3,\n", encoding="utf-8")
    env = _env(tmp_path)
    if command == "check":
        env["STUDYLOG_STORE"] = str(tmp_path)
        for setup in (["init", "--json"], ["table", "add", "small", "--json"]):
            assert _python(WATCHED, *setup, env=env, cwd=tmp_path).returncode == 0
        args = ["check", str(data), "--no-record", "--fail-on", "never", "--json"]
    else:
        args = ["profile", str(data), "--json"]
    done = _python(WATCHED, *args, env=env, cwd=tmp_path)
    last = done.stderr.strip().splitlines()[-1]
    assert last == "exit=0 answers=[True]", done.stderr[-2000:]


def test_prefer_jemalloc_makes_it_arrows_pool_where_pyarrow_has_it(tmp_path: Path) -> None:
    script = """
import pyarrow as pa
from studylog.data import runtime
try:
    pa.jemalloc_memory_pool()
    built_with = True
except (NotImplementedError, pa.ArrowException):
    built_with = False
before = pa.default_memory_pool().backend_name
runtime.prefer_jemalloc(decay_ms=runtime.CHECK_DECAY_MS)
print(built_with, before, pa.default_memory_pool().backend_name)
"""
    done = _python(script, env=_env(tmp_path), cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    built_with, before, after = done.stdout.split()
    assert after == ("jemalloc" if built_with == "True" else before)


KEEP_WATCHED = in_process.script(before="""
import os
from studylog.data import runtime
answers = []
original = runtime.keep_freed_arrow_memory
def watched():
    answers.append((original(), os.environ.get("MIMALLOC_PURGE_DELAY")))
    return answers[-1][0]
runtime.keep_freed_arrow_memory = watched
""", after="""
sys.stderr.write(f"\\nexit={code} answers={answers}\\n")
""")


def test_profile_sets_arrows_purge_delay_before_pyarrow_loads(tmp_path: Path) -> None:
    # mimalloc reads its settings from the environment when the library loads: too late afterwards
    data = tmp_path / "small.csv"
    data.write_text("id,score\n1,2.5\n2,3.5\n3,\n", encoding="utf-8")
    env = {k: v for k, v in _env(tmp_path).items() if k != "MIMALLOC_PURGE_DELAY"}
    done = _python(KEEP_WATCHED, "profile", str(data), "--json", env=env, cwd=tmp_path)
    last = done.stderr.strip().splitlines()[-1]
    assert last == f"exit=0 answers=[(True, '{runtime.PROFILE_PURGE_DELAY_MS}')]", done.stderr[-2000:]


def test_keep_freed_arrow_memory_keeps_the_users_choice(tmp_path: Path) -> None:
    script = """
import os
from studylog.data import runtime
print(runtime.keep_freed_arrow_memory(), os.environ["MIMALLOC_PURGE_DELAY"])
import pyarrow
print(runtime.keep_freed_arrow_memory())
"""
    done = _python(script, env=_env(tmp_path, MIMALLOC_PURGE_DELAY="50"), cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["True", "50", "False"]
