"""The data every document template receives, read from the store (read-only) with privacy applied.

The context is plain JSON-able dicts and lists, the same for Markdown and HTML and for a user's own
``--template``; DEVELOPERS.md ("Documents") lists its keys. Privacy is applied HERE, before any template
sees the data, so that no template (ours or a user's) can show what must not leave the study:

- counts from 1 to ``min_cell - 1`` arrive as the text "<min_cell" (:func:`studylog.safety.small_count`);
- the observed extremes (min, max, end labels of a histogram) of quasi-identifiers are left out;
- no value of a direct-identifier, sensitive, free-text or identifier variable is included (no levels
  seen in the data, no summary values, no chart), only counts;
- finding rows, keys and example values are never included, and a checker's message only where it can
  hold no small count and no value of a private variable (:mod:`studylog.report_drops`).

Text written by people (descriptions, reasons) is passed as it was written; the templates render it
through the ``md`` filter, which for HTML is markdown-it-py with raw HTML disabled.
"""

from __future__ import annotations

import math
from collections import defaultdict
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from studylog import study as study_records
from studylog.data.spec import MASKED_SENSITIVITY, ROLES
from studylog.safety import small_count
from studylog.store.models import (
    Change,
    DataTable,
    Decision,
    DictionaryVersion,
    Drop,
    Entry,
    Link,
    Profile,
    Question,
    Threat,
    Variable,
)

ROLE_TITLES = {
    "target": "Target", "input": "Inputs", "identifier": "Identifiers", "time": "Time",
    "weight": "Weights", "stratum": "Strata", "cluster": "Clusters", "group": "Groups",
    "excluded": "Excluded from the analysis",
}
ROLE_ORDER = ("target", "input", "identifier", "time", "weight", "stratum", "cluster", "group", "excluded")
assert set(ROLE_ORDER) == set(ROLES)

# The journal's decision kinds (studylog.journal.KINDS) -> the methods subsection that reports them.
# One table, in the order of an analysis; a kind missing here is reported under "other".
METHOD_SECTIONS: list[tuple[str, str, tuple[str, ...]]] = [
    ("cleaning", "Cleaning and recoding",
     ("cleaning", "recoding", "duplicates", "merge-levels", "exclude-cases", "exclude-variables")),
    ("missing", "Missing data", ("missing",)),
    ("outliers", "Outliers", ("outliers",)),
    ("transform", "Transformations and scaling", ("transform",)),
    ("reduction", "Dimensionality reduction and feature selection",
     ("select-features", "extract-features")),
    ("design", "Sampling, split and validation design", ("sampling", "split")),
    ("model", "Modelling", ("model",)),
    ("evaluation", "Evaluation", ("metric",)),
    ("other", "Other decisions", ("other",)),
]
IN_FORCE = ("adopted", "implemented")
ASSUMPTION_TEXT = {
    "MCAR": "missing completely at random (MCAR)",
    "MAR": "missing at random given the observed data (MAR)",
    "MNAR": "missing not at random (MNAR)",
}
THREAT_KINDS = [
    ("internal", "Internal validity"),
    ("external", "External validity"),
    ("construct", "Construct validity"),
    ("statistical", "Statistical conclusion validity"),
]
NEXT_KINDS = ("next", "next-step")
MAX_LEVELS_SHOWN = 12
MASKED_TYPES = ("text", "identifier")

# The statistical definitions studylog's profiles and checks use (DESIGN.md, "Statistical definitions").
DEFINITIONS = [
    "Quartiles and deciles by linear interpolation (Hyndman and Fan 1996, type 7), exact; in a checked "
    "drop's stored profile, a column of more than 100,000 distinct values has them from a KLL quantile "
    "sketch (Apache DataSketches, k = 200) whose normalised rank error bound is stated with the profile.",
    "Tukey's fences at 1.5 and 3 times the spread between Tukey's hinges, as box plots draw them.",
    "Standard deviation with n − 1 in the denominator; skewness as the adjusted Fisher–Pearson "
    "coefficient G1.",
    "Modified z-score M = 0.6745 (x − median) / MAD, flagged when |M| > 3.5 (Iglewicz and Hoaglin "
    "1993); not computed when the MAD is 0.",
    "Pearson and Spearman correlations on each pair's complete cases (at least 10); Kendall's τ-b for "
    "pairs of ordinal variables.",
    "Cramér's V without continuity correction and its bias-corrected form (Bergsma 2013).",
    "Population Stability Index over bins from the earlier drop's deciles, missing values as their own "
    "bin; bands stable < 0.1 ≤ moderate ≤ 0.25 < shifted (common practice in credit scoring).",
    "A value listed among a variable's missing codes counts as missing, never as a type, level or range "
    "failure. Profiles are unweighted.",
]


class _Links:
    """Every link of the journal, read once: source -> variable ids and decision ids."""

    def __init__(self, session: Session) -> None:
        self.variables: dict[tuple[str, int], list[int]] = defaultdict(list)
        self.decisions: dict[tuple[str, int], list[int]] = defaultdict(list)
        for link in session.scalars(select(Link).order_by(Link.id)):
            key = (link.source_kind, link.source_id)
            if link.variable_id is not None:
                self.variables[key].append(link.variable_id)
            if link.decision_id is not None:
                self.decisions[key].append(link.decision_id)


class Study:
    """The store read once for one document: tables, variables, drops, decisions, links."""

    def __init__(self, session: Session, min_cell: int) -> None:
        self.session = session
        self.min_cell = min_cell
        self.study = study_records.get(session)
        self.tables = list(session.scalars(select(DataTable).order_by(DataTable.id)))
        self.variables = list(
            session.scalars(select(Variable).order_by(Variable.table_id, Variable.position, Variable.id))
        )
        self.variable_by_id = {v.id: v for v in self.variables}
        self.table_by_id = {t.id: t for t in self.tables}
        self.drops = list(session.scalars(select(Drop).order_by(Drop.checked_at, Drop.id)))
        self.decisions = list(session.scalars(select(Decision).order_by(Decision.created_at, Decision.id)))
        self.decision_by_id = {d.id: d for d in self.decisions}
        self.links = _Links(session)
        self.several_tables = len(self.tables) > 1

    # ---- small helpers ----

    def count(self, value: int | None) -> int | str | None:
        return small_count(value, self.min_cell)

    def share(self, part: int | None, whole: int | None) -> str | None:
        """A share as text; a part below the threshold is given only as a bound ("under 0.3%")."""
        if part is None or not whole:
            return None
        if self.small(part):
            return f"under {math.ceil(1000 * self.min_cell / whole) / 10:.1f}%"
        return f"{100 * part / whole:.1f}%"

    def small(self, count: int | None) -> bool:
        return count is not None and 0 < count < self.min_cell

    def complement(self, count: int | None, part: int | None) -> int | str | None:
        """``count`` where it does not give a small ``part`` away (present = rows - missing): else None."""
        return None if self.small(part) else self.count(count)

    def variable_name(self, variable: Variable) -> str:
        table = self.table_by_id[variable.table_id]
        return f"{table.name}.{variable.name}" if self.several_tables else variable.name

    def variable_names(self, kind: str, source_id: int) -> list[str]:
        return [
            self.variable_name(self.variable_by_id[i])
            for i in self.links.variables.get((kind, source_id), [])
            if i in self.variable_by_id
        ]

    @staticmethod
    def masked(variable: Variable) -> bool:
        return variable.sensitivity in MASKED_SENSITIVITY or variable.type in MASKED_TYPES \
            or variable.role == "identifier"

    def latest_drop(self, table_id: int) -> Drop | None:
        found = [d for d in self.drops if d.table_id == table_id]
        return found[-1] if found else None

    def profiles(self, drop: Drop | None) -> dict[str, dict[str, Any]]:
        if drop is None:
            return {}
        rows = self.session.scalars(select(Profile).where(Profile.drop_id == drop.id))
        return {p.variable: p.data or {} for p in rows}

    def post_hoc(self, decision: Decision) -> bool:
        frozen = self.study.plan_frozen_at
        return bool(decision.post_hoc) or (frozen is not None and decision.created_at > frozen)


def _date(stamp: str | None) -> str | None:
    return stamp[:10] if stamp else None


def study_context(s: Study) -> dict[str, Any]:
    study = s.study
    return {
        "title": study.title, "description": study.description, "target": study.target,
        "index_time": study.index_time, "plan_frozen_at": study.plan_frozen_at,
        "plan_frozen_on": _date(study.plan_frozen_at), "plan_note": study.plan_note,
        "created_on": _date(study.created_at), "author": study.author,
    }


# ---- the dictionary ----

def version_context(s: Study) -> dict[str, Any] | None:
    version = s.session.scalars(
        select(DictionaryVersion).order_by(DictionaryVersion.id.desc()).limit(1)
    ).first()
    if version is None:
        return None
    since = s.session.scalars(
        select(Change.id).where(
            Change.entity.in_(("variable", "table", "rule")), Change.id > (version.change_id or 0)
        )
    ).all()
    return {"name": version.name, "note": version.note, "frozen_on": _date(version.created_at),
            "author": version.author, "changes_since": len(since)}


# ---- decisions and the methods ----

def _facts(s: Study, decision: Decision) -> list[dict[str, Any]]:
    """The numbers a decision rested on, as captured by the journal, with small counts withheld."""
    found = []
    for name, fact in (decision.facts or {}).items():
        if not isinstance(fact, dict) or not fact.get("present", True):
            continue
        outliers = fact.get("outliers") or {}
        found.append({
            "variable": name, "drop": fact.get("drop"), "rows": s.count(fact.get("rows")),
            "n": s.complement(fact.get("n"), fact.get("missing")), "missing": s.count(fact.get("missing")),
            "missing_share": s.share(fact.get("missing"), fact.get("rows")),
            "outliers": {k: s.count(v) for k, v in outliers.items() if v is not None},
        })
    return found


def decision_context(s: Study, decision: Decision) -> dict[str, Any]:
    code = None
    if decision.code_path:
        code = decision.code_path + (f":{decision.code_line}" if decision.code_line else "")
    successor = next((d.id for d in s.decisions if d.supersedes_id == decision.id), None)
    ended = None
    if decision.status in ("superseded", "reverted"):
        change = s.session.scalars(
            select(Change).where(Change.entity == "decision", Change.entity_id == decision.id,
                                 Change.action.in_(("supersede", "revert")))
            .order_by(Change.id).limit(1)
        ).first()
        ended = None if change is None else {"why": change.why, "on": _date(change.at)}
    return {
        "id": decision.id, "ref": f"D{decision.id}", "text": decision.text, "kind": decision.kind,
        "status": decision.status, "why": decision.why, "evidence": decision.evidence,
        "alternatives": decision.alternatives, "variables": s.variable_names("decision", decision.id),
        "drop": decision.drop_id, "code": code,
        "commit": decision.git_commit[:12] if decision.git_commit else None,
        "dirty": bool(decision.git_dirty), "assumption": decision.assumption,
        "assumption_text": ASSUMPTION_TEXT.get(decision.assumption or ""), "seed": decision.seed,
        "removed": s.count(decision.removed), "post_hoc": s.post_hoc(decision),
        "taken_on": _date(decision.created_at), "author": decision.author,
        "supersedes": decision.supersedes_id, "superseded_by": successor, "ended": ended,
        "facts": _facts(s, decision),
    }


def _decision_table(s: Study, decision: Decision) -> int | None:
    if decision.drop_id is not None:
        drop = next((d for d in s.drops if d.id == decision.drop_id), None)
        if drop is not None:
            return drop.table_id
    for variable_id in s.links.variables.get(("decision", decision.id), []):
        if variable_id in s.variable_by_id:
            return s.variable_by_id[variable_id].table_id
    return None


def record_flows(s: Study) -> list[dict[str, Any]]:
    """Per table with a drop marked as the analysed data set: received, removed at each step, analysed.

    Received is the analysed drop's row count; each step is a decision in force that records how many
    records it removed (``log --removed N``), in the order taken; analysed is received less the removed.
    A decision counts for the table of its drop, else of its first variable; one that names neither
    counts for the analysed table when only one table has an analysed drop.
    """
    flows = []
    analysed_tables = {d.table_id for d in s.drops if d.analysis}
    for table in s.tables:
        own = [d for d in s.drops if d.analysis and d.table_id == table.id]
        if not own:
            continue
        analysed = own[-1]
        steps = [d for d in s.decisions if d.removed is not None and d.status in IN_FORCE
                 and _decision_table(s, d) in ((table.id, None) if len(analysed_tables) == 1
                                               else (table.id,))]
        left = analysed.rows - sum(d.removed or 0 for d in steps)
        flows.append({
            "table": table.name,
            "drop": {"id": analysed.id, "label": analysed.label, "checked_on": _date(analysed.checked_at)},
            "received": s.count(analysed.rows),
            "steps": [decision_context(s, d) for d in steps],
            "analysed": s.count(left),
            "negative": left < 0,
        })
    return flows


def methods_context(s: Study) -> dict[str, Any]:
    from studylog.report_drops import drops_context  # it builds on this module's Study

    in_force = [d for d in s.decisions if d.status in IN_FORCE]
    flows = record_flows(s)
    in_flow = {step["id"] for flow in flows for step in flow["steps"]}
    known = {kind for _, _, kinds in METHOD_SECTIONS for kind in kinds}
    sections = []
    for key, title, kinds in METHOD_SECTIONS:
        chosen = [d for d in in_force if d.id not in in_flow
                  and (d.kind in kinds or (key == "other" and d.kind not in known))]
        sections.append({"key": key, "title": title,
                         "decisions": [decision_context(s, d) for d in chosen]})
    commits: dict[str, list[str]] = defaultdict(list)
    for d in in_force:
        if d.git_commit:
            commits[d.git_commit[:12]].append(f"D{d.id}")
    pre = [d for d in in_force if not s.post_hoc(d)]
    weights = [s.variable_name(v) for v in s.variables if v.role == "weight" and v.status != "deprecated"]
    errors = [p.data.get("quantile_error") for p in s.session.scalars(select(Profile))
              if isinstance(p.data, dict) and p.data.get("quantile_error")]
    return {
        "tables": [{"name": t.name, "grain": t.grain, "key": list(t.key or []),
                    "variables": sum(1 for v in s.variables if v.table_id == t.id
                                     and v.status != "deprecated")} for t in s.tables],
        "version": version_context(s),
        "drops": drops_context(s),
        "flows": flows,
        "sections": sections,
        "plan": {"frozen_on": _date(s.study.plan_frozen_at), "note": s.study.plan_note,
                 "pre_specified": len(pre), "post_hoc": len(in_force) - len(pre)},
        "commits": [{"commit": c, "decisions": refs} for c, refs in commits.items()],
        "definitions": DEFINITIONS,
        "weights": weights,
        "quantile_error": max(errors) if errors else None,
        "appendix": {
            "ended": [decision_context(s, d) for d in s.decisions if d.status in ("superseded", "reverted")],
            "proposed": [decision_context(s, d) for d in s.decisions if d.status == "proposed"],
        },
    }


# ---- validity, conclusions, questions ----

def _threat_context(s: Study, threat: Threat) -> dict[str, Any]:
    return {
        "id": threat.id, "ref": f"T{threat.id}", "text": threat.text, "kind": threat.kind,
        "severity": threat.severity, "mitigation": threat.mitigation, "status": threat.status,
        "variables": s.variable_names("threat", threat.id),
        "decisions": [f"D{i}" for i in s.links.decisions.get(("threat", threat.id), [])],
        "recorded_on": _date(threat.created_at),
    }


def _question_context(s: Study, question: Question) -> dict[str, Any]:
    return {
        "id": question.id, "ref": f"Q{question.id}", "text": question.text, "to": question.to,
        "priority": question.priority, "status": question.status, "asked_on": _date(question.created_at),
        "author": question.author, "variables": s.variable_names("question", question.id),
    }


def open_questions(s: Study) -> list[dict[str, Any]]:
    rows = s.session.scalars(select(Question).where(Question.status == "open").order_by(Question.id))
    return [_question_context(s, q) for q in rows]


def validity_context(s: Study) -> dict[str, Any]:
    threats = list(s.session.scalars(select(Threat).order_by(Threat.id)))
    statuses = s.session.scalars(select(Question.status)).all()
    return {
        "groups": [{"kind": kind, "title": title,
                    "threats": [_threat_context(s, t) for t in threats if t.kind == kind]}
                   for kind, title in THREAT_KINDS],
        "limitations": open_questions(s),
        "answered": statuses.count("answered"), "withdrawn": statuses.count("withdrawn"),
    }


def conclusions_context(s: Study) -> dict[str, Any]:
    entries = list(s.session.scalars(select(Entry).order_by(Entry.created_at, Entry.id)))
    threats = list(s.session.scalars(select(Threat).order_by(Threat.id)))
    threat_vars: dict[int, set[int]] = {}
    for threat in threats:
        found = set(s.links.variables.get(("threat", threat.id), []))
        for decision_id in s.links.decisions.get(("threat", threat.id), []):
            found.update(s.links.variables.get(("decision", decision_id), []))
        threat_vars[threat.id] = found
    conclusions = []
    for entry in entries:
        if entry.kind != "conclusion":
            continue
        own = set(s.links.variables.get(("entry", entry.id), []))
        bearing = [_threat_context(s, t) for t in threats if own & threat_vars[t.id]]
        conclusions.append({"id": entry.id, "text": entry.text, "on": _date(entry.created_at),
                            "author": entry.author, "variables": s.variable_names("entry", entry.id),
                            "threats": bearing})
    return {
        "conclusions": conclusions,
        "study_wide_threats": [_threat_context(s, t) for t in threats if not threat_vars[t.id]],
        "next_steps": [{"id": e.id, "text": e.text, "on": _date(e.created_at), "author": e.author}
                       for e in entries if e.kind in NEXT_KINDS],
    }


def questions_context(s: Study) -> dict[str, Any]:
    questions = open_questions(s)
    by_person: dict[str, list[dict[str, Any]]] = defaultdict(list)
    for question in questions:
        by_person[question.get("to") or "(nobody named)"].append(question)
    statuses = s.session.scalars(select(Question.status)).all()
    return {
        "open": questions,
        "by_person": [{"to": to, "questions": qs} for to, qs in sorted(by_person.items())],
        "answered": statuses.count("answered"), "withdrawn": statuses.count("withdrawn"),
    }
