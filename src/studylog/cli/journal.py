"""The journal on the command line: ``log``, ``decisions``, ``decision …``, ``plan freeze``, ``note``,
``conclude``, ``next``, ``timeline`` and ``redact``.

Imports typer and the CLI helpers only; the core modules are imported inside each command so that the
journal starts fast.
"""

from __future__ import annotations

from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, location, reading, writing

# Kept here (not imported from studylog.journal) so that --help needs no core import; a test checks the
# two lists agree.
KIND_HELP = (
    "The stage of the analysis: cleaning (fixing recorded values), recoding, duplicates, missing "
    "(deletion or imputation; give --assumption), outliers, transform (transformation and scaling), "
    "merge-levels, exclude-cases (give --removed), exclude-variables, select-features, extract-features, "
    "sampling (and imbalance treatment), split (validation design; give --seed), model, metric, other "
    "(the default)."
)
KIND_NAMES = (
    "cleaning", "recoding", "duplicates", "missing", "outliers", "transform", "merge-levels",
    "exclude-cases", "exclude-variables", "select-features", "extract-features", "sampling", "split",
    "model", "metric", "other",
)
# records the timeline names by their name rather than their number
NAMED_ENTITIES = ("variable", "table", "rule", "version", "study")
STATUS_HELP = "proposed, adopted, implemented, superseded or reverted."

VAR_OPTION = typer.Option(
    None, "--var", metavar="NAME", help="A variable it is about (repeat for several; TABLE.NAME when ambiguous)."
)
CODE_OPTION = typer.Option(None, "--code", metavar="PATH[:LINE]", help="Where it is carried out: PATH or PATH:LINE.")

decision_app = typer.Typer(help="Show a decision or move it along: adopt, implement, supersede, revert.",
                           no_args_is_help=True)
plan_app = typer.Typer(help="The analysis plan: freeze it so that later decisions are marked post hoc.",
                       no_args_is_help=True)


def _decision_line(d: dict[str, Any]) -> list[Any]:
    return [d["id"], d["kind"], d["status"] + (" (post hoc)" if d["post_hoc"] else ""), d["text"],
            ", ".join(d["variables"]), d["code"], d["author"], d["created_at"][:16]]


def _show_decision(d: dict[str, Any]) -> None:
    git = d["git"]
    render.fields([
        ("decision", d["id"]), ("text", d["text"]), ("kind", d["kind"]), ("status", d["status"]),
        ("post hoc", "yes" if d["post_hoc"] else None), ("variables", d["variables"]), ("why", d["why"]),
        ("evidence", d["evidence"]), ("alternatives", d["alternatives"]), ("drop", d["drop"]),
        ("code", d["code"]), ("assumption", d["assumption"]), ("seed", d["seed"]), ("removed", d["removed"]),
        ("git commit", (git["commit"] or "(no commit yet)") + (" with uncommitted changes" if git["dirty"] else "")
         if git else None),
        ("supersedes", d["supersedes"]), ("superseded by", d["superseded_by"]),
        ("author", d["author"]), ("created", d["created_at"]),
    ])
    for name, facts in d["facts"].items():
        render.say(f"facts of {name}: " + _facts_text(facts))


def _facts_text(facts: dict[str, Any]) -> str:
    head = f"drop {facts['drop']} of {facts['table']}"
    if not facts.get("present"):
        return f"{head}: not in that drop"
    parts = [f"n {facts.get('n')}", f"missing {facts.get('missing')}"]
    if facts.get("missing_share") is not None:
        parts[-1] += f" ({facts['missing_share']:.1%})"
    if facts.get("missing_codes"):
        parts.append("codes " + ", ".join(f"{c['code']}: {c['count']}" for c in facts["missing_codes"]))
    if facts.get("outliers"):
        parts.append("outliers " + ", ".join(f"{k} {v}" for k, v in facts["outliers"].items()))
    if facts.get("levels"):
        parts.append("levels " + ", ".join(f"{lv['value']} ({lv['count']})" for lv in facts["levels"][:8]))
    return f"{head}: " + "; ".join(parts)


def log(
    text: str = typer.Argument(..., metavar="TEXT", help="What was decided."),
    kind: str = typer.Option(None, "--kind", metavar="KIND", help=KIND_HELP),
    var: list[str] = VAR_OPTION,
    why: str = typer.Option(None, "--why", metavar="TEXT", help="Why: the reason for the decision."),
    evidence: str = typer.Option(None, "--evidence", metavar="TEXT",
        help="What it rests on (a figure, a test, an answer)."),
    alternatives: str = typer.Option(None, "--alternatives", metavar="TEXT",
        help="What else was considered."),
    drop: int = typer.Option(None, "--drop", metavar="ID",
        help="The drop it is based on (default: the latest checked)."),
    code: str = CODE_OPTION,
    assumption: str = typer.Option(None, "--assumption", metavar="MCAR|MAR|MNAR",
        help="Assumed missingness mechanism: MCAR, MAR or MNAR."),
    seed: int = typer.Option(None, "--seed", metavar="N", help="The random seed (splits, sampling, models)."),
    removed: int = typer.Option(None, "--removed", metavar="N",
        help="How many records it removes (exclude-cases)."),
    proposed: bool = typer.Option(False, "--proposed", help="Record it as proposed, not yet adopted."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Record a decision, with the data facts of its variables and the git state of the code.

    Its status is adopted unless --proposed. When a drop has been checked, the facts of each --var in the
    latest drop (n, missing share and codes, outliers, levels) are kept with it; when the current folder
    or the store's folder is in a git work tree, so are the commit and whether there were uncommitted
    changes. Decisions logged after 'plan freeze' are marked post hoc.
    """
    from studylog import journal

    with writing() as session:
        result = journal.log_decision(
            session, text, kind=kind, variables=var, why=why, evidence=evidence, alternatives=alternatives,
            drop_id=drop, code=code, assumption=assumption, seed=seed, removed=removed, proposed=proposed,
        )
    _created(result, as_json)


def _created(result: dict[str, Any], as_json: bool) -> None:
    render.created("decision", result["id"], as_json, result)
    if as_json:
        return
    notes = [result["status"]]
    if result["post_hoc"]:
        notes.append("post hoc (the plan was frozen before it)")
    if result["facts"]:
        notes.append("facts of " + ", ".join(result["facts"]))
    if result["git"]:
        notes.append(f"commit {(result['git']['commit'] or 'none')[:12]}"
                     + (" + uncommitted changes" if result["git"]["dirty"] else ""))
    render.say("  " + "; ".join(notes))


def decisions(
    kind: str = typer.Option(None, "--kind", metavar="KIND", help="Only this kind."),
    var: str = typer.Option(None, "--var", metavar="NAME", help="Only decisions about this variable."),
    status: str = typer.Option(None, "--status", metavar="STATUS", help="Only this status: " + STATUS_HELP),
    as_json: bool = JSON_OPTION,
) -> None:
    """List the decisions, oldest first."""
    from studylog import journal

    with reading() as session:
        found = journal.list_decisions(session, kind=kind, variable=var, status=status)
    if as_json:
        render.emit_json({"decisions": found})
        return
    render.table(["id", "kind", "status", "decision", "variables", "code", "author", "at"],
                 [_decision_line(d) for d in found], title=f"{len(found)} decision(s)")


@decision_app.command("show")
def decision_show(decision_id: int = typer.Argument(..., metavar="ID"), as_json: bool = JSON_OPTION) -> None:
    """One decision in full: what it rests on, its chain of replacements and its history."""
    from studylog import journal

    with reading() as session:
        result = journal.show_decision(session, decision_id)
    if as_json:
        render.emit_json(result)
        return
    _show_decision(result)
    for earlier in result["replaces"]:
        render.say(f"replaces {earlier['id']} ({earlier['status']}): {earlier['text']}")
    render.table(["at", "author", "action", "field", "old", "new", "why"],
                 [[c["at"][:19], c["author"], c["action"], c["field"], c["old"] if c["field"] else None,
                   c["new"] if c["field"] else None, c["why"]] for c in result["history"]], title="history")


@decision_app.command("adopt")
def decision_adopt(
    decision_id: int = typer.Argument(..., metavar="ID"),
    why: str = typer.Option(None, "--why", metavar="TEXT", help="Why it is adopted."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Adopt a proposed decision."""
    from studylog import journal

    with writing() as session:
        result = journal.adopt(session, decision_id, why)
    _changed(result, as_json)


@decision_app.command("implement")
def decision_implement(
    decision_id: int = typer.Argument(..., metavar="ID"),
    code: str = CODE_OPTION,
    why: str = typer.Option(None, "--why", metavar="TEXT", help="A note on the implementation."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Mark an adopted decision as carried out in the code (again: to move its code location).

    The git state at this moment replaces the one captured when it was logged.
    """
    from studylog import journal

    with writing() as session:
        result = journal.implement(session, decision_id, code, why)
    _changed(result, as_json)


@decision_app.command("supersede")
def decision_supersede(
    decision_id: int = typer.Argument(..., metavar="ID"),
    text: str = typer.Argument(..., metavar="TEXT", help="The decision that replaces it."),
    why: str = typer.Option(None, "--why", metavar="TEXT", help="Why it is replaced (required)."),
    kind: str = typer.Option(None, "--kind", metavar="KIND",
        help="Kind of the new decision (default: the earlier one's)."),
    var: list[str] = typer.Option(None, "--var", metavar="NAME",
        help="Its variables (default: the earlier one's)."),
    evidence: str = typer.Option(None, "--evidence", metavar="TEXT", help="What the new decision rests on."),
    alternatives: str = typer.Option(None, "--alternatives", metavar="TEXT",
        help="What else was considered."),
    drop: int = typer.Option(None, "--drop", metavar="ID", help="The drop it is based on."),
    code: str = CODE_OPTION,
    assumption: str = typer.Option(None, "--assumption", metavar="MCAR|MAR|MNAR", help="MCAR, MAR or MNAR."),
    seed: int = typer.Option(None, "--seed", metavar="N", help="The random seed."),
    removed: int = typer.Option(None, "--removed", metavar="N", help="How many records it removes."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Replace a decision by a new one; the earlier one becomes superseded and the new one links to it."""
    from studylog import journal

    with writing() as session:
        result = journal.supersede(
            session, decision_id, text, why=why, kind=kind, variables=var, evidence=evidence,
            alternatives=alternatives, drop_id=drop, code=code, assumption=assumption, seed=seed,
            removed=removed,
        )
    _created(result, as_json)
    if not as_json:
        render.say(f"  decision {decision_id} is superseded")


@decision_app.command("revert")
def decision_revert(
    decision_id: int = typer.Argument(..., metavar="ID"),
    why: str = typer.Option(None, "--why", metavar="TEXT", help="Why it is reverted (required)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Revert a decision: it no longer holds (it stays in the journal and its history)."""
    from studylog import journal

    with writing() as session:
        result = journal.revert(session, decision_id, why)
    _changed(result, as_json)


def _changed(result: dict[str, Any], as_json: bool) -> None:
    if as_json:
        render.emit_json(result)
    else:
        render.say(f"decision {result['id']} is {result['status']}")


@plan_app.command("freeze")
def plan_freeze(
    note: str = typer.Option(None, "--note", metavar="TEXT",
        help="What the plan is, or where it is written."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Record that the analysis plan is fixed now: decisions logged after it are marked post hoc."""
    from studylog import journal

    with writing() as session:
        result = journal.freeze_plan(session, note)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"plan frozen at {result['plan_frozen_at']}; {result['decisions_before']} decision(s) "
               "before it are pre-specified, later ones will be marked post hoc")


@plan_app.command("show")
def plan_show(as_json: bool = JSON_OPTION) -> None:
    """When the plan was frozen, and how many decisions were pre-specified and post hoc."""
    from studylog import journal

    with reading() as session:
        result = journal.plan_state(session)
    if as_json:
        render.emit_json(result)
        return
    render.fields([("frozen at", result["plan_frozen_at"] or "not frozen"), ("note", result["note"]),
                   ("pre-specified", result["pre_specified"]), ("post hoc", result["post_hoc"])])


def _entry(kind: str, text: str, var: list[str] | None, tags: list[str] | None, as_json: bool) -> None:
    from studylog import notes

    with writing() as session:
        result = notes.add_entry(session, kind, text, variables=var, tags=tags)
    render.created(kind, result["id"], as_json, result)


def note(
    text: str = typer.Argument(..., metavar="TEXT", help="The note."),
    var: list[str] = VAR_OPTION,
    tag: list[str] = typer.Option(None, "--tag", metavar="TAG", help="A tag (repeat for several)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Write a note in the journal."""
    _entry("note", text, var, tag, as_json)


def conclude(
    text: str = typer.Argument(..., metavar="TEXT", help="The conclusion."),
    var: list[str] = VAR_OPTION,
    as_json: bool = JSON_OPTION,
) -> None:
    """Record a conclusion: an inference for the write-up's conclusions."""
    _entry("conclusion", text, var, None, as_json)


def next_step(
    text: str = typer.Argument(..., metavar="TEXT", help="The next step."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Record a next step or a question for further study."""
    _entry("next", text, None, None, as_json)


def timeline(
    since: str = typer.Option(None, "--since", metavar="DATE",
        help="From this date (YYYY-MM-DD) or ISO 8601 date-time on."),
    var: str = typer.Option(None, "--var", metavar="NAME", help="Only what concerns this variable."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Every record and change of the study in the order it happened, with its author."""
    from studylog import notes

    with reading() as session:
        events = notes.timeline(session, since=since, variable=var)
    if as_json:
        render.emit_json({"events": events})
        return
    rows = []
    for e in events:
        named = e["entity"] in NAMED_ENTITIES and e["text"]
        what = e["entity"] + (f" {e['text']}" if named else f" {e['record']}" if e["record"] is not None else "")
        if e["entity"] == "entry" and e["kind"]:
            what = f"{e['kind']} {e['record']}"
        elif e["kind"]:
            what += f" ({e['kind']})"
        detail = "" if named else e["text"] or ""
        if e["field"] and e["action"] != "create":
            detail = f"{e['field']}: {render.cell(e['old'])} -> {render.cell(e['new'])}" + (
                f" - {detail}" if detail else "")
        if e["why"]:
            detail += f" (why: {e['why']})"
        rows.append([e["at"][:19].replace("T", " "), e["author"], what, e["action"], detail])
    render.table(["at (UTC)", "author", "record", "action", "what"], rows, title=f"{len(rows)} event(s)")


def redact(
    kind: str = typer.Argument(..., metavar="KIND",
        help="decision, question, threat, note, conclusion or next."),
    record_id: int = typer.Argument(..., metavar="ID"),
    why: str = typer.Option(None, "--why", metavar="TEXT", help="Why the text is redacted (required)."),
    text: list[str] = typer.Option(None, "--text", metavar="TEXT",
        help="Only this piece of text (a name, a number), wherever "
                                   "it appears in the record and its history; repeat for several. Default: "
                                   "all of the record's text."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Redact personal data pasted by mistake: the text is replaced everywhere in the store.

    Without --text, every text field of the record and the reasons given for its earlier changes are
    replaced. The history keeps that a redaction happened, by whom and why, not what was removed. Earlier
    change rows of the record are scrubbed too, and the store file and its write-ahead log are rebuilt so that
    the old text is gone from the bytes on disk. Backup copies made earlier are not touched: they are
    listed so that you can deal with them.
    """
    from studylog import redaction

    result = redaction.redact(location(), kind, record_id, why, text or None)
    if as_json:
        render.emit_json(result)
        return
    render.say(f"{kind} {record_id}: redacted {', '.join(result['fields']) or 'its history'}; "
               f"{result['changes_scrubbed']} earlier change(s) scrubbed")
    if result.get("problem") or (result.get("vacuumed") and not result.get("checkpointed")):
        render.warn("another process has the store open; the old text may remain in the store file or "
                    "its write-ahead log until that process ends"
                    + (f" ({result['problem']})" if result.get("problem") else ""))
    for backup in result.get("backups", []):
        render.warn(f"an earlier backup copy still holds the text: {backup}")


def register(app: typer.Typer) -> None:
    app.command("log")(log)
    app.command("decisions")(decisions)
    app.add_typer(decision_app, name="decision")
    app.add_typer(plan_app, name="plan")
    app.command("note")(note)
    app.command("conclude")(conclude)
    app.command("next")(next_step)
    app.command("timeline")(timeline)
    app.command("redact")(redact)
