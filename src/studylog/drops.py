"""A data drop end to end: read the file, check it against the dictionary, store drop, findings, profiles.

One pass over the file: each record batch goes through the check's rules (``studylog.data.check``) and
through the passengers that ride on the same pass (the per-column summaries that become the stored
profiles, and whatever else a part of studylog needs from the rows, such as record digests). Then, in
one place (:func:`_compare_with_earlier`), the drop is compared with the earlier drop of its table.

Recording. Unless ``record=False``, the drop is stored with its table, file name, SHA-256, size, rows,
columns, time, author, the dictionary version checked against (or the last change in force), the
counts of errors and warnings, its findings (values already masked) and a profile per column.
A file whose SHA-256 is already recorded for the table is checked again (the dictionary may have
changed) but not recorded again, unless a ``label`` different from the recorded drop's is given (the
same bytes delivered as a different drop); ``already_recorded`` names the earlier drop either way.
A file that cannot be read raises :class:`~studylog.errors.InputFileError` before anything is written.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from studylog import dictionary
from studylog.clock import author, now
from studylog.errors import NotFound, UsageError
from studylog.store.models import Change, DataTable, DictionaryVersion, Drop, Finding, Profile

FAIL_ON = ("error", "warning", "never")


@dataclass
class Passenger:
    """Something that rides on the check's pass: ``observe(context)`` per batch, then ``store(...)``.

    ``store(session, drop, outcome)`` runs after the drop row exists (``drop`` is None with
    ``record=False``) and may add rows or fill ``outcome.document``.
    """

    observe: Callable[[Any], None]
    store: Callable[[Session, Drop | None, CheckOutcome], None] = lambda session, drop, outcome: None
    # findings it adds once the pass is over, before errors are counted (orphans: studylog.comparison)
    findings: Callable[[], list[Any]] = lambda: []


@dataclass
class CheckOutcome:
    """What ``check_file`` did: the check's result, the drop (when recorded), the JSON document."""

    result: Any  # studylog.data.check.CheckResult
    drop_id: int | None
    already_recorded: int | None
    profiles: dict[str, dict[str, Any]]
    document: dict[str, Any] = field(default_factory=dict)

    def failed(self, fail_on: str) -> bool:
        return self.result.at_or_above(fail_on)


def check_file(
    session: Session,
    path: str | os.PathLike[str],
    *,
    table: str | None = None,
    label: str | None = None,
    version: str | None = None,
    against: int | None = None,
    analysis: bool = False,
    record: bool = True,
    encoding: str | None = None,
    sheet: str | None = None,
    batch_rows: int = 65_536,
    progress: Callable[[int, int], None] | None = None,
) -> CheckOutcome:
    """Check a data file against the dictionary (now, or a named ``version``) and record the drop."""
    from studylog.data.check import Checker
    from studylog.data.read import file_facts, open_source
    from studylog.data.rules import plan
    from studylog.data.runtime import arrow_without_pandas

    arrow_without_pandas()

    spec = dictionary.table_spec(session, table, version)
    owner = dictionary.resolve_table(session, spec.name)
    earlier_named = _named_drop(session, owner, against) if against is not None else None
    source = open_source(path, encoding=encoding, sheet=sheet, batch_rows=batch_rows, progress=progress)
    # the file's SHA-256 is read in a thread of its own during the pass (hashlib lets go of the GIL)
    hashing = ThreadPoolExecutor(max_workers=1, thread_name_prefix="studylog-sha256")
    facts = hashing.submit(file_facts, path)
    hashing.shutdown(wait=False)
    checks = plan(spec, source.columns)
    summaries = _summaries(checks)
    passengers = [Passenger(lambda context: _update_summaries(summaries, context))]
    passengers.extend(_more_passengers(session, owner, checks, spec, against))
    result = Checker(checks, [p.observe for p in passengers]).run(source.batches())
    result.findings.extend(found for p in passengers for found in p.findings())
    profiles = {name: summary.to_dict() for name, summary in summaries.items()}
    sha256, size = facts.result()

    previous = _same_file(session, owner, sha256)
    should_record = record and (previous is None or (label is not None and label != previous.label))
    outcome = CheckOutcome(result, None, previous.id if previous else None, profiles)
    drop: Drop | None = None
    if should_record:
        drop = _store(session, owner, spec, Path(path).name, sha256, size, result, profiles, label, analysis)
        outcome.drop_id = drop.id
        earlier = earlier_named or _previous_drop(session, owner, before=drop.id)
        drop.against_id = earlier.id if earlier else None
        drop.comparison = _compare_with_earlier(session, drop, earlier, profiles)
    for passenger in passengers:
        passenger.store(session, drop, outcome)
    session.flush()
    outcome.document = _document(session, outcome, spec, owner, Path(path).name, sha256, size, label, drop,
                                 earlier_named)
    return outcome


def _summaries(checks: Any) -> dict[str, Any]:
    """One mergeable summary per file column, keyed by its variable's name (or the column's)."""
    from studylog.data.summary import ColumnSummary

    bound = {b.column: b.variable for b in checks.bindings}
    summaries: dict[str, Any] = {}
    for column in checks.columns:
        variable = bound.get(column)
        if variable is not None:
            summaries[variable.name] = ColumnSummary(variable, variable.type)
        else:
            summaries[column] = ColumnSummary(None, "text", name=column)
    return summaries


def _update_summaries(summaries: dict[str, Any], context: Any) -> None:
    # a bound variable's cells are read once, by the check (``BatchContext.parsed``), for both
    bound = {b.variable.name: b.column for b in context.plan.bindings}
    for name, summary in summaries.items():
        column = bound.get(name)
        if column is None:
            summary.update(context.column(name), digests=lambda name=name: context.digest(name)[0])
        else:
            summary.update(context.column(column), parsed=context.parsed(name),
                           digests=lambda column=column: context.digest(column)[0],
                           encoded=context.encoded(column))


def _more_passengers(session: Session, owner: DataTable, checks: Any, spec: Any = None,
                     against: int | None = None) -> list[Passenger]:
    """Further work on the same pass (record digests, orphan lookups) added by other parts of studylog."""
    # drops over time (studylog.comparison): record digests, orphans, drift and the record comparison;
    # its store() sets drop.against_id and drop.comparison, and the check JSON's "drift"/"records"
    from studylog import comparison

    tracker = comparison.start(session, owner, spec, list(checks.columns), against=against,
                               bindings={b.variable.name: b.column for b in checks.bindings})
    return [Passenger(tracker.observe, tracker.store, tracker.findings)]


def _compare_with_earlier(
    session: Session, drop: Drop, earlier: Drop | None, profiles: dict[str, dict[str, Any]]
) -> dict[str, Any]:
    """The comparison of the drop with the earlier drop of its table (``Drop.comparison``).

    The place where drift (from stored profiles) and the record comparison (from stored digests) are
    computed; empty when there is no earlier drop.
    """
    if earlier is None:
        return {}
    return {"against": earlier.id}


def _named_drop(session: Session, owner: DataTable, drop_id: int) -> Drop:
    drop = session.get(Drop, drop_id)
    if drop is None:
        raise NotFound(f"no drop {drop_id} (see 'studylog drops')")
    if drop.table_id != owner.id:
        other = session.get(DataTable, drop.table_id)
        raise UsageError(f"drop {drop_id} is a drop of table '{other.name if other else '?'}', "
                         f"not of '{owner.name}'")
    return drop


def _same_file(session: Session, owner: DataTable, sha256: str) -> Drop | None:
    query = select(Drop).where(Drop.table_id == owner.id, Drop.sha256 == sha256).order_by(Drop.id.desc())
    return session.scalars(query).first()


def _previous_drop(session: Session, owner: DataTable, *, before: int) -> Drop | None:
    query = select(Drop).where(Drop.table_id == owner.id, Drop.id < before).order_by(Drop.id.desc())
    return session.scalars(query).first()


def _dictionary_in_force(session: Session, version: str | None) -> tuple[str | None, int | None]:
    if version is not None:
        frozen = session.scalars(select(DictionaryVersion).where(DictionaryVersion.name == version)).first()
        return version, frozen.change_id if frozen else None
    return None, session.scalar(select(func.max(Change.id)))


def _store(
    session: Session, owner: DataTable, spec: Any, file_name: str, sha256: str, size: int,
    result: Any, profiles: dict[str, dict[str, Any]], label: str | None, analysis: bool,
) -> Drop:
    version, change = _dictionary_in_force(session, spec.version)
    drop = Drop(
        table_id=owner.id, label=label, file_name=file_name, sha256=sha256, size=size, rows=result.rows,
        columns=len(result.columns), columns_seen=list(result.columns), dictionary_version=version,
        dictionary_change=change, errors=result.errors, warnings=result.warnings, analysis=analysis,
        comparison={}, checked_at=now(), author=author(),
    )
    session.add(drop)
    session.flush()
    for found in result.findings:
        session.add(Finding(drop_id=drop.id, variable=found.variable, rule=found.rule,
                            severity=found.severity, count=found.count, rows=list(found.rows),
                            keys=list(found.keys), values=list(found.values), message=found.message))
    for name, profile in profiles.items():
        session.add(Profile(drop_id=drop.id, variable=name, data=profile))
    session.flush()
    return drop


def _document(
    session: Session, outcome: CheckOutcome, spec: Any, owner: DataTable, file_name: str, sha256: str, size: int,
    label: str | None, drop: Drop | None, earlier_named: Drop | None,
) -> dict[str, Any]:
    """The JSON of ``check --json`` (DESIGN.md, "Command contract"), extended with a few keys."""
    result = outcome.result
    document: dict[str, Any] = {
        "drop": {
            "id": outcome.drop_id, "label": label, "table": owner.name, "file": file_name,
            "sha256": sha256, "size": size, "rows": result.rows, "columns": len(result.columns),
            "dictionary": spec.version,
            "dictionary_change": drop.dictionary_change if drop else
            _dictionary_in_force(session, spec.version)[1],
            "analysis": drop.analysis if drop else False,
            "against": drop.against_id if drop else (earlier_named.id if earlier_named else None),
        },
        "recorded": drop is not None,
        "findings": [f.to_dict() for f in result.findings],
        "errors": result.errors,
        "warnings": result.warnings,
    }
    if outcome.already_recorded is not None:
        document["already_recorded"] = outcome.already_recorded
    comparison = drop.comparison if drop else {}
    for part in ("drift", "records"):
        if part in comparison:
            document[part] = comparison[part]
    return document | {k: v for k, v in outcome.document.items() if k not in document}


# ---------------------------------------------------------------------------------------------- reading


def latest_by_table(session: Session) -> list[tuple[DataTable, Drop]]:
    """The most recent drop of each table that has one."""
    found: list[tuple[DataTable, Drop]] = []
    for owner in dictionary.tables(session):
        drop = session.scalars(
            select(Drop).where(Drop.table_id == owner.id).order_by(Drop.id.desc())
        ).first()
        if drop is not None:
            found.append((owner, drop))
    return found


def findings_of(session: Session, drop_id: int) -> list[Finding]:
    return list(session.scalars(select(Finding).where(Finding.drop_id == drop_id).order_by(Finding.id)))


def status_sections(session: Session) -> list[Any]:
    """``studylog status``: the findings of the last check of each table, errors and warnings by rule."""
    from studylog.status import Section

    latest = latest_by_table(session)
    if not latest:
        return [Section("checks", "Checks", [], "todo",
                        "no drop checked yet; check one with 'studylog check FILE'")]
    items: list[dict[str, Any]] = []
    level = "ok"
    for owner, drop in latest:
        errors: dict[str, int] = {}
        warnings: dict[str, int] = {}
        for found in findings_of(session, drop.id):
            if found.severity == "error":
                errors[found.rule] = errors.get(found.rule, 0) + 1
            elif found.severity == "warning":
                warnings[found.rule] = warnings.get(found.rule, 0) + 1
        if drop.errors:
            level = "warning"
        items.append({
            "table": owner.name, "drop": drop.id, "file": drop.file_name, "checked_at": drop.checked_at,
            "errors": drop.errors, "warnings": drop.warnings,
            "errors_by_rule": dict(sorted(errors.items())),
            "warnings_by_rule": dict(sorted(warnings.items())),
        })
    total_errors = sum(i["errors"] for i in items)
    total_warnings = sum(i["warnings"] for i in items)
    summary = f"last checks: {total_errors} errors, {total_warnings} warnings in {len(items)} table(s)"
    return [Section("checks", "Checks", items, level, summary)]
