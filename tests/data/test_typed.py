"""Reading text cells as their types: the shortcuts equal the plain Arrow computation they stand for."""

from __future__ import annotations

import pyarrow as pa
import pyarrow.compute as pc
from hypothesis import given, settings
from hypothesis import strategies as st

from studylog.data.typed import trimmed_strings

# texts with ASCII and Unicode spaces (no-break space, ideographic space, line separator) at either end
SPACES = [" ", "\t", "\n", "\r", "\x0b", "\x0c", "\u00a0", "\u3000", "\u2028", "\u2003"]
TEXTS = st.one_of(
    st.none(),
    st.text(max_size=6),
    st.builds(lambda a, b, c: a + b + c, st.sampled_from(SPACES + [""]), st.text(max_size=4),
              st.sampled_from(SPACES + [""])),
)


@settings(max_examples=300, deadline=None)
@given(st.lists(TEXTS, max_size=30), st.integers(0, 5))
def test_trimmed_strings_equal_arrows_trim(values: list[str | None], cut: int) -> None:
    # the reference is Arrow's own utf8_trim_whitespace, on a slice too (offsets not starting at 0)
    array = pa.array(values, pa.string()).slice(min(cut, len(values)))
    assert trimmed_strings(array).to_pylist() == pc.utf8_trim_whitespace(array).to_pylist()


def test_a_column_without_spaces_is_not_copied() -> None:
    array = pa.array(["a", "b c", None, "", "12"], pa.string())
    assert trimmed_strings(array) is array
    assert trimmed_strings(pa.array(["a", " b"])).to_pylist() == ["a", "b"]


NUMBER_CELLS = st.one_of(
    st.none(),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10**6, 10**6).map(str),
    st.text(alphabet="0123456789+-.eE ax,", max_size=7),
    st.sampled_from(["1e309", "-1e400", "nan", "inf", "+inf", ".5", "5.", "1.e3", "12,5", "0x10", "abc"]),
)


@settings(max_examples=300, deadline=None)
@given(st.lists(NUMBER_CELLS, max_size=25))
def test_numbers_read_as_python_reads_the_definition(cells: list[str | None]) -> None:
    # the reference: the module's stated definition (decimal notation, finite), with Python's re and float
    import math
    import re

    from studylog.data.spec import VariableSpec
    from studylog.data.typed import NUMBER_PATTERN, parse

    parsed = parse(pa.array(cells, pa.string()), VariableSpec(name="x", type="number"))
    expected, invalid = [], []
    for cell in cells:
        text = None if cell is None else cell.strip()
        if not text:
            expected.append(None)
            invalid.append(False)
            continue
        ok = re.fullmatch(NUMBER_PATTERN, text) is not None and math.isfinite(float(text))
        expected.append(float(text) if ok else None)
        invalid.append(not ok)
    assert parsed.values.to_pylist() == expected
    assert parsed.invalid.to_pylist() == invalid
