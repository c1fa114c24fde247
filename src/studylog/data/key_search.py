"""The key candidate of a drafted table: a column, else a pair of columns, complete and unique.

Identifiers and id-like names are tried first; a pair repeated within the first ``PAIR_PREFIX_ROWS``
rows is rejected without a pass over the whole table.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from studylog.data.infer import id_like_name

if TYPE_CHECKING:
    import pyarrow as pa

    from studylog.data.infer import Proposal

KEY_TYPES = ("identifier", "integer", "categorical", "ordinal", "date", "datetime", "boolean")
MAX_KEY_COLUMNS = 30
PAIR_PREFIX_ROWS = 20_000


def find_key(table: pa.Table, proposals: list[Proposal]) -> tuple[list[str], str] | None:
    """A column, else a pair of columns, that is complete and unique; identifiers and id-like names first."""
    import pyarrow.compute as pc

    rows = table.num_rows
    if rows < 2:
        return None
    complete = [p for p in proposals if p.evidence.empty == 0 and not p.missing_codes and p.type in KEY_TYPES]

    position = {id(p): i for i, p in enumerate(proposals)}

    def preference(p: Proposal) -> tuple[int, int]:
        return (0 if p.type == "identifier" else 1 if id_like_name(p.name) else 2, position[id(p)])

    complete.sort(key=preference)
    distinct = {p.name: pc.count_distinct(table.column(p.name)).as_py() for p in complete}
    for p in complete:
        if distinct[p.name] == rows:
            return [p.name], f"{p.name} is complete and unique over {rows} rows"
    pairs = [
        (a, b) for i, a in enumerate(complete[:MAX_KEY_COLUMNS]) for b in complete[i + 1 : MAX_KEY_COLUMNS]
        if distinct[a.name] > 1 and distinct[b.name] > 1 and distinct[a.name] * distinct[b.name] >= rows
    ]
    prefix = table.slice(0, PAIR_PREFIX_ROWS)
    for a, b in pairs:
        # a pair repeated within the first rows is no key: most pairs are rejected without a full pass
        if _unique_rows(prefix, [a.name, b.name]) and _unique_rows(table, [a.name, b.name]):
            return [a.name, b.name], f"{a.name} with {b.name} is complete and unique over {rows} rows"
    return None


def _unique_rows(table: pa.Table, names: list[str]) -> bool:
    return table.select(names).group_by(names).aggregate([]).num_rows == table.num_rows

