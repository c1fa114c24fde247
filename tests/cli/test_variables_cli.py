"""``studylog var ...`` through the command line: exit codes, stdout, stderr, and what was stored."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from studylog.store.models import Question
from studylog.store.session import locate, transaction

EVERY_OPTION = [
    "--type", "ordinal", "--label", "Pain score", "--description", "Pain at the visit",
    "--unit", "points", "--precision", "0", "--role", "target", "--source", "reported",
    "--source-detail", "nurse interview", "--instrument", "NRS form v2", "--question-text",
    "How bad is the pain?", "--derivation", "as reported", "--derived-from", "pain_raw,visit_id",
    "--time", "at the visit", "--available", "at", "--levels", "0=none,1=mild,2=moderate,3=severe",
    "--missing-codes", "-99=refused,-98=don't know", "--max-missing", "0.05", "--required",
    "--unique", "--pattern", "^-?[0-9]+$", "--aliases", "pain_score,pain_nrs",
    "--sensitivity", "sensitive", "--status", "draft",
]


def _json(result) -> object:  # type: ignore[no-untyped-def]
    assert result.exit_code == 0, result.stderr
    return json.loads(result.stdout)


def _one_error_line(result, message: str) -> None:  # type: ignore[no-untyped-def]
    assert result.exit_code == 2, (result.stdout, result.stderr)
    assert result.stdout == ""
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1, result.stderr
    assert message in lines[0], lines[0]
    assert "Traceback" not in result.stderr


def test_add_with_every_option_and_show_it(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    first = cli("var", "add", "pain", *EVERY_OPTION)
    assert first.exit_code == 0, first.stderr
    assert first.stdout.splitlines() == [
        "variable 1 recorded", "created table 'data' for it (the study had no table)"
    ]
    shown = _json(cli("var", "show", "pain", "--json"))
    assert shown["table"] == "data"
    assert shown["levels"][2] == {"code": "2", "label": "moderate", "order": 3}
    assert shown["missing_codes"] == [{"code": "-99", "label": "refused"}, {"code": "-98", "label": "don't know"}]
    assert shown["derived_from"] == ["pain_raw", "visit_id"]
    assert shown["aliases"] == ["pain_score", "pain_nrs"]
    assert (shown["max_missing"], shown["required"], shown["unique"]) == (0.05, True, True)
    assert (shown["availability"], shown["time_association"], shown["sensitivity"]) == ("at", "at the visit", "sensitive")
    assert shown["precision"] == 0 and shown["question_text"] == "How bad is the pain?"

    dates = cli("var", "add", "visit_date", "--type", "date", "--date-format", "%d.%m.%Y", "--min",
                "01.01.2020", "--max", "31.12.2026", "--plausible-min", "01.06.2020", "--timezone",
                "Europe/Paris", "--json")
    assert _json(dates) == {"id": 2, "name": "visit_date", "table": "data", "table_created": False}
    flag = cli("var", "add", "smoker", "--type", "boolean", "--true-values", "yes,Y", "--false-values",
               "no,N", "--optional")
    assert flag.exit_code == 0
    assert _json(cli("var", "show", "smoker", "--json"))["true_values"] == ["yes", "Y"]
    human = cli("var", "show", "pain")
    assert "0=none,1=mild,2=moderate,3=severe" in human.stdout
    assert "-99=refused" in human.stdout


def test_list_filters_and_json(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "age", "--type", "integer", "--unit", "years")
    cli("var", "add", "renewed", "--type", "boolean", "--role", "target")
    cli("var", "add", "plan", "--type", "categorical", "--levels", "a,b")
    cli("var", "confirm", "age")
    assert [v["name"] for v in _json(cli("var", "list", "--json"))] == ["age", "renewed", "plan"]  # type: ignore[union-attr]
    assert [v["name"] for v in _json(cli("var", "list", "--role", "target", "--json"))] == ["renewed"]  # type: ignore[union-attr]
    assert [v["name"] for v in _json(cli("var", "list", "--type", "categorical", "--json"))] == ["plan"]  # type: ignore[union-attr]
    assert [v["name"] for v in _json(cli("var", "list", "--status", "confirmed", "--json"))] == ["age"]  # type: ignore[union-attr]
    human = cli("var", "list")
    assert "age" in human.stdout and "years" in human.stdout
    _one_error_line(cli("var", "list", "--role", "outcome"), "unknown role 'outcome'")
    _one_error_line(cli("var", "list", "--table", "lab"), "no table 'lab'")


def test_confirmed_changes_need_a_reason_and_may_name_a_question(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "income", "--type", "number", "--unit", "EUR")
    cli("var", "add", "region", "--type", "categorical", "--levels", "n=north,s=south")
    assert _json(cli("var", "set", "income", "--unit", "USD", "--json"))["unit"] == "USD"  # type: ignore[index]
    confirmed = cli("var", "confirm", "income", "region", "--by", "data owner", "--json")
    assert _json(confirmed) == {"confirmed": ["income", "region"], "by": "data owner"}
    _one_error_line(cli("var", "set", "income", "--unit", "GBP"), "'income' is confirmed; give --why")
    assert _json(cli("var", "show", "income", "--json"))["unit"] == "USD"  # type: ignore[index]
    with transaction(locate(), write=True) as session:
        question = Question(text="Which currency?", author="t", created_at="2026-01-01T00:00:00Z")
        session.add(question)
        session.flush()
        question_id = question.id
    done = cli("var", "set", "income", "--unit", "GBP", "--why", "owner's answer", "--question",
               str(question_id))
    assert done.exit_code == 0 and done.stdout.strip() == "updated data.income"
    _one_error_line(cli("var", "set", "income", "--unit", "EUR", "--why", "x", "--question", "77"),
                    "no question 77")
    changes = _json(cli("var", "history", "income", "--json"))
    assert [(c["action"], c["field"], c["old"], c["new"], c["why"], c["question"], c["author"])  # type: ignore[index]
            for c in changes][1:] == [  # type: ignore[union-attr]
        ("update", "unit", "EUR", "USD", None, None, "tester"),
        ("confirm", "status", "draft", "confirmed", None, None, "data owner"),
        ("update", "unit", "USD", "GBP", "owner's answer", question_id, "tester"),
    ]
    assert all(c["at"].endswith("Z") for c in changes)  # type: ignore[union-attr]
    human = cli("var", "history", "income")
    assert "owner's answer" in human.stdout


def test_clearing_a_field_with_an_empty_value(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "weight", "--type", "number", "--unit", "kg", "--max", "300")
    assert _json(cli("var", "set", "weight", "--unit", "", "--max", "", "--json"))["unit"] is None  # type: ignore[index]
    _one_error_line(cli("var", "set", "weight"), "give at least one field to change")


def test_deprecate_and_rename(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "bmi_raw", "--type", "number")
    cli("var", "add", "obese", "--type", "boolean", "--derived-from", "bmi_raw")
    renamed = cli("var", "rename", "bmi_raw", "bmi", "--why", "agreed name")
    assert renamed.exit_code == 0
    assert "'bmi_raw' is kept as an alias" in renamed.stdout
    assert _json(cli("var", "show", "bmi", "--json"))["aliases"] == ["bmi_raw"]  # type: ignore[index]
    assert _json(cli("var", "show", "obese", "--json"))["derived_from"] == ["bmi"]  # type: ignore[index]
    _one_error_line(cli("var", "show", "bmi_raw"), "renamed to 'bmi'")
    missing_why = cli("var", "rename", "bmi", "bmi2")
    assert missing_why.exit_code == 2 and "--why" in missing_why.stderr
    deprecated = _json(cli("var", "deprecate", "obese", "--why", "not used", "--json"))
    assert deprecated["status"] == "deprecated"  # type: ignore[index]
    assert len(_json(cli("var", "list", "--json"))) == 2  # type: ignore[arg-type]
    _one_error_line(cli("var", "rename", "bmi", "obese", "--why", "x"), "'obese' already exists")


def test_freeze_versions_and_diff(cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "age", "--type", "integer", "--max", "120")
    cli("var", "add", "sex", "--type", "categorical", "--levels", "f,m")
    frozen = cli("var", "freeze", "v1", "--note", "agreed with the data owner", "--json")
    document = _json(frozen)
    assert document["id"] == 1 and document["name"] == "v1" and document["variables"] == 2  # type: ignore[index]
    _one_error_line(cli("var", "freeze", "v1"), "version 'v1' already exists")
    cli("var", "set", "age", "--max", "110")
    cli("var", "add", "income", "--type", "number")
    cli("var", "rename", "sex", "gender", "--why", "wording")
    cli("var", "freeze", "v2")
    listed = _json(cli("var", "versions", "--json"))
    assert [v["name"] for v in listed] == ["v1", "v2"]  # type: ignore[union-attr]
    assert listed[0]["change_id"] < listed[1]["change_id"]  # type: ignore[index]
    diff = _json(cli("var", "diff", "v1", "v2", "--json"))
    assert diff["added"] == [{"table": "data", "name": "income"}]  # type: ignore[index]
    assert diff["removed"] == []  # type: ignore[index]
    assert [(r["old"], r["new"]) for r in diff["renamed"]] == [("sex", "gender")]  # type: ignore[index]
    assert diff["changed"] == [{"table": "data", "name": "age",  # type: ignore[index]
                                "fields": [{"field": "maximum", "old": "120", "new": "110"}]}]
    now = _json(cli("var", "diff", "v2", "--json"))
    assert now["to"] == "current" and now["added"] == now["changed"] == []  # type: ignore[index]
    cli("var", "deprecate", "income", "--why", "not delivered")
    later = _json(cli("var", "diff", "v2", "--json"))
    assert later["changed"][0]["fields"] == [{"field": "status", "old": "draft", "new": "deprecated"}]  # type: ignore[index]
    human = cli("var", "diff", "v1", "v2")
    assert "added: data.income" in human.stdout
    assert "changed: data.age maximum: 120 -> 110" in human.stdout
    _one_error_line(cli("var", "diff", "v9"), "no dictionary version 'v9'")


def test_export_then_import_into_a_new_study(cli, study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:  # type: ignore[no-untyped-def]
    cli("table", "add", "members", "--key", "member_id")
    cli("table", "add", "visits", "--key", "visit_id")
    cli("var", "add", "member_id", "--type", "identifier", "--table", "members")
    cli("var", "add", "member_id", "--type", "identifier", "--table", "visits", "--references", "members.member_id")
    cli("var", "add", "formula", "--type", "text", "--table", "visits", "--label", "=1+2", "--description",
        "@SUM(A1)")
    cli("var", "add", "score", "--type", "number", "--table", "visits", "--min", "-5",
        "--missing-codes", "-99=refused")
    exported = tmp_path / "dictionary.json"
    assert cli("var", "export", "--format", "json", "-o", str(exported)).exit_code == 0
    as_csv = cli("var", "export").stdout
    assert "'=1+2" in as_csv and "'@SUM(A1)" in as_csv and "'-99=refused" in as_csv
    assert ",-5," in as_csv  # a plain number is not a formula and stays as it is
    csv_file = tmp_path / "dictionary.csv"
    csv_file.write_text(as_csv, encoding="utf-8")

    for source in (exported, csv_file):
        monkeypatch.setenv("STUDYLOG_STORE", str(tmp_path / f"new-{source.suffix[1:]}" / "studylog.db"))
        assert cli("init").exit_code == 0
        if source is csv_file:  # CSV carries table names only; keys are declared first
            cli("table", "add", "members", "--key", "member_id")
            cli("table", "add", "visits", "--key", "visit_id")
        imported = _json(cli("var", "import", str(source), "--json"))
        assert imported["added"] == 4 and imported["updated"] == 0  # type: ignore[index]
        assert cli("var", "export").stdout == as_csv
        assert cli("var", "export", "--format", "json").stdout == exported.read_text(encoding="utf-8")
        again = _json(cli("var", "import", str(source), "--json"))
        assert again["unchanged"] == 4  # type: ignore[index]
    assert cli("var", "export", "--table", "members").stdout.count("\n") == 2
    _one_error_line(cli("var", "export", "--format", "xml"), "unknown export format 'xml'")


def _snapshot(cli) -> tuple[str, str]:  # type: ignore[no-untyped-def]
    return cli("var", "export", "--format", "json").stdout, cli("var", "history", "--json").stdout


def test_import_failing_on_its_last_row_leaves_the_store_unchanged(cli, study: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "age", "--type", "integer")
    before = _snapshot(cli)
    bad = tmp_path / "bad.csv"
    bad.write_text(
        "name,type,unit,minimum,maximum\n"
        "age,integer,years,0,120\n"
        "height,number,cm,,\n"
        "weight,number,kg,300,10\n",
        encoding="utf-8",
    )
    result = cli("var", "import", str(bad))
    _one_error_line(result, "bad.csv, line 4: weight: minimum 300 is above maximum 10")
    assert _snapshot(cli) == before


@pytest.mark.parametrize(
    ("content", "message"),
    [
        ("name,type,colour\nage,integer,red\n", "line 1: unknown column 'colour'"),
        ("type\ninteger\n", "no 'name' column"),
        ("name,type\nage,integer\nage,number\n", "line 3: variable 'age' appears twice"),
        ("name,type\nage,integer,extra\n", "line 2: 3 cells where the header has 2"),
        ("name,type\nx,float\n", "line 2: x: unknown type 'float'"),
        ('{"variables": [{"name": "x", "type": "integer", "levels": ["a"]}]}', "variable entry 1: x: levels"),
        ('{"variables": [', "not valid JSON"),
        ('{"variables": [{"name": "x", "kind": "integer"}]}', "unknown key 'kind'"),
        ("", "the file is empty"),
    ],
)
def test_malformed_import_files(cli, study: Path, tmp_path: Path, content: str, message: str) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "keep", "--type", "integer")
    before = _snapshot(cli)
    path = tmp_path / ("in.json" if content.startswith("{") else "in.csv")
    path.write_text(content, encoding="utf-8")
    _one_error_line(cli("var", "import", str(path)), message)
    assert _snapshot(cli) == before


def test_import_updates_go_through_the_history(cli, study: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "age", "--type", "integer", "--unit", "years", "--status", "confirmed")
    update = tmp_path / "update.csv"
    update.write_text("name,type,unit\nage,integer,months\n", encoding="utf-8")
    _one_error_line(cli("var", "import", str(update)), "line 2: 'age' is confirmed; give --why")
    done = _json(cli("var", "import", str(update), "--why", "owner sent the new codebook", "--json"))
    assert done["updated"] == 1  # type: ignore[index]
    last = _json(cli("var", "history", "age", "--json"))[-1]  # type: ignore[index]
    assert (last["field"], last["old"], last["new"], last["why"]) == (
        "unit", "years", "months", "owner sent the new codebook")
    _one_error_line(cli("var", "import", str(tmp_path / "nowhere.csv")), "nowhere.csv: no such file")


# Each bad input of issue 2 (item 8): one line on stderr, exit 2, nothing written.
BAD_INPUTS = [
    (("var", "add", "x", "--type", "float"), "unknown type 'float'; allowed: integer, number, boolean"),
    (("var", "set", "ghost", "--unit", "kg"), "no variable 'ghost'"),
    (("var", "show", "ghost"), "no variable 'ghost'"),
    (("var", "add", "x", "--type", "integer", "--table", "lab"), "no table 'lab'"),
    (("var", "add", "age", "--type", "integer"), "variable 'age' already exists in table 'visits'"),
    (("var", "add", "x", "--type", "integer", "--min", "10", "--max", "1"), "minimum 10 is above maximum 1"),
    (("var", "add", "x", "--type", "integer", "--min", "0", "--max", "100", "--plausible-max", "200"),
     "plausible max 200 is outside the possible range 0..100"),
    (("var", "add", "x", "--type", "number", "--levels", "1=low,2=high"), "levels apply to categorical"),
    (("var", "add", "x", "--type", "text", "--pattern", "[a-"), "is not a valid regular expression"),
    (("var", "add", "x", "--type", "identifier", "--references", "visits.age"),
     "'age' is not the key of table 'visits'"),
    (("var", "add", "x", "--type", "integer", "--min", "low"), "must be a number, not 'low'"),
    (("var", "add", "x", "--type", "integer", "--max-missing", "2"), "between 0 and 1"),
    (("var", "add", "x", "--type", "integer", "--precision", "-2"), "0 or more decimals"),
    (("var", "add", "x", "--type", "integer", "--role", "outcome"), "unknown role 'outcome'"),
    (("var", "add", "x", "--type", "integer", "--source", "rumour"), "unknown source 'rumour'"),
    (("var", "add", "x", "--type", "integer", "--sensitivity", "secret"), "unknown sensitivity 'secret'"),
    (("var", "add", "x", "--type", "integer", "--available", "soon"), "unknown availability 'soon'"),
    (("var", "add", "x", "--type", "integer", "--status", "done"), "unknown status 'done'"),
    (("var", "add", "x", "--type", "date", "--min", "2020-13-45"), "does not match the date format"),
    (("var", "add", "x"), "Missing option '--type'"),
    (("var", "confirm", "age", "ghost"), "no variable 'ghost'"),
    (("var", "deprecate", "ghost", "--why", "x"), "no variable 'ghost'"),
    (("var", "history", "ghost"), "no variable 'ghost'"),
]


@pytest.mark.parametrize(("args", "message"), BAD_INPUTS, ids=[" ".join(a[1:4]) for a, _ in BAD_INPUTS])
def test_bad_input_is_one_line_exit_2_and_nothing_written(cli, study: Path, args: tuple[str, ...], message: str) -> None:  # type: ignore[no-untyped-def]
    cli("table", "add", "visits", "--key", "visit_id")
    cli("var", "add", "age", "--type", "integer")
    before = _snapshot(cli)
    _one_error_line(cli(*args), message)
    assert _snapshot(cli) == before


def test_csvw_export_reads_back_through_var_import(cli, study: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:  # type: ignore[no-untyped-def]
    cli("var", "add", "age", "--type", "integer", "--unit", "years", "--min", "0", "--max", "120")
    cli("var", "add", "arm", "--type", "categorical", "--levels", "a=control,b=treated")
    metadata = tmp_path / "data.csv-metadata.json"
    assert cli("var", "export", "--format", "csvw", "-o", str(metadata)).exit_code == 0
    assert json.loads(metadata.read_text(encoding="utf-8"))["@context"] == "http://www.w3.org/ns/csvw"
    monkeypatch.setenv("STUDYLOG_STORE", str(tmp_path / "copy" / "studylog.db"))
    cli("init")
    imported = _json(cli("var", "import", str(metadata), "--json"))
    assert imported["format"] == "csvw" and imported["added"] == 2  # type: ignore[index]
    age = _json(cli("var", "show", "age", "--json"))
    assert (age["unit"], age["minimum"], age["maximum"]) == ("years", "0", "120")  # type: ignore[index]
