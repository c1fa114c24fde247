"""Every file of the bad-input corpus through the reader and through ``studylog draft``.

Malformed files: InputFileError naming the file (and the line where one applies) from the reader; exit 2,
one line on stderr, no traceback and an unchanged store from the command, with or without --apply.
Unusual but valid files: read in full, and drafted with the types a correct reading gives.
"""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import pytest

from make_corpus import CorpusFile, corpus, make_corpus
from studylog.data.read import open_source
from studylog.errors import InputFileError

COUNTED_TABLES = ("data_tables", "variables", "changes", "study")


@pytest.fixture(scope="module")
def files(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[CorpusFile, Path]]:
    folder = tmp_path_factory.mktemp("corpus")
    return {item.name: (item, path) for item, path in make_corpus(folder)}


def test_the_corpus_is_large_enough() -> None:
    items = corpus()
    assert len(items) >= 30
    assert len({item.name for item in items}) == len(items)
    assert sum(item.error is not None for item in items) >= 25


def store_state(store: Path) -> dict[str, list[tuple]]:
    with sqlite3.connect(store) as connection:
        return {name: connection.execute(f"SELECT * FROM {name} ORDER BY id").fetchall() for name in COUNTED_TABLES}


@pytest.mark.parametrize("name", [item.name for item in corpus()])
def test_reader(files: dict[str, tuple[CorpusFile, Path]], name: str) -> None:
    item, path = files[name]
    if item.error is not None:
        with pytest.raises(InputFileError) as caught:
            source = open_source(path)
            for _batch in source.batches():
                pass
        assert item.error in caught.value.message
        assert str(path) in caught.value.message
        assert caught.value.line == item.line
        assert "\n" not in caught.value.message
        return
    source = open_source(path)
    rows = sum(batch.num_rows for batch in source.batches())
    assert (len(source.columns), rows) == (item.columns, item.rows)


@pytest.mark.parametrize("name", [item.name for item in corpus()])
def test_draft_command(files: dict[str, tuple[CorpusFile, Path]], name: str, cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    item, path = files[name]
    before = store_state(study)
    result = cli("draft", str(path), "--json")
    assert "Traceback" not in result.stderr and "Traceback" not in result.stdout
    if item.error is not None:
        assert result.exit_code == 2, result.stderr
        lines = result.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: ") and item.error in lines[0]
        assert result.stdout == ""
        applied = cli("draft", str(path), "--apply")
        assert applied.exit_code == 2 and len(applied.stderr.strip().splitlines()) == 1
    else:
        assert result.exit_code == 0, result.stderr
        document = json.loads(result.stdout)
        assert (document["columns"], document["rows"]) == (item.columns, item.rows)
        kinds = {v["name"]: v["type"] for v in document["variables"]}
        for column, kind in item.types.items():
            assert kinds[column] == kind, column
    assert store_state(study) == before


def test_unusual_files_draft_correctly(files: dict[str, tuple[CorpusFile, Path]], cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    _item, path = files["number_edges.csv"]
    document = json.loads(cli("draft", str(path), "--json").stdout)
    by_name = {v["name"]: v for v in document["variables"]}
    assert by_name["huge"]["evidence"]["not_parsed"] == ["1e309"]
    assert [c["code"] for c in by_name["nan"]["missing_codes"]] == ["NaN"]
    _item, path = files["date_edges.csv"]
    by_name = {v["name"]: v for v in json.loads(cli("draft", str(path), "--json").stdout)["variables"]}
    assert by_name["seen"]["evidence"]["not_parsed"] == ["2024-02-30"]
    assert [c["code"] for c in by_name["born"]["missing_codes"]] == ["0000-01-01"]
    _item, path = files["one_mb_cell.csv"]
    table = open_source(path).table()
    assert len(table.column("note")[0].as_py()) == 1_000_000


def test_hostile_names_and_values_are_stored_as_they_are(files: dict[str, tuple[CorpusFile, Path]], cli, study: Path) -> None:  # type: ignore[no-untyped-def]
    _item, path = files["sql_keyword_names.csv"]
    applied = cli("draft", str(path), "--apply", "--table", "odd", "--json")
    assert applied.exit_code == 0, applied.stderr
    listed = json.loads(cli("var", "list", "--table", "odd", "--json").stdout)
    names = [v["name"] for v in (listed if isinstance(listed, list) else listed["variables"])]
    assert names == ["select", "from", "drop table x;", "it's", 'say "hi"', "where", "a;b"]
    _item, path = files["long_names.csv"]
    long = json.loads(cli("draft", str(path), "--apply", "--table", "long", "--json").stdout)
    assert [r["variable"] for r in long["refused"]] == ["w" * 1000]  # longer than a name may be
    _item, path = files["control_char_name.csv"]
    odd = json.loads(cli("draft", str(path), "--apply", "--table", "ctl", "--json").stdout)
    assert [r["variable"] for r in odd["refused"]] == ["bad\x01name"]
    _item, path = files["formula_and_html.csv"]
    shown = cli("draft", str(path))
    assert shown.exit_code == 0 and "<script>" in shown.stdout  # shown as text, never run
