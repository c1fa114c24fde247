"""The Python face of studylog, for notebooks and scripts.

``open_study()`` finds the study like the command line does; ``create_study(path)`` makes one. The
``Study`` methods mirror the commands and call the same core functions, each in one transaction. Data may
be a path or a pandas DataFrame already in memory: a DataFrame is written to a temporary CSV (as
``DataFrame.to_csv`` writes it, without the index) and read exactly as a file would be, so that it gets
the same findings as the same data checked from the command line.

Results are dataclasses with ``to_dict()``, ``to_frame()`` where a table fits, and ``_repr_html_`` so that
a notebook shows them as tables.
"""

from __future__ import annotations

import html
import os
import tempfile
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from studylog.store.session import StoreLocation, locate, location_for_new, transaction

if TYPE_CHECKING:
    import pandas as pd
    from sqlalchemy.orm import Session

def _html_table(rows: list[dict[str, Any]], limit: int = 50) -> str:
    if not rows:
        return "<p><em>nothing</em></p>"
    columns: list[str] = []
    for row in rows:
        columns.extend(key for key in row if key not in columns)
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in columns)
    body = "".join(
        "<tr>" + "".join(f"<td>{html.escape(_short(row.get(c)))}</td>" for c in columns) + "</tr>"
        for row in rows[:limit]
    )
    more = f"<p>… {len(rows) - limit} more</p>" if len(rows) > limit else ""
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>{more}"


def _short(value: Any, limit: int = 80) -> str:
    text = "" if value is None else str(value)
    return text if len(text) <= limit else text[: limit - 1] + "…"


@dataclass
class Record:
    """One record (a variable, a decision, a question, a threat...) as the ``--json`` output gives it."""

    kind: str
    data: dict[str, Any]

    @property
    def id(self) -> Any:
        return self.data.get("id")

    def __getitem__(self, key: str) -> Any:
        return self.data[key]

    def to_dict(self) -> dict[str, Any]:
        return dict(self.data)

    def to_frame(self) -> pd.DataFrame:
        import pandas as pd

        return pd.DataFrame([{"field": k, "value": v} for k, v in self.data.items()])

    def _repr_html_(self) -> str:
        rows = [{"field": k, "value": v} for k, v in self.data.items() if v not in (None, [], {}, "")]
        return f"<strong>{html.escape(self.kind)}</strong>" + _html_table(rows)


@dataclass
class Records:
    """A listing of records of one kind."""

    kind: str
    rows: list[dict[str, Any]] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.rows)

    def __iter__(self) -> Iterator[dict[str, Any]]:
        return iter(self.rows)

    def __getitem__(self, index: int) -> dict[str, Any]:
        return self.rows[index]

    def to_dict(self) -> dict[str, Any]:
        return {"kind": self.kind, "rows": list(self.rows)}

    def to_frame(self) -> pd.DataFrame:
        import pandas as pd

        return pd.DataFrame(self.rows)

    def _repr_html_(self) -> str:
        return f"<strong>{html.escape(self.kind)} ({len(self.rows)})</strong>" + _html_table(self.rows)


@dataclass
class CheckReport:
    """The result of a check: the same document as ``check --json``."""

    document: dict[str, Any]

    @property
    def findings(self) -> list[dict[str, Any]]:
        return list(self.document.get("findings", []))

    @property
    def errors(self) -> int:
        return int(self.document.get("errors", 0))

    @property
    def warnings(self) -> int:
        return int(self.document.get("warnings", 0))

    @property
    def drop_id(self) -> int | None:
        return (self.document.get("drop") or {}).get("id")

    def to_dict(self) -> dict[str, Any]:
        return dict(self.document)

    def to_frame(self) -> pd.DataFrame:
        import pandas as pd

        columns = ["variable", "rule", "severity", "count", "rows", "keys", "values", "message"]
        return pd.DataFrame(self.findings, columns=columns)

    def _repr_html_(self) -> str:
        drop = self.document.get("drop") or {}
        title = (f"<strong>check of {html.escape(str(drop.get('file', '')))}</strong>: "
                 f"{self.errors} error(s), {self.warnings} warning(s)")
        rows = [{k: f.get(k) for k in ("variable", "rule", "severity", "count", "message")}
                for f in self.findings]
        return title + _html_table(rows)


@dataclass
class ProfileReport:
    """The result of a profile: the same document as ``profile --json``."""

    document: dict[str, Any]

    @property
    def variables(self) -> list[dict[str, Any]]:
        return list(self.document.get("variables", []))

    @property
    def suggestions(self) -> list[dict[str, Any]]:
        return list(self.document.get("suggestions", []))

    def to_dict(self) -> dict[str, Any]:
        return dict(self.document)

    def to_frame(self) -> pd.DataFrame:
        import pandas as pd

        flat = [{k: v for k, v in variable.items() if not isinstance(v, (list, dict))}
                for variable in self.variables]
        return pd.DataFrame(flat)

    def _repr_html_(self) -> str:
        rows = [{k: v for k, v in variable.items()
                 if k in ("name", "type", "count", "missing", "distinct", "min", "median", "max", "mean")}
                for variable in self.variables]
        head = (f"<strong>profile</strong>: {self.document.get('rows')} rows × "
                f"{self.document.get('columns')} columns")
        return head + _html_table(rows) + "<strong>suggestions</strong>" + _html_table(self.suggestions)


@contextmanager
def _as_file(data: Any, name: str | None) -> Iterator[Path]:
    """A path for the data: the path itself, or a DataFrame written to a temporary CSV."""
    if isinstance(data, (str, os.PathLike)):
        yield Path(data)
        return
    if not hasattr(data, "to_csv"):
        from studylog.errors import UsageError

        raise UsageError("data must be a file path or a pandas DataFrame")
    with tempfile.TemporaryDirectory(prefix="studylog-") as folder:
        path = Path(folder) / (name or "dataframe.csv")
        if path.suffix.lower() != ".csv":
            path = path.with_suffix(".csv")
        data.to_csv(path, index=False)
        yield path


class Study:
    """A study's store, with methods that mirror the command line."""

    def __init__(self, location: StoreLocation) -> None:
        self.location = location

    def __repr__(self) -> str:
        return f"Study({str(self.location.path or self.location.url)!r})"

    @contextmanager
    def _session(self, write: bool) -> Iterator[Session]:
        with transaction(self.location, write=write) as session:
            yield session

    # -- the dictionary ---------------------------------------------------------------------------
    def variables(self, table: str | None = None, *, role: str | None = None, type: str | None = None,
                  status: str | None = None) -> Records:
        """The dictionary's variables (``var list``)."""
        from studylog import dictionary

        with self._session(False) as session:
            rows = [dictionary.variable_dict(v) for v in
                    dictionary.variables(session, table=table, role=role, type=type, status=status)]
        return Records("variables", rows)

    def variable(self, name: str, table: str | None = None) -> Record:
        """One variable (``var show``)."""
        from studylog import dictionary

        with self._session(False) as session:
            return Record("variable", dictionary.variable_dict(dictionary.get_variable(session, name, table)))

    def add_table(self, name: str, *, grain: str | None = None, key: Sequence[str] | None = None,
                  description: str | None = None) -> Record:
        """A new table (``table add``)."""
        from studylog import dictionary

        with self._session(True) as session:
            created = dictionary.add_table(session, name, grain=grain, key=list(key) if key else None,
                                           description=description)
            return Record("table", dictionary.table_dict(created))

    def add_variable(self, name: str, type: str, *, table: str | None = None, **fields: Any) -> Record:
        """A new dictionary entry (``var add``); ``fields`` take the names of ``var show --json``."""
        from studylog import dictionary

        with self._session(True) as session:
            created = dictionary.add_variable(session, name, {"type": type, **fields}, table=table)
            return Record("variable", dictionary.variable_dict(created))

    def set_variable(self, name: str, *, table: str | None = None, why: str | None = None,
                     question: int | None = None, **changes: Any) -> Record:
        """Change a dictionary entry (``var set``); a confirmed entry needs ``why``."""
        from studylog import dictionary

        with self._session(True) as session:
            changed = dictionary.update_variable(session, name, changes, table=table, why=why,
                                                 question_id=question)
            return Record("variable", dictionary.variable_dict(changed))

    # -- the journal ------------------------------------------------------------------------------
    def log(self, text: str, *, kind: str | None = None, variables: Sequence[str] = (),
            why: str | None = None, evidence: str | None = None, alternatives: str | None = None,
            drop: int | None = None, code: str | None = None, assumption: str | None = None,
            seed: int | None = None, removed: int | None = None, proposed: bool = False) -> Record:
        """Record a decision (``log``)."""
        from studylog import journal

        with self._session(True) as session:
            return Record("decision", journal.log_decision(
                session, text, kind=kind, variables=list(variables), why=why, evidence=evidence,
                alternatives=alternatives, drop_id=drop, code=code, assumption=assumption, seed=seed,
                removed=removed, proposed=proposed))

    def decisions(self, *, kind: str | None = None, variable: str | None = None,
                  status: str | None = None) -> Records:
        """The decisions (``decisions``)."""
        from studylog import journal

        with self._session(False) as session:
            return Records("decisions", journal.list_decisions(session, kind=kind, variable=variable,
                                                               status=status))

    def note(self, text: str, *, variables: Sequence[str] = (), tags: Sequence[str] = ()) -> Record:
        """A note in the journal (``note``)."""
        return self._entry("note", text, variables, tags)

    def conclude(self, text: str, *, variables: Sequence[str] = ()) -> Record:
        """A conclusion (``conclude``)."""
        return self._entry("conclusion", text, variables, ())

    def next_step(self, text: str) -> Record:
        """A next step or further study (``next``)."""
        return self._entry("next", text, (), ())

    def _entry(self, kind: str, text: str, variables: Sequence[str], tags: Sequence[str]) -> Record:
        from studylog import notes

        with self._session(True) as session:
            return Record(kind, notes.add_entry(session, kind, text, variables=list(variables),
                                                tags=list(tags)))

    def timeline(self, *, since: str | None = None, variable: str | None = None) -> Records:
        """Every record and change in order (``timeline``)."""
        from studylog import notes

        with self._session(False) as session:
            return Records("timeline", notes.timeline(session, since=since, variable=variable))

    # -- questions and threats --------------------------------------------------------------------
    def ask(self, text: str, *, variables: Sequence[str] = (), to: str | None = None,
            priority: str | None = None) -> Record:
        """Put a question to someone who knows the data (``ask``)."""
        from studylog import questions

        with self._session(True) as session:
            return Record("question", questions.ask(session, text, variables=list(variables), to=to,
                                                    priority=priority))

    def answer(self, question: int, text: str, *, by: str | None = None) -> Record:
        """Record an answer (``answer``)."""
        from studylog import questions

        with self._session(True) as session:
            return Record("question", questions.answer(session, question, text, by=by))

    def questions(self, *, status: str | None = "open", to: str | None = None) -> Records:
        """The questions (``questions``); ``status="all"`` for every one."""
        from studylog import questions

        with self._session(False) as session:
            return Records("questions", questions.list_questions(session, status=status, to=to))

    def threat(self, text: str, *, kind: str, variables: Sequence[str] = (), decisions: Sequence[int] = (),
               severity: str | None = None, mitigation: str | None = None) -> Record:
        """Enter a threat to validity (``threat add``)."""
        from studylog import threats

        with self._session(True) as session:
            return Record("threat", threats.add(session, text, kind=kind, variables=list(variables),
                                                decisions=list(decisions), severity=severity,
                                                mitigation=mitigation))

    def threats(self, *, kind: str | None = None, status: str | None = None) -> Records:
        """The threats-to-validity register (``threats``)."""
        from studylog import threats

        with self._session(False) as session:
            return Records("threats", threats.list_threats(session, kind=kind, status=status))

    # -- data -------------------------------------------------------------------------------------
    def profile(self, data: Any, *, target: str | None = None, by: str | None = None, strong: float = 0.9,
                table: str | None = None, name: str | None = None) -> ProfileReport:
        """Profile a file or a DataFrame (``profile``)."""
        from studylog import profiling

        with _as_file(data, name) as path:
            return ProfileReport(profiling.profile_file(path, target=target, by=by, strong=strong,
                                                        table=table, location=self.location))

    def check(self, data: Any, table: str | None = None, *, label: str | None = None,
              dictionary: str | None = None, against: int | None = None, analysis: bool = False,
              record: bool = True, name: str | None = None) -> CheckReport:
        """Check a file or a DataFrame against the dictionary and record the drop (``check``).

        A DataFrame is recorded under ``name`` (default ``dataframe.csv``) as its file name.
        """
        from studylog import drops

        with _as_file(data, name) as path, self._session(record) as session:
            outcome = drops.check_file(session, path, table=table, label=label, version=dictionary,
                                       against=against, analysis=analysis, record=record)
            return CheckReport(outcome.document)

    # -- documents and status ---------------------------------------------------------------------
    def report(self, kind: str = "writeup", format: str = "md", *, min_cell: int | None = None) -> str:
        """A document as text (``report KIND --format md|html``)."""
        from studylog import report

        with self._session(False) as session:
            extra = {} if min_cell is None else {"min_cell": min_cell}
            return report.render(session, kind, fmt=format, **extra)

    def status(self) -> dict[str, Any]:
        """The study at a glance (``status --json``)."""
        from studylog import status

        with self._session(False) as session:
            return status.gather(session)


def open_study(path: str | os.PathLike[str] | None = None) -> Study:
    """The study at ``path`` (a studylog.db, its folder, or a SQLAlchemy URL), else the one found here."""
    location = locate(str(path) if path is not None else None)
    with transaction(location, write=False):
        pass
    return Study(location)


def create_study(path: str | os.PathLike[str], *, title: str | None = None, target: str | None = None,
                 index_time: str | None = None) -> Study:
    """A new study in ``path`` (a folder, or a .db file)."""
    from studylog import study

    location = location_for_new(str(path))
    study.create(location, title=title, target=target, index_time=index_time)
    return Study(location)


__all__ = ["CheckReport", "ProfileReport", "Record", "Records", "Study", "create_study", "open_study"]
