"""Drops over time: a checked drop compared with its earlier drop, from the store alone.

How the check pipeline (``studylog.drops``) plugs it in, around the one pass over the file::

    from studylog import comparison
    tracker = comparison.start(session, table, spec, columns, against=against_id,
                               bindings={variable: file_column, ...})      # before the pass
    checker = Checker(plan, observers=[..., tracker.observe])  # per batch; reuses the check's cell digests
    result = checker.finish()
    result.findings.extend(tracker.findings())     # orphan / info findings, before errors are counted
    ...                                            # the drop row is stored (or not: --no-record)
    tracker.store(session, drop, outcome)          # drop None with --no-record

``start`` resolves the earlier drop (the one named by ``--against``, else the latest recorded drop of the
same table) and loads what the foreign keys need (the key digests of each referenced table's latest
recorded drop). ``store`` (or ``finish``) stores the drop's record digests in ``digest_chunks``,
``drop.comparison`` = ``{"drift": [...], "records": {...}}`` ("records" only when the table has a key)
and ``drop.against_id``; with ``drop=None`` it compares without storing anything. In both cases it
puts "drift" and "records" into ``outcome.document`` (the check JSON) and, for a drop marked as the
analysed data set, takes the mark off the table's other drops. Columns are known by their variable's
name (``bindings``), so a column delivered under an alias compares with its earlier self. The earlier
drop's file is never re-read.

Also here: the drop history used by ``studylog drops``, ``drop show``, ``drift`` and ``status``, and
:func:`mark_analysed` (``check --analysis``: one drop per table carries the mark; marking another
moves it).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog.errors import NotFound, UsageError
from studylog.store.models import DataTable, DigestChunk, Drop, Finding, Profile

if TYPE_CHECKING:
    from studylog.data.check import BatchContext
    from studylog.data.check import Finding as CheckFinding
    from studylog.data.digests import RecordDigester, Records
    from studylog.data.record_comparison import OrphanCheck
    from studylog.data.spec import TableSpec


# ---- finding the drops ----------------------------------------------------------------------------


def get_drop(session: Session, drop_id: int) -> Drop:
    drop = session.get(Drop, drop_id)
    if drop is None:
        known = ", ".join(str(i) for i in session.scalars(select(Drop.id).order_by(Drop.id)))
        raise NotFound(f"no drop {drop_id} (drops: {known or 'none recorded yet'})")
    return drop


def latest_drop(session: Session, table_id: int, *, exclude: int | None = None) -> Drop | None:
    """The table's most recently recorded drop (leaving out drop ``exclude``)."""
    query = select(Drop).where(Drop.table_id == table_id)
    if exclude is not None:
        query = query.where(Drop.id != exclude)
    return session.scalars(query.order_by(Drop.checked_at.desc(), Drop.id.desc())).first()


def predecessor(session: Session, drop: Drop) -> Drop | None:
    """The drop of the same table recorded just before ``drop``."""
    query = select(Drop).where(Drop.table_id == drop.table_id, Drop.id != drop.id,
                               (Drop.checked_at < drop.checked_at)
                               | ((Drop.checked_at == drop.checked_at) & (Drop.id < drop.id)))
    return session.scalars(query.order_by(Drop.checked_at.desc(), Drop.id.desc())).first()


def earlier_drop(session: Session, table: DataTable, against: int | None,
                 *, exclude: int | None = None) -> Drop | None:
    """The drop to compare with: ``against`` if given (same table), else the table's latest drop."""
    if against is not None:
        drop = get_drop(session, against)
        if drop.table_id != table.id:
            raise UsageError(f"drop {against} is a drop of another table, not of '{table.name}'")
        return drop
    return latest_drop(session, table.id, exclude=exclude)


def load_records(session: Session, drop_id: int, kinds: tuple[str, ...] | None = None) -> Records:
    from studylog.data.digests import Records

    query = select(DigestChunk.kind, DigestChunk.seq, DigestChunk.data).where(DigestChunk.drop_id == drop_id)
    if kinds is not None:
        query = query.where(DigestChunk.kind.in_(kinds))
    # one chunk at a time, meta first: each is copied into place and let go (Records.from_chunks)
    rows = session.execute(query.order_by(DigestChunk.seq).execution_options(yield_per=1))
    return Records.from_chunks((k, s, bytes(d)) for k, s, d in rows)


def stored_profiles(session: Session, drop_id: int) -> dict[str, dict[str, Any]]:
    rows = session.scalars(select(Profile).where(Profile.drop_id == drop_id).order_by(Profile.id))
    return {p.variable: p.data for p in rows}


# ---- the plug into the check pipeline --------------------------------------------------------------


@dataclass
class Outcome:
    findings: list[CheckFinding] = field(default_factory=list)
    drift: list[dict[str, Any]] = field(default_factory=list)
    records: dict[str, Any] | None = None
    against_id: int | None = None


class Tracker:
    """Everything a drop is compared on, gathered during the check's one pass."""

    def __init__(self, table: DataTable, spec: TableSpec, columns: list[str],
                 earlier: Drop | None, bindings: dict[str, str] | None = None) -> None:
        self.table = table
        self.spec = spec
        # file column -> the name it is compared under (its variable's name where it is bound)
        self.names = {column: variable for variable, column in (bindings or {}).items()}
        self.file_columns = list(columns)
        self.columns = [self.names.get(c, c) for c in columns]
        self.earlier = earlier
        self.digester: RecordDigester | None = None
        self.orphans: list[tuple[str, OrphanCheck, Drop, DataTable]] = []
        self.notes: list[CheckFinding] = []
        self.exclude: int | None = None

    def observe(self, context: BatchContext) -> None:
        """A Checker observer: digest the batch, reusing the check's cell digests."""
        files = {self.names.get(c, c): c for c in self.file_columns}
        self.update(context.batch, column_digest=lambda name: context.digest(files.get(name, name)))

    def update(self, batch: Any, column_digest: Any = None) -> None:
        if self.names:
            batch = batch.rename_columns([self.names.get(c, c) for c in batch.schema.names])
        if self.digester is not None:
            self.digester.update(batch, column_digest)
        for _, orphan_check, _, _ in self.orphans:
            orphan_check.update(batch)

    def findings(self) -> list[CheckFinding]:
        """Orphan findings (errors) and notes (info) about foreign keys, once the pass is over."""
        return list(self.notes) + self._orphan_findings()

    def store(self, session: Session, drop: Drop | None, outcome: Any) -> None:
        """``finish`` for the check pipeline: also fills the check JSON and moves the analysed mark."""
        done = self.finish(session, drop, outcome.profiles)
        outcome.document["drift"] = done.drift
        if done.records is not None:
            outcome.document["records"] = done.records
        if drop is not None and drop.analysis:
            mark_analysed(session, drop)

    def finish(self, session: Session, drop: Drop | None,
               profiles: dict[str, dict[str, Any]]) -> Outcome:
        from studylog.data import drift

        outcome = Outcome(findings=self.findings())
        later = self.digester.finish() if self.digester is not None else None
        if self.earlier is not None:
            outcome.against_id = self.earlier.id
            compared = drift.compare_profiles(stored_profiles(session, self.earlier.id), profiles)
            outcome.drift = compared["variables"]
        if later is not None:
            outcome.records = self._records(session, later)
        if drop is not None:
            if later is not None:
                # one chunk at a time: written, then let go (a drop's digests are never all in memory)
                for kind, seq, data in later.iter_chunks(views=True):
                    chunk = DigestChunk(drop_id=drop.id, seq=seq, kind=kind, data=data)
                    session.add(chunk)
                    session.flush()
                    session.expunge(chunk)
                    del chunk, data
            drop.against_id = outcome.against_id
            drop.comparison = {"drift": outcome.drift} | (
                {"records": outcome.records} if outcome.records is not None else {})
        return outcome

    def _records(self, session: Session, later: Records) -> dict[str, Any]:
        from studylog.data.record_comparison import compare_records

        if self.earlier is None:
            return {"against": None, "new": None, "vanished": None, "changed": None,
                    "note": "no earlier drop of this table to compare with"}
        earlier = load_records(session, self.earlier.id)
        if earlier.rows == 0 and self.earlier.rows > 0:
            return {"against": self.earlier.id, "new": None, "vanished": None, "changed": None,
                    "note": f"drop {self.earlier.id} has no record digests (the table had no key then)"}
        if earlier.key != later.key:
            return {"against": self.earlier.id, "new": None, "vanished": None, "changed": None,
                    "note": f"the key changed from {', '.join(earlier.key)} to {', '.join(later.key)}"}
        result = compare_records(earlier, later)
        return records_dict(self.earlier.id, result, earlier, later)

    def _orphan_findings(self) -> list[CheckFinding]:
        from studylog.data.check import Finding as CheckFinding

        found = []
        for variable, check, parent_drop, parent in self.orphans:
            if check.count == 0:
                continue
            found.append(CheckFinding(
                variable=variable, rule="orphan", severity="error", count=check.count,
                rows=tuple(check.rows), keys=tuple(check.keys), values=tuple(check.values),
                message=(f"{check.count} row{'' if check.count == 1 else 's'} of {variable} match no key "
                         f"of table '{parent.name}' "
                         f"in its latest drop ({parent_drop.id}, {parent_drop.file_name})"),
            ))
        return found


def records_dict(against: int, result: Any, earlier: Records, later: Records) -> dict[str, Any]:
    """The ``records`` document of a comparison (check JSON, stored comparison, ``drift``)."""
    return {
        "against": against, "new": result.new, "vanished": result.vanished, "changed": result.changed,
        "unchanged": result.unchanged, "repeated_earlier": result.repeated_earlier,
        "repeated_later": result.repeated_later, "without_key": result.no_key_later,
        "changed_columns": result.changed_columns,
        "columns_added": result.columns_added, "columns_removed": result.columns_removed,
        **result.examples(earlier, later),
    }


def start(session: Session, table: DataTable, spec: TableSpec, columns: list[str], *,
          against: int | None = None, exclude: int | None = None,
          bindings: dict[str, str] | None = None) -> Tracker:
    """Prepare the comparison of a drop of ``table`` about to be checked (before the pass).

    ``columns``: the file's columns; ``bindings``: variable name -> the file column holding it;
    ``exclude``: the id of the new drop, if it is already in the session (it is not its own earlier drop).
    """
    from studylog.data.digests import RecordDigester

    tracker = Tracker(table, spec, columns, earlier_drop(session, table, against, exclude=exclude),
                      bindings)
    tracker.exclude = exclude
    key = list(spec.key)
    if key:
        masked = any(v.masked for v in spec.variables if v.name in key)
        tracker.digester = RecordDigester(key, columns, masked=masked)
    for variable in spec.variables:
        if variable.references and variable.checked_for_content:
            _prepare_orphans(session, tracker, variable)
    return tracker


def _prepare_orphans(session: Session, tracker: Tracker, variable: Any) -> None:
    from studylog.data.check import Finding as CheckFinding
    from studylog.data.record_comparison import OrphanCheck
    from studylog.dictionary import find_table

    def note(message: str) -> None:
        tracker.notes.append(CheckFinding(variable.name, "orphan", "info", 0, (), (), (), message))

    if variable.name not in tracker.columns:
        return
    column = variable.name
    table_name, _, column_name = variable.references.partition(".")
    parent = find_table(session, table_name)
    if parent is None:
        note(f"{variable.name} refers to table '{table_name}', which the dictionary does not know; "
             "orphans were not looked for")
        return
    if list(parent.key or []) != [column_name]:
        note(f"{variable.name} refers to {variable.references}, which is not the key of table "
             f"'{parent.name}' (key: {', '.join(parent.key or []) or 'none'}); orphans were not looked for")
        return
    parent_drop = latest_drop(session, parent.id, exclude=tracker.exclude)
    if parent_drop is None:
        note(f"table '{parent.name}' has no recorded drop yet, so orphans of {variable.name} "
             "could not be looked for; check a drop of it first")
        return
    parent_records = load_records(session, parent_drop.id, ("meta", "records"))
    if parent_records.rows == 0:
        note(f"drop {parent_drop.id} of table '{parent.name}' has no key digests; "
             f"orphans of {variable.name} were not looked for")
        return
    key_columns = list(tracker.spec.key) if all(k in tracker.columns for k in tracker.spec.key) else []
    check = OrphanCheck(column, parent_records.digests, key_columns, masked=variable.masked)
    tracker.orphans.append((variable.name, check, parent_drop, parent))


def mark_analysed(session: Session, drop: Drop) -> list[int]:
    """Make ``drop`` the analysed data set of its table; returns the ids of drops that lost the mark."""
    others = list(session.scalars(
        select(Drop).where(Drop.table_id == drop.table_id, Drop.analysis.is_(True), Drop.id != drop.id)))
    for other in others:
        other.analysis = False
    drop.analysis = True
    return [o.id for o in others]


# ---- drop history: drops, drop show, drift, status -----------------------------------------------


def _table_names(session: Session) -> dict[int, str]:
    return {t.id: t.name for t in session.scalars(select(DataTable))}


def _bands(drift: list[dict[str, Any]]) -> dict[str, int]:
    counts: dict[str, int] = {}
    for item in drift or []:
        if item.get("band"):
            counts[item["band"]] = counts.get(item["band"], 0) + 1
    return counts


def drop_dict(drop: Drop, table_name: str) -> dict[str, Any]:
    """One drop as ``studylog drops --json`` lists it."""
    comparison = drop.comparison or {}
    records = comparison.get("records") or None
    return {
        "id": drop.id, "label": drop.label, "table": table_name, "file": drop.file_name,
        "sha256": drop.sha256, "size": drop.size, "rows": drop.rows, "columns": drop.columns,
        "dictionary": drop.dictionary_version or (
            f"change {drop.dictionary_change}" if drop.dictionary_change is not None else None),
        "checked_at": drop.checked_at, "author": drop.author,
        "errors": drop.errors, "warnings": drop.warnings, "analysis": drop.analysis,
        "against": drop.against_id, "drift_bands": _bands(comparison.get("drift") or []),
        "records": None if records is None else
        {k: records.get(k) for k in ("against", "new", "vanished", "changed")},
    }


def list_drops(session: Session, table: str | None = None) -> list[dict[str, Any]]:
    from studylog.dictionary import resolve_table

    names = _table_names(session)
    query = select(Drop)
    if table is not None:
        query = query.where(Drop.table_id == resolve_table(session, table).id)
    drops = session.scalars(query.order_by(Drop.checked_at, Drop.id))
    return [drop_dict(d, names.get(d.table_id, "?")) for d in drops]


def finding_dict(finding: Finding) -> dict[str, Any]:
    return {"variable": finding.variable, "rule": finding.rule, "severity": finding.severity,
            "count": finding.count, "rows": finding.rows, "keys": finding.keys, "values": finding.values,
            "message": finding.message}


def show_drop(session: Session, drop_id: int) -> dict[str, Any]:
    """A drop with its findings, profile, the dictionary in force and the comparison with its earlier drop."""
    drop = get_drop(session, drop_id)
    names = _table_names(session)
    findings = session.scalars(select(Finding).where(Finding.drop_id == drop.id).order_by(Finding.id))
    comparison = drop.comparison or {}
    return {
        "drop": drop_dict(drop, names.get(drop.table_id, "?")),
        "columns_seen": drop.columns_seen,
        "findings": [finding_dict(f) for f in findings],
        "profile": list(stored_profiles(session, drop.id).values()),
        "comparison": {"against": drop.against_id, "drift": comparison.get("drift") or [],
                       "records": comparison.get("records")},
    }


def drift_between(session: Session, earlier_id: int | None = None, later_id: int | None = None,
                  *, table: str | None = None) -> dict[str, Any]:
    """Drift (and record changes, where both drops have digests) between any two drops.

    Without ids: the latest drop (of ``table``, when given) and the drop of its table before it.
    With one id: that drop and its predecessor.
    """
    from studylog.data import drift
    from studylog.data.record_comparison import compare_records
    from studylog.dictionary import resolve_table

    if earlier_id is not None and later_id is not None:
        earlier, later = get_drop(session, earlier_id), get_drop(session, later_id)
    else:
        if earlier_id is not None:
            later = get_drop(session, earlier_id)
        else:
            query = select(Drop)
            if table is not None:
                query = query.where(Drop.table_id == resolve_table(session, table).id)
            later = session.scalars(query.order_by(Drop.checked_at.desc(), Drop.id.desc())).first()
            if later is None:
                raise NotFound("no drop has been recorded yet; check one with 'studylog check FILE'")
        earlier = predecessor(session, later)
        if earlier is None:
            raise NotFound(f"drop {later.id} has no earlier drop of its table to compare with")
    if earlier.id == later.id:
        raise UsageError("give two different drops")
    names = _table_names(session)
    compared = drift.compare_profiles(stored_profiles(session, earlier.id), stored_profiles(session, later.id))
    records = None
    first, second = load_records(session, earlier.id), load_records(session, later.id)
    if first.rows and second.rows and first.key == second.key:
        records = records_dict(earlier.id, compare_records(first, second), first, second)
    return {
        "earlier": drop_dict(earlier, names.get(earlier.table_id, "?")),
        "later": drop_dict(later, names.get(later.table_id, "?")),
        "drift": compared["variables"], "only_earlier": compared["only_earlier"],
        "only_later": compared["only_later"], "records": records,
    }


def drop_sections(session: Session) -> list[Any]:
    """``studylog status``: the latest drop of each table, its drift bands and record counts."""
    from studylog.status import Section

    items = []
    level = "ok"
    for table in session.scalars(select(DataTable).order_by(DataTable.id)):
        drop = latest_drop(session, table.id)
        if drop is None:
            continue
        entry = drop_dict(drop, table.name)
        analysed = session.scalars(select(Drop.id).where(
            Drop.table_id == table.id, Drop.analysis.is_(True))).first()
        shifted = [d["variable"] for d in (drop.comparison or {}).get("drift") or []
                   if d.get("band") in ("moderate", "shifted")]
        if shifted:
            level = "warning"
        items.append({"table": table.name, "drop": drop.id, "file": drop.file_name, "rows": drop.rows,
                      "checked_at": drop.checked_at, "against": drop.against_id,
                      "drift_bands": entry["drift_bands"], "drifted": shifted,
                      "records": entry["records"], "analysed_drop": analysed})
    if not items:
        return [Section("drops", "Drops", [], "todo", "no drop checked yet")]
    summary = "; ".join(
        f"{i['table']}: drop {i['drop']}"
        + (f", {len(i['drifted'])} drifted" if i["drifted"] else "")
        + ("" if not i["records"] or i["records"].get("new") is None else
           f", records +{i['records']['new']} -{i['records']['vanished']} ~{i['records']['changed']}")
        for i in items)
    return [Section("drops", "Drops", items, level, summary)]
