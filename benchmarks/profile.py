"""Speed and memory of ``studylog profile`` against a plain ``pyarrow.csv.read_csv`` of the same file.

Generates a seeded 1,000,000-row x 20-column CSV (integers, floats, categoricals, dates, booleans, text,
about 2% missing cells), then runs, each as a whole separate process in the same run:

- the baseline: ``python -c "import pyarrow.csv; pyarrow.csv.read_csv(FILE)"``;
- ``studylog profile FILE --target churned --json`` (output discarded);

and reports wall time, CPU time (and the system's part of it) and peak resident memory (max RSS of the
child, from ``getrusage``) of both, and their ratios. Each measured run follows an unmeasured run of
the same command, which follows a pause of PAUSE_S seconds:

- the unmeasured run leaves the kernel's free memory as the command itself uses it; a process started
  right after the other command ran slower, for the state that one left (a read_csv after a profile
  spent several times the system time), which is neither command's own cost;
- the pause is for virtual machines whose balloon device reports free memory to the host (Linux's free
  page reporting): about 2 s after memory is freed, the host takes back what is still free, and a
  process that touches those pages again waits for the host to supply each one (a read_csv's system
  time went from 0.05 s to 1.0 s, its wall time from 0.33 s to 0.9 s). Without the pause, the host's
  pass was set going by the exit of the run measured last and fell, 2 s later, on the start of the
  next measured profile in most rounds, often within its first 0.2 s (seen by tracing the passes),
  because the three runs in between took about 2 s. After the pause, a pass falls on a measured run
  only by chance (the longer the run, the likelier). The unmeasured runs, after the pause, are shown
  apart: what a single run costs on such a machine.

Goals: time ratio <= 3; peak memory no more than one copy of the data beyond the Arrow table.

    python benchmarks/profile.py [--rows N] [--keep FILE] [--repeat K]   (medians of K runs each)
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

SEED = 20260301
# longer than the 2 s after which a VM's balloon reports freed memory to the host (see above)
PAUSE_S = 2.5
MISSING_SHARE = 0.02


def generate(path: Path, rows: int, seed: int = SEED) -> None:
    """Write the benchmark CSV (vectorised; a few seconds for a million rows)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.csv as csv

    rng = np.random.default_rng(seed)

    def text(values: np.ndarray) -> pa.Array:
        return pc.cast(pa.array(values), pa.string())

    def pick(levels: list[str], p: list[float] | None = None) -> pa.Array:
        return pa.array(np.asarray(levels, dtype=object)[rng.choice(len(levels), rows, p=p)], pa.string())

    def day(start: str, span: int) -> pa.Array:
        days = np.datetime64(start) + rng.integers(0, span, rows)
        return pc.strftime(pa.array(days.astype("datetime64[s]")), format="%Y-%m-%d")

    income = np.round(rng.lognormal(10.5, 0.6, rows), 2)
    score = np.round(rng.normal(50, 12, rows), 3)
    words = np.array(["late", "delivery", "great", "service", "price", "app", "crash", "refund", "staff",
                      "friendly", "slow", "fast", "support", "billing", "error"], dtype=object)
    comments = pc.binary_join_element_wise(
        pa.array(words[rng.integers(0, words.size, rows)]), pa.array(words[rng.integers(0, words.size, rows)]),
        pa.array(words[rng.integers(0, words.size, rows)]), " ",
    )
    columns = {
        "member_id": text(np.arange(1, rows + 1)),
        "age": text(rng.integers(18, 91, rows)),
        "visits": text(rng.poisson(4, rows)),
        "items": text(rng.integers(0, 200, rows)),
        "signup_year": text(rng.integers(2010, 2026, rows)),
        "income": text(income),
        "score": text(score),
        "score_scaled": text(np.round(score * 1.8 + rng.normal(0, 0.5, rows), 3)),
        "ratio": text(np.round(rng.random(rows), 4)),
        "temperature": text(np.round(rng.normal(21, 3, rows), 1)),
        "region": pick(["north", "south", "east", "west", "centre", "coast", "hills", "islands"]),
        "plan": pick(["basic", "plus", "premium", "family"], [0.5, 0.3, 0.15, 0.05]),
        "channel": pick(["web", "Web", "app", "App ", "phone", "store"]),
        "segment": pick([f"S{i:02d}" for i in range(20)]),
        "joined": day("2018-01-01", 2500),
        "last_visit": day("2025-01-01", 365),
        "active": pick(["true", "false"], [0.8, 0.2]),
        "churned": pick(["yes", "no"], [0.12, 0.88]),
        "comment": comments,
        "voucher": pc.binary_join_element_wise(
            pa.array(np.full(rows, "V"), pa.string()), text(rng.integers(0, 10**7, rows)), "-"),
    }
    for name, values in list(columns.items()):
        if name == "member_id":
            continue
        holes = pa.array(rng.random(rows) < MISSING_SHARE)
        columns[name] = pc.if_else(holes, pa.scalar(None, pa.string()), values)
    csv.write_csv(pa.table(columns), str(path))


def measure(command: list[str]) -> tuple[float, int, float, float]:
    """Wall seconds, peak RSS (bytes), CPU seconds (user + system) and system seconds of ``command`` run
    as its own process, measured by a small wrapper process so that the RSS is that command's alone."""
    wrapper = (
        "import resource, subprocess, sys, time\n"
        "start = time.perf_counter()\n"
        "code = subprocess.call(sys.argv[1:], stdout=subprocess.DEVNULL)\n"
        "elapsed = time.perf_counter() - start\n"
        "usage = resource.getrusage(resource.RUSAGE_CHILDREN)\n"
        "print(elapsed, usage.ru_maxrss * 1024, usage.ru_utime + usage.ru_stime, usage.ru_stime, code)\n"
    )
    out = subprocess.run([sys.executable, "-c", wrapper, *command], capture_output=True, text=True, check=True)
    elapsed, peak, cpu, system, code = out.stdout.split()
    if code != "0":
        raise SystemExit(f"{' '.join(command)} exited {code}")
    return float(elapsed), int(peak), float(cpu), float(system)


def medians(taken: list[tuple[float, int, float, float]]) -> tuple[float, ...]:
    return tuple(statistics.median(r[k] for r in taken) for k in range(4))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--keep", type=Path, help="Write the CSV here and keep it (reused if it exists).")
    parser.add_argument("--repeat", type=int, default=1,
                        help="Runs of each command, taken in turns; the medians are reported.")
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="studylog-bench-"))
    path = args.keep or folder / "members.csv"
    if not path.exists():
        started = time.perf_counter()
        generate(path, args.rows)
        print(f"generated {path} ({path.stat().st_size / 1e6:.0f} MB) in {time.perf_counter() - started:.1f} s")
    baseline = [sys.executable, "-c", f"import pyarrow.csv; pyarrow.csv.read_csv({str(path)!r})"]
    studylog = [sys.executable, "-m", "studylog", "profile", str(path), "--target", "churned", "--json"]
    env_store = folder / "no-study" / "studylog.db"
    os.environ["STUDYLOG_STORE"] = str(env_store)  # profiling needs no study; make sure none is found
    commands = {"pyarrow.csv.read_csv": baseline, "studylog profile": studylog}
    runs: dict[str, list[tuple[float, int, float, float]]] = {label: [] for label in commands}
    after_pause: dict[str, list[tuple[float, int, float, float]]] = {label: [] for label in commands}
    # in turns, so that a neighbour's load falls on both alike; each command runs after a pause,
    # unmeasured (shown apart), then measured right after itself
    for _ in range(args.repeat):
        for label, command in commands.items():
            time.sleep(PAUSE_S)
            after_pause[label].append(measure(command))
            runs[label].append(measure(command))
    results = {label: medians(taken) for label, taken in runs.items()}
    base_time, base_rss, base_cpu, _base_system = results["pyarrow.csv.read_csv"]
    for label, (seconds, rss, cpu, system) in results.items():
        print(f"{label:22s} wall {seconds:7.2f} s  cpu {cpu:7.2f} s (system {system:4.2f})  "
              f"peak RSS {rss / 2**20:7.0f} MiB")
    cold = {label: medians(taken) for label, taken in after_pause.items()}
    for label, (seconds, _rss, cpu, system) in cold.items():
        print(f"  (after a pause) wall {seconds:5.2f} s  cpu {cpu:5.2f} s (system {system:4.2f})  "
              f"[{label}; not measured]")
    seconds, rss, cpu, _system = results["studylog profile"]
    print(f"wall-time ratio {seconds / base_time:.2f} (goal <= 3); cpu-time ratio {cpu / base_cpu:.2f}; "
          f"peak memory ratio {rss / base_rss:.2f} (goal <= 2: one copy of the data beyond the Arrow table)")
    print(f"(wall-time ratio of the runs after a pause: "
          f"{cold['studylog profile'][0] / cold['pyarrow.csv.read_csv'][0]:.2f})")
    worst = max(r[0] / b[0] for r, b in zip(runs["studylog profile"], runs["pyarrow.csv.read_csv"]))
    print(f"(highest ratio of one round: {worst:.2f})")
    print(f"load average during the run: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
