"""Two processes writing the dictionary of one store at the same moment.

Each process adds 100 variables, one transaction each (as 100 separate commands would). Writers start
with BEGIN IMMEDIATE and wait on SQLite's busy timeout, so all 200 entries arrive, none is lost, and
neither process meets "database is locked". Both race to create the default table: exactly one wins.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

WRITER = r"""
import sys, time
from studylog import dictionary
from studylog.store.session import locate, transaction

prefix, start = sys.argv[1], float(sys.argv[2])
location = locate()
while time.time() < start:
    time.sleep(0.001)
for i in range(100):
    with transaction(location, write=True) as session:
        dictionary.add_variable(session, f"{prefix}{i:03d}", {"type": "integer", "unit": "count"})
print("done")
"""


def test_two_processes_add_100_variables_each(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    start = time.time() + 1.5  # both processes have imported studylog by then and begin together
    env = dict(os.environ)
    processes = [
        subprocess.Popen([sys.executable, "-c", WRITER, prefix, str(start)], env=env,
                         stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        for prefix in ("a", "b")
    ]
    outputs = [p.communicate(timeout=120) for p in processes]
    for process, (out, err) in zip(processes, outputs):
        assert "locked" not in err.lower(), err
        assert process.returncode == 0, err
        assert out.strip() == "done"
    listed = json.loads(cli("var", "list", "--json").stdout)
    assert len(listed) == 200
    assert {v["table"] for v in listed} == {"data"}
    assert sorted(v["position"] for v in listed) == list(range(1, 201))
    names = {v["name"] for v in listed}
    assert names == {f"{p}{i:03d}" for p in "ab" for i in range(100)}
    tables = json.loads(cli("table", "list", "--json").stdout)
    assert len(tables) == 1
    history = json.loads(cli("var", "history", "--json").stdout)
    assert sum(1 for c in history if c["action"] == "create" and c.get("variable")) == 200
