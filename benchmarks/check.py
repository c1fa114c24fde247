"""Speed and memory of ``studylog check`` against a plain ``pyarrow.csv.read_csv`` of the same file.

Generates a seeded CSV of 1,000,000 rows x 20 dictionary columns (plus one undeclared column) with
planted faults of every rule of the check: absent, undeclared and renamed columns, type, level,
range, plausible, required, missing-share, unique, key, pattern, repeated rows and two cross-field
rules. A study is set up with the matching dictionary. Then, each as a separate whole process in the
same run (wall time and peak resident memory of that process, from ``os.wait4``):

- the baseline: ``python -c "import pyarrow.csv; pyarrow.csv.read_csv(FILE)"``, right after an
  unmeasured run of itself (after a check it is slower, which would flatter the ratio);
- ``studylog check FILE --json --fail-on never`` (output discarded; the drop is recorded), right
  after an unmeasured run of itself on a study of its own (after a read_csv it is slower).

The same is done for a file ten times larger (10,000,000 rows, about 1.6 GB, generated in parts in a
temporary folder). Goals: time ratio <= 2.5 on the 1M-row file; peak memory of the check under 500 MB
on the 10M-row file.

    python benchmarks/check.py [--rows N] [--scale 10] [--skip-large] [--keep DIR]
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

SEED = 20260401
PART_ROWS = 1_000_000
# share of rows given each planted fault (seeded positions; a few hundred rows per fault per million)
FAULT_SHARE = 0.0003


def _part(rows: int, first_id: int, seed: int):  # type: ignore[no-untyped-def]
    """One part of the file as an Arrow table of strings (vectorised)."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.compute as pc

    rng = np.random.default_rng(seed)

    def text(values: np.ndarray) -> np.ndarray:
        return np.asarray(pc.cast(pa.array(values), pa.string()).to_numpy(zero_copy_only=False), dtype=object)

    def pick(levels: list[str]) -> np.ndarray:
        return np.asarray(levels, dtype=object)[rng.integers(0, len(levels), rows)]

    def days(start: str, offsets: np.ndarray) -> np.ndarray:
        stamps = np.datetime64(start) + offsets
        return np.asarray(stamps.astype("datetime64[D]").astype(str), dtype=object)

    def faults() -> np.ndarray:
        return rng.choice(rows, max(1, int(rows * FAULT_SHARE)), replace=False)

    ids = np.arange(first_id, first_id + rows)
    visit_offsets = rng.integers(0, 700, rows)
    stay = rng.integers(0, 30, rows)
    count_a = rng.integers(0, 20, rows)
    count_b = rng.integers(0, 20, rows)
    columns = {
        "visit_id": np.asarray(np.char.add("V-", ids.astype(str)), dtype=object),
        "site": pick(["north", "south", "east", "west", "central"]),
        "age": text(rng.integers(18, 95, rows)),
        "weight": text(np.round(rng.normal(75, 12, rows), 1)),
        "height": text(np.round(rng.normal(170, 9, rows), 1)),
        "income": text(np.round(rng.lognormal(10.4, 0.6, rows), 2)),
        "score": text(np.round(rng.normal(50, 10, rows), 3)),
        "visit_date": days("2023-01-01", visit_offsets),
        "discharge_date": days("2023-01-01", visit_offsets + stay),
        "smoker": pick(["Y", "N"]),
        "sex": pick(["female", "male"]),
        "email": np.asarray(np.char.add(np.char.add("p", ids.astype(str)), "@example.org"), dtype=object),
        "phone": np.asarray(np.char.add("555-", np.char.zfill(rng.integers(0, 10_000, rows).astype(str), 4)),
                            dtype=object),
        "postcode": np.asarray(np.char.add("AB", rng.integers(10, 99, rows).astype(str)), dtype=object),
        "comment": pick(["late", "on time", "asked for a refund", "friendly staff", "slow app"]),
        "arm": pick(["control", "treated"]),
        "count_a": text(count_a),
        "count_b": text(count_b),
        "total": text(count_a + count_b),
        "old_ward": pick(["W1", "W2", "W3"]),  # the variable 'ward', found under its earlier name
        "extra_col": pick(["x", "y"]),  # not in the dictionary
    }
    plant = {
        ("age", "1.5"), ("age", "-4"), ("age", "130"), ("age", "15"), ("age", "-99"),
        ("weight", "NaN"), ("weight", "1e309"), ("visit_date", "2024-02-30"), ("smoker", "maybe"),
        ("sex", "Male "), ("sex", "unknown"), ("site", None), ("phone", "5551234"), ("postcode", "??"),
        ("total", "999"), ("discharge_date", "2022-12-31"),
    }
    for column, value in sorted(plant, key=lambda p: (p[0], str(p[1]))):
        columns[column][faults()] = value
    columns["income"][rng.choice(rows, int(rows * 0.03), replace=False)] = None  # missing-share
    duplicate_ids = faults()
    columns["visit_id"][duplicate_ids] = columns["visit_id"][(duplicate_ids + 1) % rows]  # key
    columns["email"][faults()] = "shared@example.org"  # unique
    table = pa.table({name: pa.array(values, pa.string()) for name, values in columns.items()})
    # repeated rows: copies of earlier rows placed later in the part
    sources = np.sort(rng.choice(rows // 2, int(rows * FAULT_SHARE), replace=False))
    targets = sources + rows // 2
    order = np.arange(rows)
    order[targets] = sources
    return table.take(pa.array(order))


def generate(path: Path, rows: int) -> None:
    import pyarrow.csv as csv

    with open(path, "wb") as handle:
        done = 0
        while done < rows:
            size = min(PART_ROWS, rows - done)
            part = _part(size, done + 1, SEED + done // PART_ROWS)
            options = csv.WriteOptions(include_header=done == 0, quoting_style="none")
            csv.write_csv(part, handle, write_options=options)
            done += size


def set_up_study(folder: Path) -> Path:
    """A study whose dictionary matches the file, with two cross-field rules."""
    from studylog import dictionary, rules, study
    from studylog.store.session import location_for_new, transaction

    location = location_for_new(str(folder), None)
    study.create(location, title="check benchmark")
    entries = [
        ("visit_id", {"type": "identifier", "required": True, "status": "confirmed"}),
        ("site", {"type": "categorical", "levels": _levels("north,south,east,west,central"),
                  "required": True}),
        ("age", {"type": "integer", "minimum": "0", "maximum": "120", "plausible_min": "18",
                 "missing_codes": [{"code": "-99", "label": "refused"}]}),
        ("weight", {"type": "number", "minimum": "0"}),
        ("height", {"type": "number", "plausible_min": "120", "plausible_max": "220"}),
        ("income", {"type": "number", "max_missing": 0.01}),
        ("score", {"type": "number"}),
        ("visit_date", {"type": "date", "minimum": "2023-01-01"}),
        ("discharge_date", {"type": "date"}),
        ("smoker", {"type": "boolean", "true_values": ["Y"], "false_values": ["N"]}),
        ("sex", {"type": "categorical", "levels": _levels("female,male")}),
        ("email", {"type": "identifier", "unique": True, "sensitivity": "direct-identifier"}),
        ("phone", {"type": "text", "pattern": r"\d{3}-\d{4}", "sensitivity": "direct-identifier"}),
        ("postcode", {"type": "identifier", "pattern": "[A-Z]{2}[0-9]{2}", "sensitivity": "quasi-identifier"}),
        ("comment", {"type": "text"}),
        ("arm", {"type": "categorical", "levels": _levels("control,treated")}),
        ("count_a", {"type": "integer", "minimum": "0"}),
        ("count_b", {"type": "integer", "minimum": "0"}),
        ("total", {"type": "integer"}),
        ("ward", {"type": "categorical", "aliases": ["old_ward"], "levels": _levels("W1,W2,W3")}),
        ("consent", {"type": "boolean", "required": True}),  # absent from the file
    ]
    with transaction(location, write=True) as session:
        dictionary.add_table(session, "visits", key="visit_id")
        for name, fields in entries:
            dictionary.add_variable(session, name, fields, table="visits")
        rules.add(session, "discharge-after-visit", "discharge_date >= visit_date", table="visits")
        rules.add(session, "total-adds-up", "total = count_a + count_b", table="visits",
                  severity="warning")
    return location.path


def _levels(text: str) -> list[dict[str, object]]:
    return [{"code": code, "label": None, "order": None} for code in text.split(",")]


def measure(command: list[str], env: dict[str, str]) -> tuple[float, float, float]:
    """Wall seconds, peak RSS (MiB: ru_maxrss is in KiB) and CPU seconds (user + system, all threads) of
    one child process."""
    start = time.perf_counter()
    child = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    _, status, usage = os.wait4(child.pid, 0)
    wall = time.perf_counter() - start
    errors = child.stderr.read().decode() if child.stderr else ""
    if os.waitstatus_to_exitcode(status) not in (0,):
        raise SystemExit(f"{' '.join(command)} failed: {errors}")
    return wall, usage.ru_maxrss / 1024, usage.ru_utime + usage.ru_stime


def compare(path: Path, folder: Path, repeat: int) -> dict[str, float]:
    baseline = [sys.executable, "-c", f"import pyarrow.csv; pyarrow.csv.read_csv({str(path)!r})"]
    results: dict[str, float] = {}
    best: dict[str, tuple[float, float, float]] = {}
    check = [sys.executable, "-m", "studylog", "check", str(path), "--json", "--fail-on", "never"]
    for attempt in range(repeat):
        # each measured run follows an unmeasured run of the same command: a process right after another
        # one that has handed back much memory is slower (a read_csv after a check spent several times
        # its system time), which is neither command's own cost. The unmeasured check records the drop
        # in a study of its own, so that the measured one records it too
        stores = []
        for role in ("warm", "measured"):
            store_folder = folder / f"study-{path.stem}-{attempt}-{role}"
            shutil.rmtree(store_folder, ignore_errors=True)
            stores.append((store_folder, set_up_study(store_folder)))
        envs = [dict(os.environ, STUDYLOG_STORE=str(store), STUDYLOG_AUTHOR="benchmark", NO_COLOR="1")
                for _folder, store in stores]
        for name, command in (("read_csv", baseline), ("check", check)):
            measure(command, envs[0])
            wall, peak, cpu = measure(command, envs[1])
            if name not in best or wall < best[name][0]:
                best[name] = (wall, max(peak, best.get(name, (0, 0, 0))[1]), cpu)
        for store_folder, _store in stores:
            shutil.rmtree(store_folder, ignore_errors=True)
    results["read_csv_s"], results["read_csv_mb"], results["read_csv_cpu"] = best["read_csv"]
    results["check_s"], results["check_mb"], results["check_cpu"] = best["check"]
    results["time_ratio"] = results["check_s"] / results["read_csv_s"]
    results["cpu_ratio"] = results["check_cpu"] / results["read_csv_cpu"]
    results["memory_ratio"] = results["check_mb"] / results["read_csv_mb"]
    return results


def report(label: str, rows: int, path: Path, results: dict[str, float]) -> None:
    size = path.stat().st_size / 1e6
    print(f"{label}: {rows:,} rows, {size:,.0f} MB")
    for label, key in (("pyarrow.csv.read_csv", "read_csv"), ("studylog check", "check")):
        print(f"  {label:21}: {results[key + '_s']:7.2f} s wall  {results[key + '_cpu']:7.2f} s cpu  "
              f"{results[key + '_mb']:8.0f} MiB peak ({results[key + '_mb'] * 2**20 / 1e6:,.0f} MB)")
    print(f"  ratios (check / read): wall {results['time_ratio']:.2f}   cpu {results['cpu_ratio']:.2f}   "
          f"memory {results['memory_ratio']:.2f}")
    print(f"  (load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs: wall times include waiting "
          "for a CPU)")


def _generate_elsewhere(path: Path, rows: int) -> None:
    """Write the file from another process. Linux keeps a process's peak RSS across fork and exec, so a
    child forked from a parent that had just built the data would report the parent's peak as its own."""
    subprocess.run([sys.executable, __file__, "--generate-only", str(path), "--rows", str(rows)], check=True)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--generate-only", type=Path, help=argparse.SUPPRESS)
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--scale", type=int, default=10, help="the larger file is this many times larger")
    parser.add_argument("--skip-large", action="store_true")
    parser.add_argument("--repeat", type=int, default=2, help="runs of the small file (best time kept)")
    parser.add_argument("--keep", type=Path, help="a folder to keep the generated files in")
    args = parser.parse_args()
    if args.generate_only:
        generate(args.generate_only, args.rows)
        return
    folder = args.keep or Path(tempfile.mkdtemp(prefix="studylog-check-bench-"))
    folder.mkdir(parents=True, exist_ok=True)
    try:
        small = folder / "visits.csv"
        if not small.exists():
            _generate_elsewhere(small, args.rows)
        report("small file", args.rows, small, compare(small, folder, args.repeat))
        if not args.skip_large:
            need = small.stat().st_size * args.scale * 1.2
            free = shutil.disk_usage(folder).free
            if free < need:
                print(f"large file skipped: {need / 1e9:.1f} GB needed, {free / 1e9:.1f} GB free")
                return
            large = folder / "visits-large.csv"
            if not large.exists():
                _generate_elsewhere(large, args.rows * args.scale)
            report("large file", args.rows * args.scale, large, compare(large, folder, 1))
    finally:
        if args.keep is None:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
