"""An invented study for the document tests, written straight into the store's models.

Two tables (members, visits), a frozen dictionary version, three checked drops with findings and
profiles, decisions (pre-specified and post hoc; superseded, reverted, proposed; two with removed
records), questions, threats, a note, conclusions and a next step. Invented data for the tests only.

Hostile and private content is planted on purpose: a description with ``<script>`` and an ``onerror=``
attribute, Markdown with raw HTML and an image, levels of a sensitive variable ("HIV-positive"),
identifier values, extremes of a quasi-identifier (age 17 and 103) and counts below 5.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy.orm import Session

from studylog.store.models import (
    Change,
    DataTable,
    Decision,
    DictionaryVersion,
    Drop,
    Entry,
    Finding,
    Link,
    Profile,
    Question,
    Rule,
    Study,
    Threat,
    Variable,
)
from studylog.store.session import locate, transaction

HOSTILE = "Measured at triage. <script>alert('x')</script> <img src=x onerror=alert(1)>"
RAW_HTML_MD = ("Free text from the form, see [the form](javascript:alert(1)).\n\n"
               "<div onclick=\"steal()\">raw block</div>\n\n![tracker](http://example.invalid/t.png)")
SECRET_LEVEL = "HIV-positive"
MEMBER_ID_VALUE = "M-000123"
AGE_MIN, AGE_MAX = 17, 103
BP_LABEL = "Systolic blood pressure"


def stamp(day: int, hour: int = 9) -> str:
    return f"2026-03-{day:02d}T{hour:02d}:00:00.000000Z"


@dataclass
class Built:
    ids: dict[str, int]


def _variable(table: DataTable, position: int, name: str, type_: str, **fields: Any) -> Variable:
    defaults: dict[str, Any] = {
        "aliases": [], "derived_from": [], "levels": [], "true_values": [], "false_values": [],
        "missing_codes": [], "role": "input", "sensitivity": "none", "status": "draft",
        "required": False, "unique": False,
    }
    defaults.update(fields)
    return Variable(table_id=table.id, position=position, name=name, type=type_,
                    created_at=stamp(1), updated_at=stamp(1), author="analyst", **defaults)


def _decision(day: int, text: str, kind: str, **fields: Any) -> Decision:
    return Decision(text=text, kind=kind, created_at=stamp(day), updated_at=stamp(day), author="analyst",
                    facts=fields.pop("facts", {}), **fields)


def build(session: Session) -> Built:
    ids: dict[str, int] = {}
    study = session.query(Study).first()
    assert study is not None
    study.title = "Clinic readmission study"
    study.description = "Which patients come back within **30 days** of discharge?"
    study.target = "readmitted"
    study.index_time = "the day of discharge"
    study.plan_frozen_at = stamp(10)
    study.plan_note = "agreed with the clinical lead"

    members = DataTable(name="members", grain="one row per patient", key=["member_id"],
                        description="Patients registered at the clinic.", created_at=stamp(1),
                        updated_at=stamp(1), author="analyst")
    visits = DataTable(name="visits", grain="one row per hospital stay", key=["visit_id"],
                       description="Hospital stays with their discharge outcome.", created_at=stamp(1),
                       updated_at=stamp(1), author="analyst")
    session.add_all([members, visits])
    session.flush()
    variables = [
        _variable(members, 1, "member_id", "identifier", role="identifier", required=True, unique=True,
                  sensitivity="direct-identifier", label="Patient number", pattern="^M-[0-9]{6}$"),
        _variable(members, 2, "age", "integer", label="Age at registration", unit="years",
                  minimum="0", maximum="120", plausible_min="16", plausible_max="100",
                  missing_codes=[{"code": "-99", "label": "refused"}], sensitivity="quasi-identifier",
                  source="reported", status="confirmed", confirmed_by="data owner",
                  confirmed_at=stamp(3)),
        _variable(members, 3, "sex", "categorical", label="Sex recorded at registration",
                  levels=[{"code": "F", "label": "female"}, {"code": "M", "label": "male"}],
                  missing_codes=[{"code": "9", "label": "not recorded"}], source="administrative"),
        _variable(visits, 1, "visit_id", "identifier", role="identifier", required=True, unique=True),
        _variable(visits, 2, "member_id", "identifier", role="identifier", references="members.member_id",
                  sensitivity="direct-identifier"),
        _variable(visits, 3, "discharged", "date", role="time", date_format="%Y-%m-%d",
                  time_association="day of discharge", availability="at"),
        _variable(visits, 4, "systolic_bp", "number", label=BP_LABEL, unit="mmHg", precision=0,
                  description=HOSTILE, source="measured", instrument="automatic cuff, model 2",
                  minimum="40", maximum="300", plausible_min="70", plausible_max="250",
                  availability="before", max_missing=0.1),
        _variable(visits, 5, "income", "number", label="Household income", unit="EUR per year",
                  sensitivity="sensitive", missing_codes=[{"code": "-99", "label": "refused"},
                                                          {"code": "-98", "label": "don't know"}],
                  question_text="What was your household's income last year?", source="reported"),
        _variable(visits, 6, "diagnosis", "categorical", label="Main diagnosis", sensitivity="sensitive",
                  levels=[{"code": "A", "label": "cardiac"}, {"code": "B", "label": "respiratory"}]),
        _variable(visits, 7, "comment", "text", label="Nurse's comment", description=RAW_HTML_MD),
        _variable(visits, 8, "readmitted", "boolean", role="target", label="Readmitted within 30 days",
                  true_values=["yes"], false_values=["no"], required=True, availability="after",
                  derivation="a new stay starting within 30 days of discharge",
                  derived_from=["discharged"]),
    ]
    session.add_all(variables)
    session.flush()
    by_name = {f"{v.table_id}.{v.name}": v for v in variables}
    var = {name: by_name[f"{table.id}.{name.split('.')[-1]}"] for name, table in [
        ("member_id", members), ("age", members), ("sex", members), ("visit_id", visits),
        ("visits.member_id", visits), ("discharged", visits), ("systolic_bp", visits),
        ("income", visits), ("diagnosis", visits), ("comment", visits), ("readmitted", visits)]}
    ids.update({f"var:{k}": v.id for k, v in var.items()})
    for v in variables:
        session.add(Change(entity="variable", entity_id=v.id, action="create", author="analyst", at=stamp(1)))
    session.add(Change(entity="variable", entity_id=var["age"].id, action="update", field="maximum",
                       old="110", new="120", why="the registry accepts ages up to 120",
                       author="analyst", at=stamp(3)))
    session.add(Rule(table_id=visits.id, name="bp-plausible", expression="systolic_bp > 0",
                     severity="error", why="a pressure is positive", author="analyst", created_at=stamp(2)))
    session.flush()
    last_change = session.query(Change).order_by(Change.id.desc()).first()
    session.add(DictionaryVersion(name="agreed-v1", note="agreed with the data owner",
                                  change_id=last_change.id if last_change else None,
                                  snapshot={"tables": []}, author="analyst", created_at=stamp(4)))
    # one change after the version
    session.add(Change(entity="variable", entity_id=var["sex"].id, action="update", field="label",
                       old=None, new="Sex recorded at registration", author="analyst", at=stamp(5)))

    drop1 = Drop(table_id=members.id, label="members, first delivery", file_name="members-2026-03.csv",
                 sha256="a" * 64, size=1000, rows=800, columns=3, columns_seen=["member_id", "age", "sex"],
                 dictionary_version="agreed-v1", errors=1, warnings=0, checked_at=stamp(5),
                 author="analyst")
    drop2 = Drop(table_id=visits.id, label="visits, March", file_name="visits-2026-03.csv",
                 sha256="b" * 64, size=5000, rows=1200, columns=8, dictionary_version="agreed-v1",
                 errors=2, warnings=1, checked_at=stamp(6), author="analyst")
    session.add_all([drop1, drop2])
    session.flush()
    drop3 = Drop(table_id=visits.id, label="visits, April", file_name="visits-2026-04.csv",
                 sha256="c" * 64, size=5200, rows=1250, columns=8, dictionary_version="agreed-v1",
                 errors=1, warnings=0, analysis=True, against_id=drop2.id, checked_at=stamp(12),
                 author="analyst",
                 comparison={"drift": [{"variable": "systolic_bp", "measure": "psi", "value": 0.17,
                                        "band": "moderate", "n_earlier": 1200, "n_later": 1250},
                                       {"variable": "readmitted", "measure": "psi", "value": 0.01,
                                        "band": "stable"}],
                             "records": {"against": drop2.id, "new": 52, "vanished": 2, "changed": 40}})
    session.add(drop3)
    session.flush()
    ids.update(drop1=drop1.id, drop2=drop2.id, drop3=drop3.id)
    session.add_all([
        Finding(drop_id=drop1.id, variable="age", rule="range", severity="error", count=3, rows=[4, 9, 77],
                keys=[MEMBER_ID_VALUE, "M-000456", "M-000789"], values=["130", "-4", "150"],
                message="3 values outside the possible range 0 to 120"),
        Finding(drop_id=drop2.id, variable="income", rule="missing-share", severity="warning", count=130,
                message="130 missing of 1200 (10.8%) above the largest share 5%"),
        Finding(drop_id=drop2.id, variable="diagnosis", rule="level", severity="error", count=7,
                values=["[masked]"], message=f"7 values not among the levels, e.g. {SECRET_LEVEL}"),
        Finding(drop_id=drop2.id, variable="visit_id", rule="key", severity="error", count=12,
                keys=["V-1", "V-2"], message="12 rows repeat an earlier key"),
        Finding(drop_id=drop3.id, variable="member_id", rule="orphan", severity="error", count=2,
                keys=[MEMBER_ID_VALUE], values=[MEMBER_ID_VALUE],
                message="2 rows refer to a member not in the members table"),
    ])
    session.add_all([
        Profile(drop_id=drop1.id, variable="age", data={
            "name": "age", "type": "integer", "rows": 800, "count": 790, "missing": 10,
            "missing_codes": [{"code": "-99", "count": 3}], "distinct": 70, "distinct_exact": True,
            "min": AGE_MIN, "max": AGE_MAX, "mean": 51.2, "sd": 17.9, "q1": 38.0, "median": 52.0,
            "q3": 64.0, "deciles": [28, 33, 38, 44, 52, 57, 61, 68, 75], "quantile_error": 0,
            "histogram": {"edges": [AGE_MIN, 35, 52, 69, 86, AGE_MAX], "counts": [150, 240, 250, 148, 2]},
        }),
        Profile(drop_id=drop1.id, variable="sex", data={
            "name": "sex", "type": "categorical", "rows": 800, "count": 798, "missing": 2,
            "missing_codes": [{"code": "9", "count": 2}], "distinct": 3, "distinct_exact": True,
            "levels": [{"value": "F", "count": 410}, {"value": "M", "count": 386},
                       {"value": "X", "count": 2}], "levels_other": 0,
        }),
        Profile(drop_id=drop1.id, variable="member_id", data={
            "name": "member_id", "type": "identifier", "rows": 800, "count": 800, "missing": 0,
            "distinct": 800, "distinct_exact": True,
            "levels": [{"value": MEMBER_ID_VALUE, "count": 1}], "levels_other": 799,
        }),
        Profile(drop_id=drop3.id, variable="systolic_bp", data={
            "name": "systolic_bp", "type": "number", "rows": 1250, "count": 1240, "missing": 10,
            "missing_codes": [], "distinct": 140, "distinct_exact": True, "min": 82.0, "max": 231.0,
            "mean": 131.5, "sd": 18.2, "q1": 119.0, "median": 130.0, "q3": 143.0,
            "deciles": [108, 114, 119, 125, 130, 134, 139, 146, 155], "quantile_error": 0.0133,
            "histogram": {"edges": [82, 112, 142, 172, 202, 231], "counts": [260, 640, 300, 37, 3]},
            "outliers": {"tukey": 21, "tukey_far": 3, "modified_z": 4},
        }),
        Profile(drop_id=drop3.id, variable="income", data={
            "name": "income", "type": "number", "rows": 1250, "count": 1100, "missing": 150,
            "missing_codes": [{"code": "-99", "count": 120}, {"code": "-98", "count": 4}],
            "distinct": 900, "distinct_exact": True, "min": 4321.0, "max": 987123.0, "mean": 41234.5,
            "sd": 20000.0, "q1": 25000.0, "median": 38000.0, "q3": 52000.0,
            "histogram": {"edges": [4321, 50000, 987123], "counts": [800, 300]},
        }),
        Profile(drop_id=drop3.id, variable="diagnosis", data={
            "name": "diagnosis", "type": "categorical", "rows": 1250, "count": 1250, "missing": 0,
            "distinct": 3, "distinct_exact": True,
            "levels": [{"value": "A", "count": 700}, {"value": "B", "count": 546},
                       {"value": SECRET_LEVEL, "count": 4}], "levels_other": 0,
        }),
        Profile(drop_id=drop3.id, variable="readmitted", data={
            "name": "readmitted", "type": "boolean", "rows": 1250, "count": 1250, "missing": 0,
            "distinct": 2, "distinct_exact": True,
            "levels": [{"value": "no", "count": 1100}, {"value": "yes", "count": 150}], "levels_other": 0,
        }),
        Profile(drop_id=drop3.id, variable="discharged", data={
            "name": "discharged", "type": "date", "rows": 1250, "count": 1250, "missing": 0,
            "distinct": 300, "distinct_exact": False, "min": "2025-01-02", "max": "2026-03-30",
        }),
    ])

    d1 = _decision(7, "Recode sex X as not recorded", "recoding", why="X was a data-entry placeholder",
                   drop_id=drop1.id, code_path="prep/clean.py", code_line=12, git_commit="0123456789abcdef",
                   git_dirty=False, status="implemented")
    d2 = _decision(8, "Impute income by chained equations", "missing", why="Income is missing for 11%.",
                   assumption="MAR", drop_id=drop2.id, alternatives="complete-case analysis",
                   facts={"income": {"table": "visits", "drop": drop2.id, "present": True, "rows": 1200,
                                     "n": 1070, "missing": 130, "missing_share": 130 / 1200}})
    d3 = _decision(9, "Exclude stays before 2025", "exclude-cases", removed=40, drop_id=drop3.id,
                   why="outside the study period", status="implemented", git_commit="fedcba9876543210",
                   git_dirty=True, code_path="prep/select.py")
    d4 = _decision(9, "Remove repeated stays", "duplicates", removed=3, drop_id=drop3.id,
                   why="the same stay delivered twice", status="implemented")
    d5 = _decision(9, "Hold out 20% of patients", "split", seed=20260301, why="patients, not stays, are split")
    d6 = _decision(9, "Winsorise systolic_bp at the 1st and 99th percentiles", "outliers",
                   status="superseded")
    d8 = _decision(11, "Log-transform income", "transform", status="reverted", post_hoc=True)
    d9 = _decision(11, "Try gradient boosting", "model", status="proposed", post_hoc=True)
    d10 = _decision(13, "Logistic regression with a spline in systolic_bp", "model", post_hoc=True,
                    why="the relation looked non-linear")
    session.add_all([d1, d2, d3, d4, d5, d6, d8, d9, d10])
    session.flush()
    d7 = _decision(13, "Keep systolic_bp extremes and use a robust model", "outliers", post_hoc=True,
                   supersedes_id=d6.id, why="the extremes are real readings",
                   facts={"systolic_bp": {"drop": drop3.id, "present": True, "rows": 1250, "n": 1240,
                                          "missing": 10, "outliers": {"tukey": 21, "tukey_far": 3,
                                                                      "modified_z": 4}}})
    session.add(d7)
    session.flush()
    ids.update({f"d{i}": d.id for i, d in
                [(1, d1), (2, d2), (3, d3), (4, d4), (5, d5), (6, d6), (7, d7), (8, d8), (9, d9), (10, d10)]})
    session.add_all([
        Change(entity="decision", entity_id=d6.id, action="supersede", field="status", old="adopted",
               new="superseded", why="the extremes are real readings", author="analyst", at=stamp(13)),
        Change(entity="decision", entity_id=d8.id, action="revert", field="status", old="adopted",
               new="reverted", why="the model does not need it", author="analyst", at=stamp(14)),
    ])
    for decision, variable in [(d1, "sex"), (d2, "income"), (d5, "visits.member_id"), (d6, "systolic_bp"),
                               (d7, "systolic_bp"), (d8, "income"), (d10, "systolic_bp")]:
        session.add(Link(source_kind="decision", source_id=decision.id, variable_id=var[variable].id))

    questions = [
        Question(text="Is -99 in income a refusal?", to="data owner", priority="high", status="open",
                 author="analyst", created_at=stamp(6)),
        Question(text="Which cuff model was used in 2025?", to="clinic lab", status="open",
                 author="analyst", created_at=stamp(7)),
        Question(text="Are ages above 100 real?", to="data owner", status="answered", answer="yes",
                 answered_by="data owner", answered_at=stamp(8), author="analyst", created_at=stamp(6)),
        Question(text="Is diagnosis coded by ICD-10?", to="data owner", status="withdrawn",
                 withdrawn_why="found in the manual", author="analyst", created_at=stamp(6)),
    ]
    session.add_all(questions)
    session.flush()
    ids.update({f"q{i + 1}": q.id for i, q in enumerate(questions)})
    session.add(Link(source_kind="question", source_id=questions[0].id, variable_id=var["income"].id))
    session.add(Link(source_kind="question", source_id=questions[1].id, variable_id=var["systolic_bp"].id))

    threats = [
        Threat(text="Income may be missing not at random", kind="internal", severity="high",
               mitigation="sensitivity analysis under MNAR", status="open", author="analyst",
               created_at=stamp(8)),
        Threat(text="A single clinic limits transfer to other hospitals", kind="external", severity="medium",
               status="accepted", author="analyst", created_at=stamp(8)),
        Threat(text="Triage pressure may not reflect resting pressure", kind="construct", severity="medium",
               mitigation="compare with ward readings", status="mitigated", author="analyst",
               created_at=stamp(8)),
        Threat(text="The model was chosen after seeing the data", kind="statistical", severity="low",
               status="open", author="analyst", created_at=stamp(13)),
    ]
    session.add_all(threats)
    session.flush()
    ids.update({f"t{i + 1}": t.id for i, t in enumerate(threats)})
    session.add(Link(source_kind="threat", source_id=threats[0].id, variable_id=var["income"].id))
    session.add(Link(source_kind="threat", source_id=threats[0].id, decision_id=d2.id))
    session.add(Link(source_kind="threat", source_id=threats[2].id, variable_id=var["systolic_bp"].id))
    session.add(Link(source_kind="threat", source_id=threats[3].id, decision_id=d10.id))

    entries = [
        Entry(kind="note", text="Private working note: call back Mr Example about his record",
              tags=["call"], author="analyst", created_at=stamp(8)),
        Entry(kind="conclusion", text="Readmission rises with systolic pressure above 160 mmHg.",
              tags=[], author="analyst", created_at=stamp(15)),
        Entry(kind="conclusion", text="Household income shows no clear relation.", tags=[],
              author="analyst", created_at=stamp(15)),
        Entry(kind="next", text="Validate on the 2026 stays", tags=[], author="analyst", created_at=stamp(16)),
    ]
    session.add_all(entries)
    session.flush()
    ids.update(conclusion_bp=entries[1].id, conclusion_income=entries[2].id)
    session.add(Link(source_kind="entry", source_id=entries[1].id, variable_id=var["systolic_bp"].id))
    session.add(Link(source_kind="entry", source_id=entries[2].id, variable_id=var["income"].id))
    session.flush()
    return Built(ids)


def build_in_store() -> Built:
    """Fill the store that ``STUDYLOG_STORE`` points at (made by the ``study`` fixture)."""
    with transaction(locate(), write=True) as session:
        return build(session)
