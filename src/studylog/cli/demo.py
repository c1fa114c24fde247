"""``studylog demo [DIR]``: a whole invented study built in one command, step by step.

The demo runs the real commands, in this process, exactly as a user would type them from inside DIR, and
prints each command with the first lines of what it printed. It uses the invented bike-share scenario of
``studylog.examples.bikeshare`` (nothing in it describes real people or places).
"""

from __future__ import annotations

import csv
import io
import os
import shlex
import shutil
from collections.abc import Sequence
from contextlib import redirect_stderr, redirect_stdout
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import typer

from studylog.cli import render
from studylog.errors import UsageError

SHOWN_LINES = 8
OFFICE = "membership office"
FLEET = "fleet operations"


@dataclass
class DemoRun:
    """The demo's record of what ran: each command, its exit code and its output."""

    folder: Path
    store: Path
    quiet: bool = False
    steps: list[dict[str, Any]] = field(default_factory=list)

    def section(self, title: str) -> None:
        if not self.quiet:
            render.console.print()
            render.console.print(f"[bold]{render.escape(title)}[/bold]")

    def explain(self, text: str) -> None:
        if not self.quiet:
            render.say(text)

    def run(self, *args: str, expect: Sequence[int] = (0,), show: int = SHOWN_LINES) -> str:
        """Run one studylog command inside the demo folder; return what it printed on stdout."""
        from typer.main import get_command

        from studylog.cli.app import app

        command = get_command(app)
        out, err = io.StringIO(), io.StringIO()
        code: Any = 0
        with redirect_stdout(out), redirect_stderr(err):
            try:
                command.main(args=["--store", str(self.store), *args], prog_name="studylog")
            except SystemExit as exc:
                code = exc.code or 0
        line = "studylog " + " ".join(shlex.quote(a) for a in args)
        self.steps.append({"command": line, "exit_code": code, "stdout": out.getvalue()})
        if code not in expect:
            raise UsageError(f"the demo stopped: '{line}' exited {code}: {err.getvalue().strip()}")
        if not self.quiet:
            render.console.print(f"[dim]$[/dim] {render.escape(line)}")
            lines = [text for text in out.getvalue().splitlines() if text.strip()]
            lines += [text for text in err.getvalue().splitlines() if text.strip()]
            for text in lines[:show]:
                render.console.print(f"    {render.escape(text)}", soft_wrap=True)
            if len(lines) > show:
                render.console.print(f"    [dim]... {len(lines) - show} more lines[/dim]")
        return out.getvalue()


def _fill_answers(packet: Path, answers: dict[str, str], by: str) -> None:
    """What the expert does with the CSV packet: write answers in the empty column."""
    with packet.open(newline="", encoding="utf-8-sig") as handle:
        rows = list(csv.reader(handle))
    header = rows[0]
    at_id, at_answer, at_by = header.index("id"), header.index("answer"), header.index("answered_by")
    for row in rows[1:]:
        if row and row[at_id] in answers:
            row[at_answer] = answers[row[at_id]]
            row[at_by] = by
    with packet.open("w", newline="", encoding="utf-8-sig") as handle:
        csv.writer(handle).writerows(rows)


def _analysed_members(source: Path, target: Path) -> dict[str, int]:
    """The cleaned members file the model is fitted on, following the logged decisions."""
    import pandas as pd

    members = pd.read_csv(source, dtype=str, keep_default_na=False)
    received = len(members)
    members = members.drop_duplicates(subset="member_id", keep="first")
    duplicates = received - len(members)
    members["signup_channel"] = members["signup_channel"].str.strip().str.lower()
    members.loc[members["age"] == "999", "age"] = ""
    members.loc[~members["email"].str.contains("@", regex=False), "email"] = ""
    members.to_csv(target, index=False)
    return {"received": received, "duplicates": duplicates, "analysed": len(members)}


def build(folder: Path, *, quiet: bool = False) -> DemoRun:
    """Build the whole demo study in ``folder`` (which must be empty or absent)."""
    from studylog.examples import bikeshare

    if folder.exists() and any(folder.iterdir()):
        raise UsageError(f"{folder} is not empty; the demo needs a new or empty folder")
    folder.mkdir(parents=True, exist_ok=True)
    folder = folder.resolve()
    demo = DemoRun(folder, folder / "studylog.db", quiet=quiet)
    here = Path.cwd()
    width = render.console.width
    # the commands' tables are shown at the width of the terminal the demo prints to
    render.console.width = max(width, shutil.get_terminal_size((120, 40)).columns)
    os.chdir(folder)
    try:
        _steps(demo, bikeshare)
    finally:
        os.chdir(here)
        render.console.width = width
    return demo


def _steps(demo: DemoRun, bikeshare: Any) -> None:  # noqa: PLR0915 - one straight story
    run = demo.run
    demo.section("1. The data: two monthly drops of two linked tables (invented)")
    manifest = bikeshare.write_drops(demo.folder / "data")
    demo.explain("wrote " + ", ".join(f"data/{name}" for name in manifest.files))

    demo.section("2. A new study, and a draft dictionary inferred from the first drops")
    run("init", ".", "--title", "Membership renewals at a bike-share cooperative",
        "--target", "renewed", "--index-time", "the membership's renewal date")
    run("draft", "data/members-2026-01.csv", "--table", "members", "--key", "member_id",
        "--target", "renewed", "--apply", show=4)
    run("draft", "data/rides-2026-01.csv", "--table", "rides", "--key", "ride_id", "--apply", show=4)
    run("table", "set", "members", "--grain", "one row per member", "--why", "agreed with the data owner")
    run("table", "set", "rides", "--grain", "one row per ride", "--why", "agreed with the data owner")
    run("profile", "data/members-2026-01.csv", "--target", "renewed", show=12)

    demo.section("3. The dictionary, completed and confirmed with the data owner, then frozen")
    run("var", "set", "member_id", "--table", "members", "--label", "Member number",
        "--source", "administrative", "--description", "Assigned at sign-up; never reused.")
    run("var", "set", "age", "--table", "members", "--label", "Age at sign-up", "--unit", "years",
        "--min", "16", "--max", "110", "--plausible-min", "18", "--plausible-max", "90",
        "--source", "reported", "--available", "before", "--sensitivity", "quasi-identifier")
    run("var", "set", "district", "--table", "members", "--label", "Home district", "--source", "reported",
        "--available", "before")
    run("var", "set", "signup_channel", "--table", "members", "--label", "Sign-up channel",
        "--levels", "app=mobile app,web=web site,kiosk=station kiosk,partner=partner employer",
        "--source", "administrative", "--available", "before")
    run("var", "set", "joined_on", "--table", "members", "--label", "Date of joining",
        "--source", "administrative", "--available", "before")
    run("var", "set", "satisfaction", "--table", "members", "--label", "Satisfaction with the service",
        "--type", "ordinal", "--levels", "1=very dissatisfied,2,3,4,5=very satisfied",
        "--missing-codes", "-99=not answered,-98=don't know", "--source", "reported",
        "--instrument", "annual member survey v3",
        "--question-text", "How satisfied are you with the bike-share service?", "--available", "before")
    run("var", "set", "email", "--table", "members", "--label", "Contact e-mail",
        "--sensitivity", "direct-identifier", "--pattern", "^[^@ ]+@[^@ ]+$", "--role", "identifier",
        "--source", "administrative")
    run("var", "set", "renewed", "--table", "members", "--label", "Membership renewed", "--role", "target",
        "--source", "administrative", "--available", "after")
    run("var", "set", "member_id", "--table", "rides", "--type", "identifier",
        "--references", "members.member_id", "--label", "Member who rode")
    run("var", "set", "duration_min", "--table", "rides", "--unit", "min", "--min", "0",
        "--plausible-max", "600", "--label", "Ride duration", "--source", "measured",
        "--derivation", "ended_at - started_at, in minutes", "--derived-from", "started_at,ended_at")
    run("var", "set", "distance_km", "--table", "rides", "--unit", "km", "--min", "0",
        "--aliases", "distance", "--label", "Distance ridden", "--source", "measured",
        "--instrument", "bike GPS unit")
    run("var", "set", "started_at", "--table", "rides", "--label", "Ride start", "--source", "measured")
    run("var", "set", "ended_at", "--table", "rides", "--label", "Ride end", "--source", "measured")
    run("var", "confirm", "member_id", "age", "district", "signup_channel", "joined_on", "satisfaction",
        "email", "renewed", "--table", "members", "--by", "data owner")
    run("var", "confirm", "ride_id", "member_id", "started_at", "ended_at", "duration_min", "distance_km",
        "bike_type", "--table", "rides", "--by", "data owner")
    run("rule", "add", "end-after-start", "ended_at >= started_at", "--table", "rides",
        "--why", "a ride cannot end before it starts")
    run("var", "freeze", "agreed-2026-02", "--note", "agreed with the data owner in the February call")
    run("status", show=6)

    demo.section("4. The first drops checked and recorded")
    run("check", "data/members-2026-01.csv", "--table", "members", "--label", "January", show=5)
    run("check", "data/rides-2026-01.csv", "--table", "rides", "--label", "January", show=5)

    demo.section("5. Decisions, the analysis plan, questions and threats")
    run("log", "Treat -99 and -98 in satisfaction as missing; impute the median within district",
        "--kind", "missing", "--var", "satisfaction", "--assumption", "MAR",
        "--why", "non-response is related to district in the January drop",
        "--code", "analysis/prepare.py:42")
    run("log", "Hold out a fifth of the members, stratified by renewal", "--kind", "split",
        "--var", "renewed", "--seed", "2026", "--why", "an honest estimate of performance on new members")
    run("log", "Logistic regression of renewal on age, satisfaction, sign-up channel and district",
        "--kind", "model", "--why", "interpretable coefficients for the board")
    run("log", "Area under the ROC curve on the hold-out set, with a bootstrap interval", "--kind", "metric",
        "--why", "renewals outnumber lapses about four to one; accuracy would flatter the model")
    run("decision", "supersede", "1",
        "Impute satisfaction by multiple imputation (20 imputations) from age, channel and district",
        "--why", "a single median understates the uncertainty")
    run("plan", "freeze", "--note", "analysis plan agreed with the cooperative's board")
    coding = _id_of(run("ask", "Does -98 in satisfaction mean the member ticked 'don't know', or was not asked?",
                        "--var", "satisfaction", "--to", OFFICE, "--priority", "high"))
    run("ask", "Are rides with an end before their start clock errors of the docks?",
        "--var", "ended_at", "--to", FLEET)
    run("threat", "add", "Members who skip the satisfaction question may differ from those who answer",
        "--kind", "internal", "--var", "satisfaction", "--severity", "medium",
        "--mitigation", "multiple imputation under MAR, and a sensitivity analysis under MNAR")
    run("threat", "add", "One city's cooperative: renewal may behave differently elsewhere",
        "--kind", "external", "--severity", "medium")
    run("threat", "add", "Satisfaction is a single survey item, not a validated scale", "--kind", "construct",
        "--var", "satisfaction", "--severity", "low")
    run("threat", "add", "About four renewals to one lapse: accuracy is misleading", "--kind", "statistical",
        "--var", "renewed", "--mitigation", "area under the ROC curve and balanced accuracy")

    demo.section("6. The February drops: findings, drift and record changes")
    run("check", "data/members-2026-02.csv", "--table", "members", "--label", "February",
        expect=(1,), show=14)
    run("check", "data/rides-2026-02.csv", "--table", "rides", "--label", "February", expect=(1,), show=14)
    run("drops", show=8)
    run("drift", show=10)
    new_district = _id_of(run("ask", "Is 'Northgate Quay' a new district, or a typo of another?",
                              "--var", "district", "--to", OFFICE))

    demo.section("7. A question packet sent to the membership office, and its answers read back")
    packets = demo.folder / "packets"
    packets.mkdir()
    packet = packets / "membership-office.csv"
    run("questions", "export", "--to", OFFICE, "--format", "csv", "-o", str(packet.relative_to(demo.folder)))
    run("questions", "export", "--to", OFFICE, "--format", "html", "-o", "packets/membership-office.html")
    _fill_answers(packet, {
        coding: "The member ticked 'don't know'; members who were not asked get -99.",
        new_district: "A new district, opened on 1 February 2026.",
    }, by="membership office")
    demo.explain("the membership office wrote its answers into " + str(packet.relative_to(demo.folder)))
    run("questions", "import", str(packet.relative_to(demo.folder)))
    levels = ",".join([*bikeshare.DISTRICTS, "Northgate Quay"])
    run("var", "set", "district", "--table", "members", "--levels", levels,
        "--why", "Northgate Quay is a new district (answer of the membership office)",
        "--question", new_district)

    demo.section("8. The cleaned, analysed data set")
    counts = _analysed_members(demo.folder / "data" / "members-2026-02.csv",
                               demo.folder / "data" / "members-analysed.csv")
    run("log", "Keep the first of two copies of member records delivered twice", "--kind", "duplicates",
        "--var", "members.member_id", "--removed", str(counts["duplicates"]),
        "--why", "the provider confirmed the second copies are re-sends", "--code", "analysis/prepare.py:18")
    run("log", "Recode sign-up channel to lower case without surrounding spaces", "--kind", "recoding",
        "--var", "signup_channel", "--why", "the February export changed the case of some entries")
    run("log", "Set age 999 to missing: a placeholder of the sign-up form", "--kind", "cleaning",
        "--var", "age", "--why", "no member is 999 years old")
    run("check", "data/members-analysed.csv", "--table", "members", "--label", "analysed data set",
        "--analysis", "--against", "3", show=8)
    run("note", "The February export changed the case of sign-up channels", "--var", "signup_channel",
        "--tag", "provider")
    run("conclude", "In this invented study, satisfaction is the strongest predictor of renewal",
        "--var", "satisfaction")
    run("next", "Ask for a third month of rides to see whether the longer rides persist")

    demo.section("9. The documents")
    reports = demo.folder / "reports"
    reports.mkdir()
    for kind in ("dictionary", "methods", "validity", "conclusions", "questions", "writeup"):
        for fmt in ("md", "html"):
            run("report", kind, "--format", fmt, "-o", f"reports/{kind}.{fmt}", show=1)
    run("var", "export", "--format", "csvw", "-o", "reports/dictionary.csvw.json", show=1)
    run("status", show=30)


def _id_of(output: str) -> str:
    """The id a creating command printed ("question 3 recorded")."""
    import re

    found = re.search(r"\b(\d+) recorded", output)
    if found is None:
        raise UsageError(f"the demo expected a record id in: {output.strip()[:80]}")
    return found.group(1)


def demo(
    directory: str = typer.Argument("studylog-demo", help="An empty or new folder for the demo study."),
    as_json: bool = typer.Option(False, "--json", help="Print the commands run and their exit codes as JSON."),
) -> None:
    """Build a whole invented study in DIR and show every step with the command that did it.

    The scenario (a city bike-share cooperative asking which memberships will be renewed) is invented:
    two monthly drops of members and rides, the second with the faults real deliveries carry.
    """
    result = build(Path(directory), quiet=as_json)
    if as_json:
        render.emit_json({
            "folder": str(result.folder),
            "store": str(result.store),
            "steps": [{"command": s["command"], "exit_code": s["exit_code"]} for s in result.steps],
        })
        return
    render.console.print()
    render.say(f"The study is in {result.folder}: studylog.db, data/, packets/, reports/.")
    render.say(f"Try: cd {shlex.quote(str(result.folder))} && studylog status")


def register(app: typer.Typer) -> None:
    app.command("demo")(demo)
