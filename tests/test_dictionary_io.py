"""Export and import of the dictionary: a hypothesis round trip through CSV and JSON into new studies."""

from __future__ import annotations

import tempfile
from pathlib import Path
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from studylog import dictionary, dictionary_io
from studylog import study as study_records
from studylog.dictionary_fields import codes_from_text, codes_to_text, names_from_text, names_to_text
from studylog.errors import InputFileError
from studylog.store.session import _from_text, dispose_engines, transaction

# Text a user might type, with the characters our CSV and list encodings must survive: separators,
# escapes, quotes, formula starters (OWASP "CSV Injection": = + - @ tab CR), newlines and non-ASCII.
TRICKY = ",=\\'\"-+@\t\r\n ;|é中"
plain_text = st.text(alphabet=st.characters(blacklist_categories=("Cs", "Cc")) | st.sampled_from(TRICKY),
                     max_size=20)
optional_text = st.none() | plain_text.filter(lambda t: t.strip() != "")
token = st.text(alphabet=st.characters(blacklist_categories=("Cs", "Cc"), max_codepoint=0x2FF)
                | st.sampled_from(",=\\'-+@"), min_size=1, max_size=8).map(str.strip).filter(bool)
names = st.text(alphabet="abcxyz_019 ,=-@'", min_size=1, max_size=10).filter(lambda n: n == n.strip() and n)


@st.composite
def code_lists(draw: Any, exclude: frozenset[str] = frozenset()) -> list[dict[str, Any]]:
    codes = draw(st.lists(token.filter(lambda c: c not in exclude), unique=True, max_size=4))
    labels = [draw(st.none() | token) for _ in codes]
    return [{"code": c, "label": label} for c, label in zip(codes, labels)]


@st.composite
def entries(draw: Any) -> dict[str, Any]:
    kind = draw(st.sampled_from(["integer", "number", "boolean", "categorical", "ordinal", "date", "text",
                                 "identifier", "datetime"]))
    fields: dict[str, Any] = {"type": kind}
    for field in ("label", "description", "unit", "source_detail", "instrument", "question_text",
                  "derivation", "time_association"):
        fields[field] = draw(optional_text)
    fields["role"] = draw(st.sampled_from(["input", "target", "identifier", "weight", "excluded"]))
    fields["source"] = draw(st.none() | st.sampled_from(["measured", "derived", "reported"]))
    fields["availability"] = draw(st.none() | st.sampled_from(["before", "at", "after", "unknown"]))
    fields["sensitivity"] = draw(st.sampled_from(["none", "quasi-identifier", "direct-identifier"]))
    fields["status"] = draw(st.sampled_from(["draft", "confirmed", "deprecated"]))
    fields["precision"] = draw(st.none() | st.integers(0, 6))
    fields["max_missing"] = draw(st.none() | st.floats(0, 1))
    fields["required"], fields["unique"] = draw(st.booleans()), draw(st.booleans())
    fields["aliases"] = draw(st.lists(names, unique=True, max_size=3))
    fields["derived_from"] = draw(st.lists(names, unique=True, max_size=3))
    fields["pattern"] = draw(st.none() | st.sampled_from([r"^\d{4}$", "[A-Z]{2}-[0-9]+", "a|b,c"]))
    fields["timezone"] = draw(st.none() | st.sampled_from(["UTC", "Europe/Paris", "+05:30"]))
    levels = draw(code_lists()) if kind in ("categorical", "ordinal") else []
    fields["levels"] = levels
    fields["missing_codes"] = draw(code_lists(frozenset(c["code"] for c in levels)))
    if kind in ("integer", "number"):
        low, high = sorted(draw(st.lists(st.integers(-10**6, 10**6), min_size=2, max_size=2)))
        fields["minimum"], fields["maximum"] = draw(st.sampled_from([(str(low), str(high)), (None, str(high))]))
        fields["plausible_max"] = str(high) if draw(st.booleans()) else None
    if kind == "boolean":
        fields["true_values"], fields["false_values"] = ["yes", "1"], ["no", "0"]
    if kind == "date":
        fields["date_format"] = draw(st.sampled_from([None, "%d/%m/%Y"]))
        fields["minimum"] = "2020-01-31" if fields["date_format"] is None else "31/01/2020"
    return fields


def _new_study(folder: Path) -> Any:
    location = _from_text(str(folder / "studylog.db"))
    study_records.create(location, title=folder.name)
    return location


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(names, st.sampled_from(["data", "visits"]), entries()), max_size=6,
                unique_by=lambda t: (t[1], t[0])))
def test_export_import_export_is_byte_identical(variables: list[tuple[str, str, dict[str, Any]]]) -> None:
    with tempfile.TemporaryDirectory() as folder:
        root = Path(folder)
        origin = _new_study(root / "origin")
        with transaction(origin, write=True) as session:
            dictionary.add_table(session, "data", grain="one row per member", description="=members")
            dictionary.add_table(session, "visits", key="visit_id")
            for name, table, fields in variables:
                dictionary.add_variable(session, name, fields, table=table)
        with transaction(origin, write=False) as session:
            as_csv, as_json = dictionary_io.export(session, "csv"), dictionary_io.export(session, "json")
        (root / "d.csv").write_text(as_csv, encoding="utf-8", newline="")
        (root / "d.json").write_text(as_json, encoding="utf-8", newline="")
        for source in ("d.csv", "d.json"):
            copy = _new_study(root / f"copy-{source}")
            with transaction(copy, write=True) as session:
                if source == "d.csv":  # CSV names tables only; declare them as the origin has them
                    dictionary.add_table(session, "data", grain="one row per member", description="=members")
                    dictionary.add_table(session, "visits", key="visit_id")
                result = dictionary_io.import_file(session, root / source)
                assert result["added"] == len(variables)
            with transaction(copy, write=False) as session:
                assert dictionary_io.export(session, "csv") == as_csv
                assert dictionary_io.export(session, "json") == as_json
        dispose_engines()


@given(st.lists(token, unique=True, max_size=5))
def test_name_lists_survive_their_text_form(items: list[str]) -> None:
    assert names_from_text(names_to_text(items)) == items


@given(code_lists())
def test_code_lists_survive_their_text_form(codes: list[dict[str, Any]]) -> None:
    assert codes_from_text(codes_to_text(codes)) == codes


def test_formula_cells_are_neutralised_in_csv_but_numbers_are_not(tmp_path: Path) -> None:
    location = _new_study(tmp_path / "s")
    with transaction(location, write=True) as session:
        dictionary.add_variable(session, "x", {"type": "integer", "label": "=HYPERLINK(\"http://x\")",
                                               "minimum": "-5", "missing_codes": "-99=refused"})
        text = dictionary_io.export(session, "csv")
    row = text.splitlines()[1]
    assert "'=HYPERLINK" in row  # OWASP "CSV Injection": a leading = would run as a formula
    assert ",-5," in row
    assert "'-99=refused" in row


def test_csv_with_carriage_returns_and_a_byte_order_mark_reads_back(tmp_path: Path) -> None:
    location = _new_study(tmp_path / "s")
    path = tmp_path / "in.csv"
    path.write_bytes("\ufeffname,type,description\r\nnote,text,\"line one\rline two\"\r\n".encode())
    with transaction(location, write=True) as session:
        dictionary_io.import_file(session, path)
        assert dictionary.get_variable(session, "note").description == "line one\rline two"


def test_csvw_is_offered_only_when_its_module_exists() -> None:
    import importlib.util

    present = importlib.util.find_spec("studylog.csvw") is not None
    assert ("csvw" in dictionary_io.formats()) is present


def test_a_csvw_document_is_handed_to_the_csvw_module(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import sys
    import types

    location = _new_study(tmp_path / "s")
    path = tmp_path / "meta.json"
    path.write_text('{"@context": "http://www.w3.org/ns/csvw", "tables": []}', encoding="utf-8")
    monkeypatch.setattr(dictionary_io, "formats", lambda: ("csv", "json"))
    with transaction(location, write=True) as session, pytest.raises(InputFileError, match="CSV on the Web"):
        dictionary_io.import_file(session, path)
    received: list[Any] = []
    fake = types.ModuleType("studylog.csvw")
    fake.import_csvw = lambda session, document: received.append(document) or {"added": 0}  # type: ignore[attr-defined]
    fake.export_csvw = lambda session, table=None: {"@context": "http://www.w3.org/ns/csvw", "table": table}  # type: ignore[attr-defined]
    import studylog

    monkeypatch.setitem(sys.modules, "studylog.csvw", fake)
    monkeypatch.setattr(studylog, "csvw", fake, raising=False)
    monkeypatch.setattr(dictionary_io, "formats", lambda: ("csv", "json", "csvw"))
    with transaction(location, write=True) as session:
        result = dictionary_io.import_file(session, path)
        exported = dictionary_io.export(session, "csvw")
    assert received == [{"@context": "http://www.w3.org/ns/csvw", "tables": []}]
    assert result["format"] == "csvw"
    assert '"@context": "http://www.w3.org/ns/csvw"' in exported


def test_a_json_file_without_a_variables_list_is_refused(cli, study, tmp_path) -> None:  # type: ignore[no-untyped-def]
    path = tmp_path / "other.json"
    path.write_text('{"format": "something else", "rows": []}', encoding="utf-8")
    result = cli("var", "import", str(path))
    assert result.exit_code == 2
    assert "'variables' list" in result.stderr
