"""studylog check / drops / drop show / drift over three successive drops of two linked tables."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest


def run_json(cli, *args: str, code: int = 0) -> dict:  # type: ignore[no-untyped-def]
    result = cli(*args, "--json")
    assert result.exit_code == code, result.output
    return json.loads(result.stdout)


@pytest.fixture
def linked(cli, study, tmp_path: Path) -> Path:  # type: ignore[no-untyped-def]
    for args in (
        ("table", "add", "members", "--key", "member_id"),
        ("var", "add", "member_id", "--type", "identifier", "--table", "members"),
        ("var", "add", "plan", "--type", "categorical", "--table", "members", "--levels", "basic,plus,gold"),
        ("table", "add", "visits", "--key", "visit_id"),
        ("var", "add", "visit_id", "--type", "identifier", "--table", "visits"),
        ("var", "add", "member_id", "--type", "identifier", "--table", "visits",
         "--references", "members.member_id"),
        ("var", "add", "minutes", "--type", "number", "--table", "visits"),
    ):
        assert cli(*args).exit_code == 0
    return tmp_path


def write_members(folder: Path, name: str, count: int, plans: list[str], seed: int) -> Path:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"member_id": [f"M{i:04d}" for i in range(count)],
                          "plan": rng.choice(plans, count)})
    frame.to_csv(folder / name, index=False)
    return folder / name


def member_of(visit: int) -> int:
    # visits 0..1999 belong to members 0..299; the later visits 2000.. to the new members 300..349
    return visit % 300 if visit < 2000 else 300 + visit % 50


def write_visits(folder: Path, name: str, ids: range, shift: float, seed: int) -> Path:
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"visit_id": [f"V{i:05d}" for i in ids],
                          "member_id": [f"M{member_of(i):04d}" for i in ids],
                          "minutes": np.round(rng.normal(30 + shift, 5, len(ids)), 3).astype(str)})
    frame.to_csv(folder / name, index=False)
    return folder / name


def test_three_drops_of_two_linked_tables(cli, linked: Path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    from studylog.cli import render

    monkeypatch.setattr(render.console, "width", 100)  # human output is checked at 100 columns
    folder = linked
    m1 = write_members(folder, "m1.csv", 300, ["basic", "plus"], 1)
    v1 = write_visits(folder, "v1.csv", range(0, 2000), 0.0, 1)
    first = run_json(cli, "check", str(v1), "--table", "visits")
    assert first["records"]["against"] is None
    assert [f["severity"] for f in first["findings"] if f["rule"] == "orphan"] == ["info"]
    members_first = run_json(cli, "check", str(m1), "--table", "members")
    # second: the same distribution, 100 visits gone, 100 new, of members 300..349 (orphans: the
    # members drop has 300)
    v2 = write_visits(folder, "v2.csv", range(100, 2100), 0.0, 2)
    second = run_json(cli, "check", str(v2), "--table", "visits", code=1)
    assert second["records"]["against"] == first["drop"]["id"]
    assert (second["records"]["new"], second["records"]["vanished"]) == (100, 100)
    # minutes were drawn anew: every kept visit changed, and only in that column
    assert second["records"]["changed"] + second["records"]["unchanged"] == 1900
    assert second["records"]["changed"] >= 1890
    assert second["records"]["changed_columns"] == {"minutes": second["records"]["changed"]}
    orphans = [f for f in second["findings"] if f["rule"] == "orphan"]
    assert orphans[0]["count"] == 100 and orphans[0]["severity"] == "error"
    assert orphans[0]["keys"][0] == "V02000" and orphans[0]["rows"][0] == 1901
    assert orphans[0]["values"][0] == "M0300"
    drift = {d["variable"]: d for d in second["drift"]}
    assert drift["minutes"]["band"] == "stable"
    assert drift["minutes"]["n_earlier"] == 2000 and drift["minutes"]["n_later"] == 2000
    # third: members gained a plan and visits shifted by 2 sd, checked against the first drop
    m2 = write_members(folder, "m2.csv", 350, ["basic", "plus", "gold"], 3)
    members_second = run_json(cli, "check", str(m2), "--table", "members")
    plan = {d["variable"]: d for d in members_second["drift"]}["plan"]
    assert plan["new_levels"] == ["gold"] and plan["band"] == "shifted"
    v3 = write_visits(folder, "v3.csv", range(0, 2100), 10.0, 3)
    third = run_json(cli, "check", str(v3), "--table", "visits", "--against", str(first["drop"]["id"]),
                     "--analysis")
    assert third["drop"]["against"] == first["drop"]["id"]
    assert not [f for f in third["findings"] if f["rule"] == "orphan"]  # members now has 350
    assert {d["variable"]: d for d in third["drift"]}["minutes"]["band"] == "shifted"
    assert (third["records"]["new"], third["records"]["vanished"]) == (100, 0)

    listed = run_json(cli, "drops", "--table", "visits")
    assert [d["id"] for d in listed] == [first["drop"]["id"], second["drop"]["id"], third["drop"]["id"]]
    assert [d["analysis"] for d in listed] == [False, False, True]
    assert listed[2]["drift_bands"]["shifted"] >= 1
    shown = run_json(cli, "drop", "show", str(second["drop"]["id"]))
    assert shown["comparison"]["records"]["new"] == 100
    assert {p["name"] for p in shown["profile"]} == {"visit_id", "member_id", "minutes"}
    assert shown["drop"]["dictionary"].startswith("change ")
    between = run_json(cli, "drift", str(second["drop"]["id"]), str(third["drop"]["id"]))
    assert between["earlier"]["id"] == second["drop"]["id"]
    assert between["records"]["new"] == 100 and between["records"]["vanished"] == 0
    latest = run_json(cli, "drift", "--table", "members")
    assert latest["later"]["id"] == members_second["drop"]["id"]
    # a second analysed drop of the table takes the mark over
    run_json(cli, "check", str(v2), "--table", "visits", "--label", "cleaned", "--analysis",
             "--fail-on", "never")
    now_listed = run_json(cli, "drops", "--table", "visits")
    assert [d["analysis"] for d in now_listed] == [False, False, False, True]
    status = run_json(cli, "status")
    section = next(s for s in status["sections"] if s["name"] == "drops")
    visits = next(i for i in section["items"] if i["table"] == "visits")
    assert visits["analysed_drop"] == now_listed[-1]["id"] == visits["drop"]
    assert "records" in visits and "drift_bands" in visits
    human = cli("drift", str(second["drop"]["id"]), str(third["drop"]["id"]))
    assert human.exit_code == 0 and "earlier drop" in human.stdout and "later drop" in human.stdout
    lines = human.stdout.splitlines()
    assert max(len(line.rstrip()) for line in lines) <= 100
    # notes stand on their own line, not in the band column; the table row of minutes has its band
    assert "  visit_id, member_id: identifiers are compared record by record, not by their distribution" \
        in lines
    assert any(line.startswith("minutes ") and "shifted" in line for line in lines)
    assert f"records compared with drop {second['drop']['id']}: 100 new, 0 vanished" in human.stdout
    # the check shows the drift of members' plan (a new level, shifted) and one line of records
    members_check = cli("check", str(m2), "--table", "members", "--no-record", "--against",
                        str(members_first["drop"]["id"]))
    out = members_check.stdout
    assert members_check.exit_code == 0, members_check.output
    assert "drift: 1 of 1 variables worth a look" in out and "+ gold" in out
    assert "records compared with drop" in out and "variable=" not in out
    listing = cli("drops")
    assert listing.exit_code == 0 and max(len(line.rstrip()) for line in listing.stdout.splitlines()) <= 100
    assert "m1.csv" in listing.stdout and "+100 -0 ~" in listing.stdout
    shown = cli("drop", "show", str(third["drop"]["id"]))
    assert shown.exit_code == 0, shown.output
    assert "compared with the earlier drop" in shown.stdout and "Profile" in shown.stdout


def test_bad_input_exits_2_and_records_nothing(cli, linked: Path) -> None:  # type: ignore[no-untyped-def]
    m1 = write_members(linked, "m1.csv", 10, ["basic"], 1)
    members = run_json(cli, "check", str(m1), "--table", "members")
    v1 = write_visits(linked, "v1.csv", range(10), 0.0, 1)
    result = cli("check", str(v1), "--table", "visits", "--against", str(members["drop"]["id"]))
    assert result.exit_code == 2 and "not of 'visits'" in result.stderr
    result = cli("check", str(v1), "--table", "visits", "--against", "999")
    assert result.exit_code == 2
    assert len(run_json(cli, "drops")) == 1
    for args in (("drop", "show", "999"), ("drift", "1", "999"), ("drift", "--table", "visits")):
        result = cli(*args)
        assert result.exit_code == 2, args
        assert result.stderr.startswith("error:")
    assert cli("drift", str(members["drop"]["id"])).exit_code == 2  # no predecessor
