"""``studylog profile``: read a file, find what the dictionary says about it, and profile it.

Types and missing codes come from the study's dictionary when a study exists and the file's table is in
it (``--table``, else the table named like the file, else the study's only table when most of the file's
columns are its variables); the other columns get the types and missing codes that inference proposes.
Profiling needs no study at all.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from studylog.data.spec import TableSpec, VariableSpec
from studylog.errors import NoStudyFound
from studylog.store.session import StoreLocation

# types are inferred from at most this many rows, spread evenly over the file (the profile itself reads
# every row, and reports values that do not fit the inferred type as invalid)
INFERENCE_ROWS = 100_000
SAMPLE_STRETCHES = 20
# the share of a file's columns that must be variables of the study's only table to use it unasked
MATCH_SHARE = 0.5
# the batches of a whole-file read whose numbers are worked out together while the file is read
EARLY_BATCHES = 4


@dataclass
class Dictionary:
    """What the study knows about the file: its table's spec, availability, the study's target."""

    spec: TableSpec | None = None
    availability: dict[str, str] = field(default_factory=dict)
    target: str | None = None
    weight: str | None = None


def _matching_table(session: Any, columns: Sequence[str], path: Path, explicit: str | None) -> str | None:
    from studylog import dictionary

    if explicit is not None:
        return dictionary.resolve_table(session, explicit).name
    tables = dictionary.tables(session)
    for table in tables:
        if table.name == path.stem:
            return table.name
    if len(tables) == 1:
        names = set()
        for variable in tables[0].variables:
            names.add(variable.name)
            names.update(variable.aliases or [])
        if columns and sum(c in names for c in columns) >= MATCH_SHARE * len(columns):
            return tables[0].name
    return None


def study_dictionary(location: StoreLocation | None, columns: Sequence[str], path: Path,
                     table: str | None) -> Dictionary:
    """The dictionary of the file's table, or an empty one when there is no study or no such table."""
    if location is None:
        return Dictionary()
    if table is None and location.is_sqlite and location.path is not None and not location.path.exists():
        # no study there: said without loading the store's models (a tenth of a second)
        return Dictionary()
    from studylog import dictionary, study
    from studylog.store.session import transaction

    try:
        with transaction(location, write=False) as session:
            found = Dictionary(target=study.get(session).target)
            name = _matching_table(session, columns, path, table)
            if name is None:
                return found
            found.spec = dictionary.table_spec(session, name)
            for variable in dictionary.variables(session, table=name):
                if variable.availability:
                    found.availability[variable.name] = variable.availability
            return found
    except NoStudyFound:
        if table is not None:
            raise
        return Dictionary()


def _specs_for(columns: Sequence[str], spec: TableSpec | None) -> dict[str, VariableSpec]:
    """Each column's variable: by name, else by one of its aliases (the column is checked as it)."""
    if spec is None:
        return {}
    found: dict[str, VariableSpec] = {}
    for variable in spec.variables:
        for name in (variable.name, *variable.aliases):
            if name in columns and name not in found:
                found[name] = variable
    return found


def inferred_specs(data: Any, names: Sequence[str],
                   mapper: Callable[..., Iterable[Any]] = map) -> dict[str, tuple[VariableSpec, list[str]]]:
    """For columns the dictionary does not know: the variable inference proposes (from at most
    INFERENCE_ROWS rows spread over the file), and its likely missing codes (kept apart: they are
    counted as missing and suggested for review, not declared). ``mapper`` (e.g. a thread pool's
    map) infers the columns."""
    from studylog.data.infer import infer_column
    from studylog.data.spec import Code

    import numpy as np
    import pyarrow as pa

    found: dict[str, tuple[VariableSpec, list[str]]] = {}
    if not names:
        return found
    sample = data.select(list(names))
    if sample.num_rows > INFERENCE_ROWS:
        # SAMPLE_STRETCHES slices spread over the file: slicing copies nothing, taking rows would
        length = INFERENCE_ROWS // SAMPLE_STRETCHES
        starts = np.linspace(0, sample.num_rows - length, SAMPLE_STRETCHES).astype(np.int64)
        sample = pa.concat_tables([sample.slice(int(start), length) for start in starts])
    proposals = mapper(lambda name: infer_column(name, sample.column(name), sample.num_rows), names)
    for name, proposal in zip(names, proposals):
        levels = tuple(Code(str(level["code"]), level.get("label"), level.get("order"))
                       for level in proposal.levels)
        variable = VariableSpec(
            name=name, type=proposal.type, levels=levels, true_values=tuple(proposal.true_values),
            false_values=tuple(proposal.false_values), date_format=proposal.date_format,
            role=proposal.role or "input", sensitivity=proposal.sensitivity or "none",
        )
        found[name] = (variable, [str(code["code"]) for code in proposal.missing_codes])
    return found


def profile_file(
    path: str | Path,
    *,
    target: str | None = None,
    by: str | None = None,
    strong: float = 0.9,
    table: str | None = None,
    encoding: str | None = None,
    sheet: str | None = None,
    location: StoreLocation | None = None,
) -> dict[str, Any]:
    """The profile document of one file (the ``profile --json`` contract plus ``file`` and ``source``)."""
    import queue
    from concurrent.futures import ThreadPoolExecutor

    from studylog.data.read import tells_batches

    path = Path(path)
    batches: queue.SimpleQueue[Any] = queue.SimpleQueue()
    pool: ThreadPoolExecutor | None = None
    try:
        with ThreadPoolExecutor(max_workers=1, thread_name_prefix="studylog-read") as reader:
            reading = reader.submit(_read, path, encoding, sheet, batches.put)
            # a CSV's reader has Python's lock to itself until its parse has begun (the first batch
            # it tells of): the imports below, made meanwhile, put that start off by their length
            told = [batches.get()] if tells_batches(path) else []
            # what the profile needs besides the data, imported while the file is read (pyarrow reads
            # outside Python's lock): the computations, and the distributions of the p-values
            from studylog.data import early as early_work
            from studylog.data import profile, significance

            _quietly(significance.tails)
            pool = profile.workers()
            # then the reading of each batch read as numbers, dates or levels, on the core the parse
            # leaves idle
            early = early_work.EarlyColumns(_blocks(path))
            while True:
                # a few batches at a time (the fewer the calls, the less time in Python), and all there are
                come = told or [batches.get()]
                told = []
                while come[-1] is not _READ and (len(come) < EARLY_BATCHES or not batches.empty()):
                    come.append(batches.get())
                ended = come[-1] is _READ
                for part in _split(come[:-1] if ended else come):
                    if part is None:
                        early.give_up()
                    else:
                        # while the file is read, the parse has the other core; the batches left at
                        # its end are worked on by the pool's threads, a column each
                        early.add(part, pool.map if ended else map)
                if ended:
                    break
            data = reading.result()
        return _profile_read(data, path, pool, early, target=target, by=by, strong=strong, table=table,
                             location=location)
    finally:
        if pool is not None:
            pool.shutdown()


_READ = object()  # the reader's last word


def _split(told: list[Any]) -> list[Any]:
    """The batches told, in runs between the Nones (a read given up), which stay as they are."""
    runs: list[Any] = []
    for item in told:
        if item is None:
            runs.append(None)
        elif runs and runs[-1] is not None:
            runs[-1].append(item)
        else:
            runs.append([item])
    return runs


def _blocks(path: Path) -> float:
    """How many blocks the whole-file read parses (the batches ``read_table`` tells of)."""
    from studylog.data.read_whole import WHOLE_BLOCK

    try:
        return path.stat().st_size / WHOLE_BLOCK
    except OSError:
        return 1.0


def _read(path: Path, encoding: str | None, sheet: str | None, watch: Callable[[Any], None]) -> Any:
    from studylog.data.read import read_table
    from studylog.data.runtime import arrow_without_pandas

    try:
        arrow_without_pandas()
        return read_table(path, encoding=encoding, sheet=sheet, watch=watch)
    finally:
        watch(_READ)


def _quietly(load: Callable[[], Any]) -> None:
    """Load what a later step needs, now; a failure is left for that step to report."""
    try:
        load()
    except Exception:  # noqa: BLE001 - reported where it is used
        pass


def _profile_read(data: Any, path: Path, pool: Any, early: Any, *, target: str | None, by: str | None,
                  strong: float, table: str | None, location: StoreLocation | None) -> dict[str, Any]:
    from studylog.data import early as early_work
    from studylog.data import profile

    columns = list(data.column_names)
    known = study_dictionary(location, columns, path, table)
    specs = _specs_for(columns, known.spec)
    availability = {column: known.availability[spec.name] for column, spec in specs.items()
                    if spec.name in known.availability}
    proposed = inferred_specs(data, [c for c in columns if c not in specs], pool.map)
    inferred_missing = {name: codes for name, (_spec, codes) in proposed.items()}
    for name, (variable_spec, _codes) in proposed.items():
        specs[name] = variable_spec
    specs = {name: replace(spec, name=name) for name, spec in specs.items()}
    if target is None:
        roles = [name for name, spec in specs.items() if spec.role == "target" and name in columns]
        if roles:
            target = roles[0]
        elif known.target in columns:
            target = known.target
    weights = [name for name, spec in specs.items() if spec.role == "weight"]
    read_early = early.take(data, {name: early_work.wanted(spec) for name, spec in specs.items()})
    document = profile.profile_table(
        data, specs, target=target, by=by, strong=strong, inferred_missing=inferred_missing,
        weight=weights[0] if weights else None, availability=availability, pool=pool, early=read_early,
    )
    document["file"] = str(path)
    document["source"] = {
        "table": known.spec.name if known.spec else None,
        "from_dictionary": [c for c in columns if c not in proposed],
        "inferred": list(proposed),
    }
    return document
