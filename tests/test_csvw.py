"""The dictionary as W3C CSV on the Web metadata (Metadata Vocabulary for Tabular Data, REC 2015-12-17)."""

from __future__ import annotations

import itertools
import json
from pathlib import Path
from urllib.parse import unquote

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from report_study import build_in_store
from studylog import csvw, dictionary
from studylog import study as study_records
from studylog.errors import InvalidValue
from studylog.store.session import StoreLocation, create_store, dispose_engines, locate, transaction


def _export(**options) -> dict:  # type: ignore[no-untyped-def]
    with transaction(locate(), write=False) as session:
        return csvw.export_csvw(session, **options)


def _columns(description: dict) -> dict[str, dict]:
    return {unquote(c["name"]): c for c in description["tableSchema"]["columns"]}


def test_export_follows_the_vocabulary(study: Path) -> None:
    build_in_store()
    document = _export()
    assert document["@context"] == "http://www.w3.org/ns/csvw"
    members, visits = document["tables"]
    assert [members["url"], visits["url"]] == ["members.csv", "visits.csv"]
    assert members["tableSchema"]["primaryKey"] == "member_id"
    assert visits["tableSchema"]["foreignKeys"] == [
        {"columnReference": "member_id",
         "reference": {"resource": "members.csv", "columnReference": "member_id"}}]
    m, v = _columns(members), _columns(visits)
    assert m["age"]["datatype"] == {"base": "integer", "minimum": 0, "maximum": 120}
    assert m["age"]["null"] == ["", "-99"] and m["age"]["titles"] == ["age"]
    assert m["age"]["dc:title"] == "Age at registration"
    assert m["member_id"]["required"] is True
    assert m["member_id"]["datatype"] == {"base": "string", "format": "^M-[0-9]{6}$"}
    assert v["readmitted"]["datatype"] == {"base": "boolean", "format": "yes|no"}
    assert v["discharged"]["datatype"] == {"base": "date", "format": "yyyy-MM-dd"}
    assert v["systolic_bp"]["datatype"]["base"] == "decimal"  # precision recorded
    assert v["income"]["datatype"] == {"base": "double"}
    # what CSVW cannot say travels in our extension property
    assert v["income"]["studylog:variable"]["sensitivity"] == "sensitive"
    assert v["income"]["studylog:variable"]["missing_codes"][1] == {"code": "-98", "label": "don't know"}
    assert members["studylog:table"] == {"name": "members", "grain": "one row per patient"}
    # one table alone is a table description, not a group
    single = _export(table="visits")
    assert "tables" not in single and single["url"] == "visits.csv"
    assert single["tableSchema"]["foreignKeys"][0]["reference"]["resource"] == "members.csv"


def test_the_export_reads_back_into_a_new_study_unchanged(study: Path, tmp_path: Path) -> None:
    build_in_store()
    first = _export()
    other = StoreLocation(f"sqlite:///{tmp_path / 'other.db'}", tmp_path / "other.db")
    study_records.create(other, title="other")
    with transaction(other, write=True) as session:
        summary = csvw.import_csvw(session, json.loads(json.dumps(first)))
    assert summary["tables_added"] == ["members", "visits"] and summary["added"] == 11
    with transaction(other, write=True) as session:
        second = csvw.export_csvw(session)
        again = csvw.import_csvw(session, second)
        assert csvw.export_csvw(session) == second
        member = dictionary.get_variable(session, "member_id", "visits")
        assert member.references == "members.member_id"
        assert dictionary.resolve_table(session, "visits").key == ["visit_id"]
    assert again["added"] == 0 and again["updated"] == 0 and again["unchanged"] == 11
    assert second == _with_orders(first)


def _with_orders(document: dict) -> dict:
    """The fixture writes levels without an order; the dictionary adds "order": null on the way in."""
    for table in document["tables"]:
        for column in table["tableSchema"]["columns"]:
            for level in column["studylog:variable"].get("levels", []):
                level.setdefault("order", None)
    return document


# The W3C CSVW test suite's countries example (w3c/csvw, tests/countries.json), written as the
# Recommendation names a group's tables ("tables"; the test file uses the earlier draft's "resources").
W3C_COUNTRIES = {
    "@context": "http://www.w3.org/ns/csvw",
    "tables": [{
        "url": "countries.csv",
        "tableSchema": {
            "columns": [
                {"name": "countryCode", "datatype": "string",
                 "propertyUrl": "http://www.geonames.org/ontology{#_name}"},
                {"name": "latitude", "datatype": "number"},
                {"name": "longitude", "datatype": "number"},
                {"name": "name", "datatype": "string"},
            ],
            "aboutUrl": "http://example.org/countries.csv{#countryCode}",
            "propertyUrl": "http://schema.org/{_name}",
            "primaryKey": "countryCode",
        },
    }, {
        "url": "country_slice.csv",
        "tableSchema": {
            "columns": [
                {"name": "countryRef", "valueUrl": "http://example.org/countries.csv{#countryRef}"},
                {"name": "year", "datatype": "gYear"},
                {"name": "population", "datatype": "integer"},
            ],
            "foreignKeys": [{"columnReference": "countryRef",
                             "reference": {"resource": "countries.csv", "columnReference": "countryCode"}}],
        },
    }],
}


def test_a_w3c_example_reads_in_and_exports_its_keys(study: Path) -> None:
    with transaction(locate(), write=True) as session:
        summary = csvw.import_csvw(session, W3C_COUNTRIES)
        assert summary["tables_added"] == ["countries", "country_slice"] and summary["added"] == 7
        code = dictionary.get_variable(session, "countryCode", "countries")
        assert code.type == "identifier"  # the primary key of the table
        assert dictionary.get_variable(session, "latitude", "countries").type == "number"
        assert dictionary.get_variable(session, "population", "country_slice").type == "integer"
        # a string (or unknown) datatype of unknown meaning is free text: documents never show it
        assert dictionary.get_variable(session, "name", "countries").type == "text"
        assert dictionary.get_variable(session, "year", "country_slice").type == "text"
        assert dictionary.get_variable(session, "countryRef", "country_slice").references == \
            "countries.countryCode"
    exported = _export()
    countries, slices = exported["tables"]
    assert countries["tableSchema"]["primaryKey"] == "countryCode"
    assert slices["tableSchema"]["foreignKeys"] == W3C_COUNTRIES["tables"][1]["tableSchema"]["foreignKeys"]
    assert [c["name"] for c in slices["tableSchema"]["columns"]] == ["countryRef", "year", "population"]


def test_column_names_are_uri_template_variables() -> None:
    # RFC 6570 varname: ALPHA / DIGIT / "_" / pct-encoded; CSVW reserves names starting with "_"
    assert csvw.column_name("age") == "age"
    assert csvw.column_name("first name") == "first%20name"
    assert csvw.column_name("_row") == "%5Frow"
    assert csvw.column_name("größe") == "gr%C3%B6%C3%9Fe"
    assert csvw.column_name("a.b-c") == "a%2Eb%2Dc"


@given(st.text(min_size=1, max_size=30))
def test_column_names_round_trip(name: str) -> None:
    encoded = csvw.column_name(name)
    assert all(ch.isascii() and (ch.isalnum() or ch in "%_") for ch in encoded)
    assert not encoded.startswith("_")
    assert unquote(encoded) == name


@pytest.mark.parametrize(("ours", "base", "theirs"), [
    ("%Y-%m-%d", "date", "yyyy-MM-dd"),
    ("%d/%m/%Y", "date", "dd/MM/yyyy"),
    ("%d.%m.%Y", "date", "dd.MM.yyyy"),
    ("%Y%m%d", "date", "yyyyMMdd"),
    ("%Y-%m-%dT%H:%M:%S", "dateTime", "yyyy-MM-ddTHH:mm:ss"),
    ("%Y-%m-%d %H:%M", "dateTime", "yyyy-MM-dd HH:mm"),
    ("%Y-%m-%dT%H:%M:%S.%f%z", "dateTime", "yyyy-MM-ddTHH:mm:ss.SSSSSSxx"),
])
def test_date_formats_map_to_the_csvw_patterns(ours: str, base: str, theirs: str) -> None:
    # the patterns CSVW allows for dates and times (W3C Model for Tabular Data, 6.4.4; from memory)
    assert csvw._csvw_date_format(ours, base) == theirs
    assert csvw._strftime(theirs) == ours


@pytest.mark.parametrize("ours", ["%d %b %Y", "%y-%m-%d", "%Y-%j", "%m-%Y"])
def test_date_formats_csvw_cannot_say_go_in_the_extension(ours: str) -> None:
    assert csvw._csvw_date_format(ours, "date") is None


@pytest.mark.parametrize("document", [
    {"@context": "http://example.org/other", "url": "x.csv"},
    {"url": "x.csv", "tableSchema": {"columns": []}},
    {"@context": "http://www.w3.org/ns/csvw"},
    {"@context": "http://www.w3.org/ns/csvw", "tables": []},
    {"@context": "http://www.w3.org/ns/csvw", "url": "x.csv", "tableSchema": "x.json"},
    {"@context": "http://www.w3.org/ns/csvw", "url": "x.csv", "tableSchema": {"columns": [{}]}},
    {"@context": "http://www.w3.org/ns/csvw", "url": "x.csv",
     "tableSchema": {"columns": [{"name": "a", "datatype": {"base": "integer", "minimum": True}}]}},
])
def test_bad_documents_are_refused(study: Path, document: dict) -> None:
    with pytest.raises(InvalidValue), transaction(locate(), write=True) as session:
        csvw.import_csvw(session, document)
    with transaction(locate(), write=False) as session:
        assert dictionary.tables(session) == []


# ---- round trip of generated dictionaries ----

names = st.from_regex(r"[A-Za-z][A-Za-z0-9_ é.-]{0,11}", fullmatch=True).map(str.strip).filter(bool)
labels = st.none() | st.text(st.characters(blacklist_categories=("Cs", "Cc")), min_size=1, max_size=20)
codes = st.lists(st.from_regex(r"-?[0-9]{1,3}", fullmatch=True), max_size=3, unique=True)


@st.composite
def entries(draw: st.DrawFn) -> dict:
    kind = draw(st.sampled_from(["integer", "number", "boolean", "categorical", "ordinal", "date",
                                 "datetime", "text", "identifier"]))
    fields: dict = {"type": kind, "label": draw(labels), "description": draw(labels),
                    "required": draw(st.booleans()), "unit": draw(st.none() | st.sampled_from(["kg", "mmHg"])),
                    "role": draw(st.sampled_from(["input", "target", "weight", "group"])),
                    "sensitivity": draw(st.sampled_from(["none", "quasi-identifier", "sensitive"])),
                    "aliases": draw(st.lists(st.sampled_from(["old_a", "old b", "prev"]), unique=True,
                                             max_size=2))}
    missing = draw(codes)
    fields["missing_codes"] = [{"code": c, "label": draw(st.none() | st.sampled_from(["refused", "n/a"]))}
                               for c in missing]
    if kind in ("integer", "number"):
        low = draw(st.integers(-1000, 1000))
        high = low + draw(st.integers(0, 1000))
        if kind == "number" and draw(st.booleans()):
            fields.update(minimum=f"{low / 4}", maximum=f"{high}.25", precision=draw(st.integers(0, 3)))
        else:
            fields.update(minimum=str(low), maximum=str(high))
    elif kind == "boolean":
        fields.update(draw(st.sampled_from([
            {}, {"true_values": ["yes"], "false_values": ["no"]},
            {"true_values": ["1", "Y"], "false_values": ["0", "N"]}])))
    elif kind in ("categorical", "ordinal"):
        fields["levels"] = [{"code": str(i), "label": f"level {i}"}
                            for i in range(draw(st.integers(1, 4)))]
    elif kind == "date":
        fields["date_format"] = draw(st.sampled_from([None, "%Y-%m-%d", "%d/%m/%Y", "%d %b %Y"]))
    elif kind == "datetime":
        fields["date_format"] = draw(st.sampled_from([None, "%Y-%m-%dT%H:%M:%S", "%Y-%m-%d %H:%M"]))
    elif kind == "identifier":
        fields["pattern"] = draw(st.sampled_from([None, "^[A-Z]{2}[0-9]+$"]))
    return fields


_stores = itertools.count()


def _fresh(tmp: Path) -> StoreLocation:
    path = tmp / f"s{next(_stores)}.db"
    location = StoreLocation(f"sqlite:///{path}", path)
    create_store(location)
    with transaction(location, write=True) as session:
        from studylog.clock import author, now
        from studylog.store.models import Study

        session.add(Study(title="t", created_at=now(), author=author()))
    return location


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.tuples(names, entries()), min_size=1, max_size=6, unique_by=lambda p: p[0].lower()))
def test_round_trip_keeps_every_field(tmp_path: Path, variables: list) -> None:
    source, target = _fresh(tmp_path), _fresh(tmp_path)
    try:
        with transaction(source, write=True) as session:
            dictionary.add_table(session, "main", grain="one row per thing")
            for name, fields in variables:
                try:
                    dictionary.add_variable(session, name, fields, table="main")
                except InvalidValue:
                    continue  # a combination the dictionary refuses is not ours to carry
            document = csvw.export_csvw(session)
            before = [dictionary.export_entry(v) for v in dictionary.variables(session)]
        with transaction(target, write=True) as session:
            csvw.import_csvw(session, json.loads(json.dumps(document)))
            after = [dictionary.export_entry(v) for v in dictionary.variables(session)]
            assert csvw.export_csvw(session) == document
        assert after == before
    finally:
        dispose_engines()


def test_var_export_and_import_dispatch_to_csvw(cli, study: Path, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    build_in_store()
    exported = tmp_path / "dictionary.csvw.json"
    result = cli("var", "export", "--format", "csvw", "-o", str(exported))
    assert result.exit_code == 0, result.stderr
    document = json.loads(exported.read_text(encoding="utf-8"))
    assert document["@context"] == "http://www.w3.org/ns/csvw" and len(document["tables"]) == 2
    other = tmp_path / "other" / "studylog.db"
    assert cli("--store", str(other), "init", "--title", "other").exit_code == 0
    imported = cli("--store", str(other), "var", "import", str(exported), "--json")
    assert imported.exit_code == 0, imported.stderr
    summary = json.loads(imported.stdout)
    assert summary["format"] == "csvw" and summary["added"] == 11
    again = tmp_path / "again.json"
    assert cli("--store", str(other), "var", "export", "--format", "csvw", "-o", str(again)).exit_code == 0
    assert json.loads(again.read_text(encoding="utf-8")) == _with_orders(document)
    # a document that is not CSVW metadata changes nothing and says why
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps({"@context": "http://www.w3.org/ns/csvw", "tables": "x"}), encoding="utf-8")
    refused = cli("--store", str(other), "var", "import", str(bad))
    assert refused.exit_code == 2 and "tables must be" in refused.stderr
