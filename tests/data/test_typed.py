"""Reading text cells as their types: the fast paths give what the stated definitions give."""

from __future__ import annotations

import pyarrow as pa
from hypothesis import given, settings
from hypothesis import strategies as st

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
