"""``studylog check``: findings, the contract's JSON, exit codes, recording, versions, bad input."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from studylog.safety import MASK

CLEAN = "visit_id,age,sex,phone\nV-1,34,female,555-1234\nV-2,51,male,555-9876\n"
# row 2: age 1.5 (type), row 3: repeated key V-1, age 130 (range), row 4: age 15 (plausible)
FAULTY = ("visit_id,age,sex,phone\nV-1,34,female,555-1234\nV-2,1.5,male,555-9876\n"
          "V-1,130,female,555-0000\nV-4,15,Male,5550000\n")


@pytest.fixture
def visits(cli, study):  # type: ignore[no-untyped-def]
    for args in (("table", "add", "visits", "--key", "visit_id"),
                 ("var", "add", "visit_id", "--type", "identifier", "--required"),
                 ("var", "add", "age", "--type", "integer", "--min", "0", "--max", "120",
                  "--plausible-min", "18", "--missing-codes", "-99=refused"),
                 ("var", "add", "sex", "--type", "categorical", "--levels", "female,male"),
                 ("var", "add", "phone", "--type", "text", "--pattern", r"\d{3}-\d{4}",
                  "--sensitivity", "direct-identifier")):
        result = cli(*args)
        assert result.exit_code == 0, result.output
    return study


def write(name: str, text: str) -> Path:
    path = Path(name)
    path.write_text(text, encoding="utf-8")
    return path


def drops_in_store() -> list:  # type: ignore[type-arg]
    from sqlalchemy import select

    from studylog.store.models import Drop
    from studylog.store.session import locate, transaction

    with transaction(locate(), write=False) as session:
        return [(d.id, d.file_name, d.rows, d.errors, d.warnings) for d in session.scalars(select(Drop))]


def test_json_has_the_contract_shape(cli, visits) -> None:  # type: ignore[no-untyped-def]
    write("drop.csv", FAULTY)
    result = cli("check", "drop.csv", "--json", "--label", "April")
    assert result.exit_code == 1, result.output
    document = json.loads(result.stdout)
    assert set(document) >= {"drop", "findings", "errors", "warnings"}
    drop = document["drop"]
    assert set(drop) >= {"id", "label", "table", "file", "sha256", "rows", "columns", "dictionary"}
    assert (drop["label"], drop["table"], drop["file"], drop["rows"], drop["columns"]) == \
        ("April", "visits", "drop.csv", 4, 4)
    by_rule = {(f["variable"], f["rule"]): f for f in document["findings"]}
    assert set(by_rule[("age", "type")]) == {"variable", "rule", "severity", "count", "rows", "keys",
                                             "values", "message"}
    assert (by_rule[("age", "type")]["rows"], by_rule[("age", "type")]["keys"]) == ([2], ["V-2"])
    assert (by_rule[("age", "range")]["rows"], by_rule[("age", "range")]["values"]) == ([3], ["130"])
    assert by_rule[("age", "plausible")]["rows"] == [4]
    assert by_rule[("visit_id", "key")]["rows"] == [3]
    assert by_rule[("sex", "level")]["keys"] == ["V-4"]
    assert by_rule[("phone", "pattern")]["values"] == [MASK]
    assert document["errors"] == 5 and document["warnings"] == 1
    assert drops_in_store() == [(drop["id"], "drop.csv", 4, 5, 1)]


def test_masked_values_are_stored_masked(cli, visits) -> None:  # type: ignore[no-untyped-def]
    from sqlalchemy import select

    from studylog.store.models import Finding, Profile
    from studylog.store.session import locate, transaction

    write("drop.csv", FAULTY)
    cli("check", "drop.csv")
    with transaction(locate(), write=False) as session:
        stored = session.scalars(select(Finding).where(Finding.rule == "pattern")).one()
        assert stored.values == [MASK] and stored.rows == [4]
        phone = session.scalars(select(Profile).where(Profile.variable == "phone")).one()
        assert "5550000" not in json.dumps(phone.data)
        age = session.scalars(select(Profile).where(Profile.variable == "age")).one()
        assert (age.data["rows"], age.data["count"]) == (4, 4)


@pytest.mark.parametrize(
    ("text", "fail_on", "code"),
    [(FAULTY, "error", 1), (FAULTY, "warning", 1), (FAULTY, "never", 0),
     ("visit_id,age,sex,phone\nV-1,15,female,555-1234\n", "error", 0),
     ("visit_id,age,sex,phone\nV-1,15,female,555-1234\n", "warning", 1),
     (CLEAN, "warning", 0)],
)
def test_exit_codes_for_each_fail_on(cli, visits, text, fail_on, code) -> None:  # type: ignore[no-untyped-def]
    write("drop.csv", text)
    result = cli("check", "drop.csv", "--fail-on", fail_on, "--json")
    assert result.exit_code == code, result.output
    # the drop is recorded whatever the exit code, and the result printed before failing
    assert json.loads(result.stdout)["drop"]["id"] == drops_in_store()[0][0]


def test_human_output_and_failure_line(cli, visits) -> None:  # type: ignore[no-untyped-def]
    write("drop.csv", FAULTY)
    result = cli("check", "drop.csv")
    assert result.exit_code == 1
    assert "drop 1 recorded" in result.stdout
    assert "'Male' resembles 'male'" in result.stdout
    assert "checks failed: 5 error(s), 1 warning(s)" in result.stderr
    assert "Traceback" not in result.output
    # examples: row, key and quoted value; the value left out where it is the key; masked stays masked
    assert "row 3 V-1: '130'" in result.stdout
    assert "row 2 V-2: '1.5'" in result.stdout
    assert f"row 4 V-4: {MASK}" in result.stdout and "5550000" not in result.stdout
    assert re.search(r"visit_id key +row 3 V-1 *\n", result.stdout)
    # nothing to compare with: one line, no empty drift or records dumps
    assert "no earlier drop of this table to compare with" in result.stdout
    assert "drift" not in result.stdout and "records" not in result.stdout
    assert "errors=" not in result.stdout and "value=" not in result.stdout


def test_human_output_of_the_comparison(cli, visits) -> None:  # type: ignore[no-untyped-def]
    write("a.csv", CLEAN)
    assert cli("check", "a.csv").exit_code == 0
    # V-2's age changes, V-3 is new, V-1 is kept; a new level 'other' appears in sex
    write("b.csv", "visit_id,age,sex,phone\nV-1,34,female,555-1234\nV-2,52,male,555-9876\n"
                   "V-3,40,other,555-1111\n")
    result = cli("check", "b.csv")
    assert result.exit_code == 1, result.output
    out = result.stdout
    assert "compared with the earlier drop 1:" in out
    assert "records compared with drop 1: 1 new, 0 vanished, 1 changed (age 1)" in out
    assert "1 unchanged" in out
    assert "V-3 (row 3)" in out and "V-2 (row 2; age)" in out
    # the drift table lists sex (a new level) and names the variables without a distribution
    assert "+ other" in out
    assert "not compared by distribution (identifiers, dates, text): visit_id" in out
    assert "key=" not in out and "variable=" not in out and "n_earlier" not in out
    document = json.loads(cli("check", "b.csv", "--no-record", "--against", "1", "--json").stdout)
    assert document["records"]["changed_columns"] == {"age": 1}


def test_long_level_lists_are_shortened_for_the_screen_only(cli, study) -> None:  # type: ignore[no-untyped-def]
    levels = ",".join(f"level{i}" for i in range(1, 11))
    assert cli("var", "add", "grade", "--type", "categorical", "--levels", levels).exit_code == 0
    write("g.csv", "grade\nlevel1\nlevel99\n")
    human = cli("check", "g.csv", "--no-record")
    assert human.exit_code == 1
    assert "[level1, level2, level3, level4, ...]" in human.stdout
    assert "level6" not in human.stdout
    document = json.loads(cli("check", "g.csv", "--no-record", "--json").stdout)
    assert "level6" in document["findings"][0]["message"]


def test_short_message_keeps_ranges_and_patterns() -> None:
    from studylog.cli.check import MESSAGE_LIMIT, short_message

    assert short_message("3 values outside the possible range [16, 110]") == \
        "3 values outside the possible range [16, 110]"
    assert short_message("not matching the pattern ^[^@ ]+@[^@ ]+$") == "not matching the pattern ^[^@ ]+@[^@ ]+$"
    assert short_message("levels [a, b, c, d, e, f, ...] (e.g. 'x')") == "levels [a, b, c, d, ...] (e.g. 'x')"
    long = short_message("x" * 400)
    assert len(long) == MESSAGE_LIMIT and long.endswith("...")


def test_no_record_and_already_recorded(cli, visits) -> None:  # type: ignore[no-untyped-def]
    write("drop.csv", CLEAN)
    first = cli("check", "drop.csv", "--no-record", "--json")
    assert first.exit_code == 0 and json.loads(first.stdout)["drop"]["id"] is None
    assert drops_in_store() == []
    assert cli("check", "drop.csv").exit_code == 0
    again = cli("check", "drop.csv", "--json")
    assert json.loads(again.stdout)["already_recorded"] == 1
    assert json.loads(again.stdout)["recorded"] is False
    assert "already recorded as drop 1" in again.stderr
    assert len(drops_in_store()) == 1
    relabelled = cli("check", "drop.csv", "--label", "resent in May", "--json")
    assert json.loads(relabelled.stdout)["already_recorded"] == 1
    assert len(drops_in_store()) == 2


def test_checking_against_a_named_version(cli, visits) -> None:  # type: ignore[no-untyped-def]
    assert cli("var", "freeze", "v1", "--note", "agreed").exit_code == 0
    assert cli("var", "set", "age", "--max", "40", "--why", "a younger cohort").exit_code == 0
    write("drop.csv", CLEAN)
    now = json.loads(cli("check", "drop.csv", "--no-record", "--json").stdout)
    assert [f["rows"] for f in now["findings"] if f["rule"] == "range"] == [[2]]
    frozen = cli("check", "drop.csv", "--dictionary", "v1", "--json")
    assert frozen.exit_code == 0, frozen.output
    document = json.loads(frozen.stdout)
    assert document["drop"]["dictionary"] == "v1"
    assert [f for f in document["findings"] if f["rule"] == "range"] == []
    assert cli("check", "drop.csv", "--dictionary", "v9").exit_code == 2


def test_against_and_analysis_are_stored(cli, visits) -> None:  # type: ignore[no-untyped-def]
    from studylog.store.models import Drop
    from studylog.store.session import locate, transaction

    write("a.csv", CLEAN)
    write("b.csv", CLEAN + "V-3,40,male,555-1111\n")
    write("c.csv", CLEAN + "V-9,40,male,555-1111\n")
    cli("check", "a.csv")
    cli("check", "b.csv")
    third = json.loads(cli("check", "c.csv", "--against", "1", "--analysis", "--json").stdout)
    assert third["drop"]["against"] == 1 and third["drop"]["analysis"] is True
    with transaction(locate(), write=False) as session:
        assert session.get(Drop, 2).against_id == 1
        assert (session.get(Drop, 3).against_id, session.get(Drop, 3).analysis) == (1, True)
    assert cli("check", "c.csv", "--against", "99").exit_code == 2


@pytest.mark.parametrize(
    "content",
    [b"", b"PK\x03\x04binary", b"visit_id,age\n\"V-1,34\n", b"\xff\xfe\x00bad\x00bytes\n"],
)
def test_bad_input_exits_2_and_records_nothing(cli, visits, content) -> None:  # type: ignore[no-untyped-def]
    Path("bad.csv").write_bytes(content)
    result = cli("check", "bad.csv")
    assert result.exit_code == 2, result.output
    assert result.stderr.startswith("error: ") and "Traceback" not in result.output
    assert drops_in_store() == []


def test_missing_file_and_bad_fail_on(cli, visits) -> None:  # type: ignore[no-untyped-def]
    assert cli("check", "nope.csv").exit_code == 2
    write("drop.csv", CLEAN)
    assert cli("check", "drop.csv", "--fail-on", "sometimes").exit_code == 2
    assert drops_in_store() == []


def test_status_shows_the_last_check_by_rule(cli, visits) -> None:  # type: ignore[no-untyped-def]
    write("drop.csv", FAULTY)
    cli("check", "drop.csv")
    status = json.loads(cli("status", "--json").stdout)
    checks = next(s for s in status["sections"] if s["name"] == "checks")
    item = checks["items"][0]
    assert (item["table"], item["errors"], item["warnings"]) == ("visits", 5, 1)
    assert item["errors_by_rule"] == {"key": 1, "level": 1, "pattern": 1, "range": 1, "type": 1}
    assert item["warnings_by_rule"] == {"plausible": 1}
