"""How fast ``studylog log`` runs as a whole process, against the floor of any typer + SQLAlchemy program.

The floor is a minimal typer program with one command that opens a SQLite file through the SQLAlchemy ORM
and inserts one row. Both are run the same number of times, interleaved (so that both see the same load on
the machine), each as a fresh ``python`` process; the medians are compared. The goal: ``studylog log``
within 1.2 x the floor and under 0.3 s.

Both run from compiled bytecode, as an installed program does: the environment may set
``PYTHONDONTWRITEBYTECODE`` (which would recompile every studylog module on each start), so it is cleared
for the child processes, and the warm-up runs write the bytecode to a pycache folder in the temporary
directory (``PYTHONPYCACHEPREFIX``), not beside the sources.

Also reported, to see where the time goes: a bare interpreter, importing the command line (in a fresh
process), building typer's command tree in process, and ``studylog log`` in a git work tree (one
``git status`` more).

    python benchmarks/journal.py [--runs 21] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

FLOOR = '''
import typer
from sqlalchemy import Integer, String, create_engine
from sqlalchemy.orm import DeclarativeBase, Mapped, Session, mapped_column

class Base(DeclarativeBase):
    pass

class Row(Base):
    __tablename__ = "rows"
    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    text: Mapped[str] = mapped_column(String)

app = typer.Typer()

@app.command()
def add(text: str, path: str = typer.Option(...)) -> None:
    engine = create_engine(f"sqlite:///{path}")
    Base.metadata.create_all(engine)
    with Session(engine) as session, session.begin():
        session.add(Row(text=text))
        session.flush()
        print(f"row {session.get(Row, 1) and 1} recorded")

if __name__ == "__main__":
    app()
'''

TREE = '''
import time
t = time.perf_counter()
from studylog.cli.app import app
imported = time.perf_counter()
import typer.main
typer.main.get_command(app)
print(imported - t, time.perf_counter() - imported)
'''


CPU: dict[str, list[float]] = {}


def _time(command: list[str], env: dict[str, str], cwd: Path, name: str | None = None) -> float:
    """Wall time of one process; its CPU time (user + system) is kept under ``name``."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    done = subprocess.run(command, env=env, cwd=cwd, capture_output=True, text=True, check=False)
    elapsed = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        raise SystemExit(f"{' '.join(command)} failed: {done.stderr.strip()}")
    if name:
        CPU.setdefault(name, []).append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
    return elapsed


def _git(folder: Path, *args: str) -> None:
    env = {**os.environ, "GIT_AUTHOR_NAME": "b", "GIT_AUTHOR_EMAIL": "b@example.org",
           "GIT_COMMITTER_NAME": "b", "GIT_COMMITTER_EMAIL": "b@example.org"}
    subprocess.run(["git", "-C", str(folder), *args], env=env, check=True, capture_output=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=21)
    parser.add_argument("--json", action="store_true")
    options = parser.parse_args()
    python = sys.executable
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        plain, repo = root / "plain", root / "repo"
        plain.mkdir()
        repo.mkdir()
        floor = root / "floor.py"
        floor.write_text(FLOOR)
        env = {**os.environ, "STUDYLOG_AUTHOR": "bench", "NO_COLOR": "1",
               "STUDYLOG_STORE": str(plain / "studylog.db"),
               # compiled bytecode as an installed program has it (a sandbox may set
               # PYTHONDONTWRITEBYTECODE, which would recompile every studylog module on each start);
               # kept in the temporary folder, not beside the sources
               "PYTHONPYCACHEPREFIX": str(root / "pycache")}
        env.pop("PYTHONDONTWRITEBYTECODE", None)
        repo_env = {**env, "STUDYLOG_STORE": str(repo / "studylog.db")}
        subprocess.run([python, "-m", "studylog", "init"], env=env, cwd=plain, check=True, capture_output=True)
        _git(repo, "init", "-q")
        (repo / "analysis.py").write_text("x = 1\n")
        _git(repo, "add", "analysis.py")
        _git(repo, "commit", "-q", "-m", "first")
        subprocess.run([python, "-m", "studylog", "init"], env=repo_env, cwd=repo, check=True,
                       capture_output=True)
        runs: dict[str, list[float]] = {"log": [], "floor": [], "python": [], "import": [], "log_in_git": []}
        # warm-ups, so that every measured run finds compiled bytecode and a warm file cache
        for _ in range(2):
            _time([python, "-m", "studylog", "log", "warm-up"], env, plain)
            _time([python, "-m", "studylog", "log", "warm-up"], repo_env, repo)
            _time([python, str(floor), "warm-up", "--path", str(root / "floor.db")], env, plain)
        for i in range(options.runs):
            runs["log"].append(_time([python, "-m", "studylog", "log", f"decision {i}", "--kind", "other"],
                                     env, plain, "log"))
            runs["floor"].append(_time([python, str(floor), f"row {i}", "--path", str(root / "floor.db")],
                                       env, plain, "floor"))
            runs["python"].append(_time([python, "-c", "pass"], env, plain, "python"))
            runs["import"].append(_time([python, "-c", "import studylog.cli.app"], env, plain, "import"))
            runs["log_in_git"].append(_time([python, "-m", "studylog", "log", f"decision {i}"], repo_env, repo,
                                            "log_in_git"))
        tree = subprocess.run([python, "-c", TREE], env=env, cwd=plain, capture_output=True, text=True,
                              check=True).stdout.split()
    medians = {name: statistics.median(values) for name, values in runs.items()}
    cpu = {name: statistics.median(values) for name, values in CPU.items()}
    result = {
        "runs": options.runs,
        "median_s": {k: round(v, 4) for k, v in medians.items()},
        "median_cpu_s": {k: round(v, 4) for k, v in cpu.items()},
        "log_over_floor": round(medians["log"] / medians["floor"], 3),
        "log_over_floor_cpu": round(cpu["log"] / cpu["floor"], 3),
        "goal_ratio": 1.2,
        "goal_s": 0.3,
        "in_process_s": {"import_cli": round(float(tree[0]), 4), "build_command_tree": round(float(tree[1]), 4)},
    }
    result["meets_goal"] = result["log_over_floor"] <= 1.2 and medians["log"] < 0.3
    if options.json:
        print(json.dumps(result, indent=2))
        return
    print(f"median of {options.runs} runs, whole process:         wall      cpu")
    for name, label in (("log", "studylog log"), ("floor", "typer + SQLAlchemy ORM, one row"),
                        ("python", "python -c pass"), ("import", "import studylog.cli.app"),
                        ("log_in_git", "studylog log in a git work tree")):
        print(f"  {label:34} {medians[name] * 1000:7.1f} ms {cpu[name] * 1000:7.1f} ms")
    print(f"  studylog log / floor               {result['log_over_floor']:7.3f}    "
          f"{result['log_over_floor_cpu']:7.3f}  (goal <= 1.2, and < 300 ms)")
    print(f"in process: importing the command line {result['in_process_s']['import_cli'] * 1000:.1f} ms, "
          f"building typer's command tree {result['in_process_s']['build_command_tree'] * 1000:.1f} ms")
    print("meets the goal" if result["meets_goal"] else "does not meet the goal")


if __name__ == "__main__":
    main()
