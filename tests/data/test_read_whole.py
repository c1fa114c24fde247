"""Reading a whole file at once (``read_table``, what profiling does) gives what the streaming reader
gives: the same table, or the same error with the same line, for every file of the bad-input corpus."""

from __future__ import annotations

import sys
from pathlib import Path

import pyarrow as pa
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "corpus"))

from make_corpus import CorpusFile, corpus, make_corpus  # noqa: E402

from studylog.data.read import open_source, read_table  # noqa: E402
from studylog.errors import InputFileError  # noqa: E402


@pytest.fixture(scope="module")
def files(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[CorpusFile, Path]]:
    folder = tmp_path_factory.mktemp("corpus")
    return {item.name: (item, path) for item, path in make_corpus(folder)}


def _streamed(path: Path) -> pa.Table | InputFileError:
    try:
        source = open_source(path)
        names = [f"c{i}" for i in range(len(source.columns))]
        batches = [batch.rename_columns(names) for batch in source.batches()]
        schema = pa.schema([pa.field(name, pa.string()) for name in names])
        return pa.Table.from_batches(batches, schema=schema).rename_columns(source.columns)
    except InputFileError as exc:
        return exc


@pytest.mark.parametrize("name", [item.name for item in corpus()])
def test_whole_file_reading_agrees_with_streaming(files: dict[str, tuple[CorpusFile, Path]], name: str) -> None:
    _item, path = files[name]
    expected = _streamed(path)
    if isinstance(expected, InputFileError):
        with pytest.raises(InputFileError) as caught:
            read_table(path)
        assert (caught.value.message, caught.value.line) == (expected.message, expected.line)
    else:
        assert read_table(path).equals(expected)
