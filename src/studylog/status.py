"""``studylog status``: the study at a glance, built from sections that each part of studylog provides.

A section provider is a function ``(session) -> list[Section]``; add it to ``PROVIDERS`` as
"module:function". Providers are imported only when status runs.
"""

from __future__ import annotations

import importlib
from dataclasses import asdict, dataclass, field
from typing import Any

from sqlalchemy.orm import Session

from studylog import study as study_records

PROVIDERS: list[str] = [
    "studylog.status:study_sections",
    "studylog.dictionary_status:sections",
    "studylog.questions:status_sections",
    "studylog.threats:status_sections",
    "studylog.journal:status_sections",
    "studylog.drops:status_sections",
    "studylog.comparison:drop_sections",
]


@dataclass
class Section:
    """One block of the status: a name for scripts, a title for people, and its items."""

    name: str
    title: str
    items: list[dict[str, Any]] = field(default_factory=list)
    # "ok", "todo" (something for the analyst to do) or "warning"
    level: str = "ok"
    summary: str = ""

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


def study_sections(session: Session) -> list[Section]:
    study = study_records.get(session)
    items: list[dict[str, Any]] = []
    level = "ok"
    if not study.target:
        items.append({"problem": "no target is set", "hint": "say which variable is the outcome"})
        level = "warning"
    if not study.index_time:
        items.append(
            {"problem": "no index time is set",
             "hint": "say when a prediction is made; variables available after it would leak"}
        )
        level = "warning"
    summary = f"target: {study.target or '-'}; index time: {study.index_time or '-'}"
    return [Section("study", "Study", items, level, summary)]


def gather(session: Session) -> dict[str, Any]:
    sections: list[Section] = []
    for path in PROVIDERS:
        module_name, function_name = path.split(":")
        provider = getattr(importlib.import_module(module_name), function_name)
        sections.extend(provider(session))
    return {
        "study": study_records.as_dict(study_records.get(session)),
        "sections": [s.to_dict() for s in sections],
    }
