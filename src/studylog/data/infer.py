"""Proposing a dictionary entry for every column of a table of text, with the evidence for it.

For each column: a type (boolean, integer, number, date, datetime, ordinal, categorical, identifier,
text), its levels, its true/false values or date format, the observed minimum and maximum, likely
missing codes, and a key candidate for the table. Every proposal carries its evidence (values present,
share of them that parse as the proposed type, distinct values, examples, values that do not fit) so that
the analyst can judge it; nothing here is more than a draft.

The work is done on each column's distinct values with their counts (one hashing pass over the rows,
``pyarrow.compute.value_counts``); parsing, pattern tests and sentinel tests run vectorised over those.

Rules (heuristics of common practice, stated so that they can be reviewed):

- A type is proposed when at least ``PARSE_SHARE`` (95%) of the non-missing values parse as it, and all
  of them when there are fewer than ``SMALL_COLUMN`` (20) values; the others are shown as "not parsed".
- Strict parsing: integers and numbers in ASCII digits only (``٣`` is not a number), a value that
  overflows a double (``1e309``) is not a number; a date must match the whole format and exist
  (``2024-02-30`` is not a date), years before 1 are not dates.
- A missing code is a known missing word (``NA``, ``n/a``, ``unknown``, ``.``, ...), a numeric sentinel
  (``-99``, ``-98``, ``999``, ``9999``, ...) that lies outside the rest of the column (below a column that is
  otherwise never negative, or beyond Tukey's outer fence, 3 × the spread past the quartiles, of the
  rest), or a placeholder date (``9999-12-31``, ``1900-01-01``, ``0000-00-00``).
- Ordinal: whole numbers on a usual rating scale (lowest 0 or 1; highest 4, 5, 7 or 10; at least 3
  values seen), or every value a level of a known wording scale (agreement, frequency, quality,
  satisfaction, severity, low-high).
- Categorical: at most ``MAX_LEVELS`` (50) distinct values and at most half as many as there are values.
- Identifier: every value distinct, and either the name reads like one (``id``, ``..._id``, ``code``,
  ``key``, ``no``) or the values are short codes without spaces in a column of at least 10 values.
"""

from __future__ import annotations

import re
from dataclasses import asdict, dataclass, field
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import pyarrow as pa

PARSE_SHARE = 0.95
SMALL_COLUMN = 20
MAX_LEVELS = 50
EXAMPLES = 5

MISSING_WORDS = frozenset({
    "na", "n/a", "n.a.", "n.a", "nan", "null", "nil", "missing", "unknown", "unk", "not known",
    "not available", "not applicable", "not stated", "#n/a", "?", ".", "-", "--", "refused",
    "don't know", "dont know",
})
PLACEHOLDER_DATES = frozenset({"0000-00-00", "0000-01-01", "9999-12-31", "1900-01-01", "1899-12-30"})
# negative codes -6..-9, -96..-99, -996..-999, ...; positive 96..99, 996..999, 9996..9999, ...
SENTINEL_PATTERN = r"^(-(9*[6-9])|(9+[6-9]))(\.0+)?$"

BOOLEAN_PAIRS = (
    ("true", "false"), ("yes", "no"), ("y", "n"), ("t", "f"), ("1", "0"), ("on", "off"),
)

# Known wording scales, lowest first; a level may be spelled in more than one way.
SCALES: tuple[tuple[tuple[str, ...], ...], ...] = (
    (("strongly disagree",), ("disagree",), ("neither agree nor disagree", "neutral", "undecided"),
     ("agree",), ("strongly agree",)),
    (("never",), ("rarely", "seldom"), ("sometimes", "occasionally"), ("often", "frequently"),
     ("always", "very often")),
    (("very poor",), ("poor",), ("fair",), ("good",), ("very good",), ("excellent",)),
    (("very dissatisfied",), ("dissatisfied",), ("neutral", "neither satisfied nor dissatisfied"),
     ("satisfied",), ("very satisfied",)),
    (("very unlikely",), ("unlikely",), ("neutral", "neither likely nor unlikely"), ("likely",),
     ("very likely",)),
    (("none",), ("mild",), ("moderate",), ("severe",), ("very severe",)),
    (("very low",), ("low",), ("medium", "moderate", "average"), ("high",), ("very high",)),
)
RATING_LOW = (0, 1)
RATING_HIGH = (4, 5, 7, 10)

INTEGER_PATTERN = r"^[+-]?(0|[1-9][0-9]{0,17})$"
LEADING_ZEROS = r"^[+-]?0[0-9]+$"
NUMBER_PATTERN = r"^[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][+-]?[0-9]+)?$"
ID_NAME = re.compile(r"(^|[_\s.-])(id|key|code|no|nr|number)$|^id[_\s.-]|[a-z]Id$|ID$", re.IGNORECASE)
DIRECT_IDENTIFIER_NAMES = re.compile(
    r"^(e[_-]?mail|email_address|phone|phone_number|telephone|mobile|ssn|social_security_number|"
    r"passport|passport_number|first_name|last_name|surname|full_name|name|patient_name|address|"
    r"street|street_address)$",
    re.IGNORECASE,
)
QUASI_IDENTIFIER_NAMES = re.compile(
    r"^(dob|date_of_birth|birth_date|birthdate|zip|zip_code|zipcode|postcode|postal_code)$", re.IGNORECASE
)
EMAIL_PATTERN = r"^[^@\s]+@[^@\s]+\.[A-Za-z]{2,}$"

DATE_FORMATS = (
    "%Y-%m-%d", "%Y/%m/%d", "%d/%m/%Y", "%m/%d/%Y", "%d.%m.%Y", "%d-%m-%Y", "%m-%d-%Y",
    "%d %b %Y", "%d-%b-%Y",
)
DATETIME_FORMATS = tuple(
    f"%Y-%m-%d{sep}%H:%M{seconds}{offset}"
    for sep in ("T", " ")
    for seconds in (":%S", ":%S.%f", "")
    for offset in ("", "%z")
) + ("%d/%m/%Y %H:%M", "%m/%d/%Y %H:%M", "%d/%m/%Y %H:%M:%S", "%m/%d/%Y %H:%M:%S")

_SHAPES = {
    "%Y": "[0-9]{4}", "%m": "[0-9]{1,2}", "%d": "[0-9]{1,2}", "%H": "[0-9]{1,2}", "%M": "[0-9]{2}",
    "%S": "[0-9]{2}", "%b": "[A-Za-z]{3}", "%f": "[0-9]{1,6}", "%z": "(Z|[+-][0-9]{2}:?[0-9]{2})",
}


@dataclass
class Evidence:
    """What a proposal rests on."""

    rows: int
    present: int  # cells that are not empty
    empty: int
    distinct: int  # distinct values among the present ones that are not missing codes
    parsed: int  # values that fit the proposed type
    share_parsed: float | None
    examples: list[str] = field(default_factory=list)
    not_parsed: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


@dataclass
class Proposal:
    """A proposed dictionary entry for one column."""

    name: str
    type: str
    evidence: Evidence
    levels: list[dict[str, Any]] = field(default_factory=list)
    true_values: list[str] = field(default_factory=list)
    false_values: list[str] = field(default_factory=list)
    date_format: str | None = None
    minimum: str | None = None  # observed, not the possible range
    maximum: str | None = None
    missing_codes: list[dict[str, Any]] = field(default_factory=list)  # {"code", "count", "why"}
    role: str | None = None
    sensitivity: str | None = None

    def fields(self) -> dict[str, Any]:
        """The dictionary fields this proposal sets (observed extremes are evidence, not limits)."""
        chosen: dict[str, Any] = {"type": self.type}
        if self.levels:
            chosen["levels"] = [{k: v for k, v in level.items() if v is not None} for level in self.levels]
        if self.true_values:
            chosen["true_values"] = list(self.true_values)
            chosen["false_values"] = list(self.false_values)
        if self.date_format:
            chosen["date_format"] = self.date_format
        if self.missing_codes:
            chosen["missing_codes"] = [{"code": code["code"]} for code in self.missing_codes]
        if self.role:
            chosen["role"] = self.role
        if self.sensitivity:
            chosen["sensitivity"] = self.sensitivity
        return chosen

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass
class TableProposal:
    rows: int
    columns: list[Proposal]
    key: list[str] = field(default_factory=list)
    key_evidence: str | None = None

    def column(self, name: str) -> Proposal | None:
        return next((column for column in self.columns if column.name == name), None)

    def to_dict(self) -> dict[str, Any]:
        return {
            "rows": self.rows,
            "key": self.key,
            "key_evidence": self.key_evidence,
            "variables": [column.to_dict() for column in self.columns],
        }


# ------------------------------------------------------------------------------------------ the column


@dataclass
class _Values:
    """A column's distinct trimmed values with their counts (missing codes taken out)."""

    values: pa.Array
    counts: pa.Array
    total: int
    _matched: dict[str, pa.Array] = field(default_factory=dict, repr=False)

    def matches(self, pattern: str) -> pa.Array:
        """Which values match ``pattern`` (asked once: several attempts test the same patterns)."""
        import pyarrow.compute as pc

        found = self._matched.get(pattern)
        if found is None:
            found = self._matched[pattern] = pc.match_substring_regex(self.values, pattern)
        return found

    def weight(self, mask: pa.Array) -> int:
        import pyarrow.compute as pc

        return int(pc.sum(pc.if_else(mask, self.counts, 0)).as_py() or 0)

    def only(self, mask: pa.Array) -> _Values:
        import pyarrow.compute as pc

        values = pc.filter(self.values, mask)
        counts = pc.filter(self.counts, mask)
        return _Values(values, counts, int(pc.sum(counts).as_py() or 0))

    def most_frequent(self, limit: int = EXAMPLES) -> list[str]:
        import pyarrow.compute as pc

        order = pc.array_sort_indices(self.counts, order="descending")
        return [_clip(v) for v in pc.take(self.values, order[:limit]).to_pylist()]


def infer_table(table: pa.Table, *, key: list[str] | None = None) -> TableProposal:
    """Proposals for every column of an all-text table, and a key candidate unless ``key`` is given."""
    columns = [infer_column(name, table.column(name), table.num_rows) for name in table.column_names]
    proposal = TableProposal(rows=table.num_rows, columns=columns)
    if key:
        proposal.key = list(key)
        proposal.key_evidence = "given"
    else:
        from studylog.data import key_search

        found = key_search.find_key(table, columns)
        if found is not None:
            proposal.key, proposal.key_evidence = found
    return proposal


def infer_column(name: str, column: pa.ChunkedArray | pa.Array, rows: int) -> Proposal:
    import pyarrow as pa
    import pyarrow.compute as pc

    if not (pa.types.is_string(column.type) or pa.types.is_large_string(column.type)):
        column = column.cast(pa.string())
    trimmed = pc.utf8_trim_whitespace(column)
    # counted with the empty cells (null, and "" once trimmed), which are then left out: the others
    # keep the order of their first appearance, as if the empty cells had been filtered out first
    counted = pc.value_counts(trimmed)
    if isinstance(counted, pa.ChunkedArray):
        counted = counted.combine_chunks()
    values = counted.field("values").cast(pa.string())
    counts = counted.field("counts")
    present = pc.fill_null(pc.not_equal(values, ""), False)
    if not pc.all(present).as_py():
        values, counts = pc.filter(values, present), pc.filter(counts, present)
    everything = _Values(values, counts, int(pc.sum(counts).as_py() or 0))
    present = everything.total
    evidence = Evidence(rows=rows, present=present, empty=rows - present, distinct=0, parsed=0,
                        share_parsed=None)
    proposal = Proposal(name=name, type="text", evidence=evidence)

    words = pc.is_in(pc.utf8_lower(values), value_set=pa.array(sorted(MISSING_WORDS)))
    proposal.missing_codes = _codes(everything.only(words), "a usual word for a missing value")
    rest = everything.only(pc.invert(words))
    if rest.total == 0:
        evidence.notes.append("no values other than empty cells and missing codes")
        return proposal

    _propose_type(proposal, rest)
    _propose_sensitivity(proposal, rest)
    if proposal.type == "identifier":
        proposal.role = "identifier"
    return proposal


def _propose_type(proposal: Proposal, rest: _Values) -> None:
    import pyarrow.compute as pc

    evidence = proposal.evidence
    for attempt in (_as_boolean, _as_integer, _as_number, _as_temporal, _as_scale):
        if attempt(proposal, rest):
            return
    # text-like: identifier, categorical or free text
    evidence.distinct = len(rest.values)
    evidence.parsed = rest.total
    evidence.share_parsed = 1.0
    evidence.examples = rest.most_frequent()
    unique = evidence.distinct == rest.total
    if unique and _looks_like_codes(rest) and (id_like_name(proposal.name) or rest.total >= 10):
        proposal.type = "identifier"
        evidence.notes.append("every value is distinct")
    elif evidence.distinct <= MAX_LEVELS and evidence.distinct <= max(1, rest.total // 2):
        proposal.type = "categorical"
        order = pc.array_sort_indices(pc.utf8_lower(rest.values))
        proposal.levels = [{"code": v, "label": None, "order": None}
                           for v in pc.take(rest.values, order).to_pylist()]
    else:
        proposal.type = "text"


def _accepted(parsed: int, total: int) -> bool:
    if total < SMALL_COLUMN:
        return parsed == total
    return parsed >= PARSE_SHARE * total


def _record(proposal: Proposal, rest: _Values, fits: pa.Array, kind: str) -> _Values:
    """Fill the evidence of an accepted type; return the values that fit it."""
    import pyarrow.compute as pc

    evidence = proposal.evidence
    good = rest.only(fits)
    bad = rest.only(pc.invert(fits))
    proposal.type = kind
    evidence.parsed = good.total
    evidence.share_parsed = good.total / rest.total
    evidence.distinct = len(rest.values)
    evidence.examples = good.most_frequent()
    evidence.not_parsed = bad.most_frequent()
    return good


def _as_boolean(proposal: Proposal, rest: _Values) -> bool:
    import pyarrow as pa
    import pyarrow.compute as pc

    if len(rest.values) > 8:  # two values, a few spellings of each at most
        return False
    lowered = pc.utf8_lower(rest.values)
    if len(spellings := set(lowered.to_pylist())) != 2:
        return False
    for yes, no in BOOLEAN_PAIRS:
        if spellings == {yes, no}:
            _record(proposal, rest, pc.is_in(lowered, value_set=pa.array([yes, no])), "boolean")
            proposal.true_values = pc.filter(rest.values, pc.equal(lowered, yes)).to_pylist()
            proposal.false_values = pc.filter(rest.values, pc.equal(lowered, no)).to_pylist()
            return True
    return False


def _as_integer(proposal: Proposal, rest: _Values) -> bool:
    import pyarrow as pa
    import pyarrow.compute as pc

    fits = rest.matches(INTEGER_PATTERN)
    if not _accepted(rest.weight(fits), rest.total):
        if rest.weight(rest.matches(LEADING_ZEROS)):
            proposal.evidence.notes.append("whole numbers with leading zeros are read as codes, not numbers")
        return False
    sentinels = pc.and_(fits, rest.matches(SENTINEL_PATTERN))
    codes, why = _standing_apart(rest, fits, sentinels)
    good = _record(proposal, _drop_codes(proposal, rest, codes, why), _fits(rest, codes, fits), "integer")
    numbers = pc.cast(good.values, pa.int64())
    low, high = pc.min_max(numbers).values()
    proposal.minimum, proposal.maximum = str(low.as_py()), str(high.as_py())
    distinct = len(good.values)
    if distinct == good.total and good.total >= 2 and id_like_name(proposal.name):
        proposal.type = "identifier"
        proposal.evidence.notes.append("every value is distinct and the name reads like an identifier")
    elif distinct >= 3 and low.as_py() in RATING_LOW and high.as_py() in RATING_HIGH:
        proposal.type = "ordinal"
        proposal.levels = [{"code": str(v), "label": None, "order": i}
                           for i, v in enumerate(range(low.as_py(), high.as_py() + 1), start=1)]
        proposal.evidence.notes.append(f"whole numbers on a {low.as_py()}-{high.as_py()} rating scale")
    return True


def _as_number(proposal: Proposal, rest: _Values) -> bool:
    import pyarrow as pa
    import pyarrow.compute as pc

    if pc.any(rest.matches(LEADING_ZEROS)).as_py():
        return False  # codes such as postcodes: their zeros matter
    shaped = rest.matches(NUMBER_PATTERN)
    as_float = pc.cast(pc.if_else(shaped, rest.values, None), pa.float64())
    fits = pc.fill_null(pc.is_finite(as_float), False)
    if not _accepted(rest.weight(fits), rest.total):
        return False
    sentinels = pc.and_(fits, rest.matches(SENTINEL_PATTERN))
    codes, why = _standing_apart(rest, fits, sentinels)
    good = _record(proposal, _drop_codes(proposal, rest, codes, why), _fits(rest, codes, fits), "number")
    low, high = pc.min_max(pc.cast(good.values, pa.float64())).values()
    proposal.minimum, proposal.maximum = _number_text(low.as_py()), _number_text(high.as_py())
    if rest.weight(pc.and_(shaped, pc.invert(fits))):
        proposal.evidence.notes.append("some values overflow a double (e.g. 1e309) and are not numbers")
    return True


def _as_temporal(proposal: Proposal, rest: _Values) -> bool:
    import pyarrow as pa
    import pyarrow.compute as pc

    if not pc.any(pc.match_substring_regex(rest.values, r"^[0-9]{1,4}[-/. ]")).as_py():
        return False
    best: tuple[int, str, pa.Array, pa.Array] | None = None
    ties: list[str] = []
    for fmt in DATETIME_FORMATS + DATE_FORMATS:
        fits, parsed = strict_parse(rest.values, fmt)
        weight = rest.weight(fits)
        if best is None or weight > best[0]:
            best, ties = (weight, fmt, fits, parsed), []
        elif weight == best[0] and weight > 0:
            ties.append(fmt)
    if best is None or not _accepted(best[0], rest.total):
        return False
    weight, fmt, fits, parsed = best
    kind = "datetime" if "%H" in fmt else "date"
    placeholders = pc.is_in(rest.values, value_set=pa.array(sorted(PLACEHOLDER_DATES)))
    codes = rest.only(placeholders)
    proposal.missing_codes += _codes(codes, "a placeholder date")
    keep = pc.invert(placeholders)
    remaining = rest.only(keep)
    _record(proposal, remaining, pc.filter(fits, keep), kind)
    proposal.date_format = fmt
    moments = pc.filter(parsed, pc.and_(fits, keep))
    if len(moments):
        low, high = pc.min_max(moments).values()
        proposal.minimum, proposal.maximum = (_moment_text(low.as_py(), kind), _moment_text(high.as_py(), kind))
    if ties:
        proposal.evidence.notes.append(f"ambiguous: the values also read as {', '.join(ties)}")
    return True


def strict_parse(values: pa.Array, fmt: str) -> tuple[pa.Array, pa.Array]:
    """Which values match ``fmt`` exactly and name a day that exists, and the moments they name.

    Arrow's strptime is lenient (it rolls 2024-02-30 over to 1 March and skips spaces), so a value is
    accepted only if it has the format's shape, parses, and formats back to itself (leading zeros and
    letter case aside) under the format without its fraction and offset.
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    shape = "^" + "".join(_SHAPES.get(part, re.escape(part)) for part in re.split(r"(%[A-Za-z])", fmt) if part) + "$"
    shaped = pc.match_substring_regex(values, shape)
    core_format = fmt.replace(".%f", "").replace("%z", "")
    core = values
    if ".%f" in fmt:
        core = pc.replace_substring_regex(core, pattern=r"\.[0-9]{1,6}", replacement="")
    if "%z" in fmt:
        core = pc.replace_substring_regex(core, pattern=r"(Z|[+-][0-9]{2}:?[0-9]{2})$", replacement="")
    core = pc.if_else(shaped, core, None)
    moments = pc.strptime(core, format=core_format, unit="s", error_is_null=True)
    back = pc.strftime(moments, format=core_format)
    same = pc.equal(_unpadded(back), _unpadded(core))
    real_year = pc.greater_equal(pc.year(moments), 1)
    fits = pc.fill_null(pc.and_(same, real_year), False)
    # the moments are local times: an offset is checked for its shape only
    return fits, moments


def _unpadded(text: pa.Array) -> pa.Array:
    import pyarrow.compute as pc

    return pc.utf8_lower(pc.replace_substring_regex(text, pattern=r"(^|[^0-9])0+([0-9])", replacement=r"\1\2"))


def _as_scale(proposal: Proposal, rest: _Values) -> bool:
    import pyarrow.compute as pc

    if len(rest.values) > 8:
        return False
    seen = {v: v.lower() for v in rest.values.to_pylist()}
    for scale in SCALES:
        position = {spelling: rank for rank, level in enumerate(scale, start=1) for spelling in level}
        if len(set(seen.values())) >= 2 and all(lowered in position for lowered in seen.values()):
            _record(proposal, rest, pc.is_valid(rest.values), "ordinal")
            ordered = sorted(seen, key=lambda v: (position[seen[v]], v))
            proposal.levels = [{"code": v, "label": None, "order": position[seen[v]]} for v in ordered]
            proposal.evidence.notes.append("every value is a level of a known wording scale")
            return True
    return False


# ---------------------------------------------------------------------------------------- missing codes


def _standing_apart(rest: _Values, fits: pa.Array, sentinels: pa.Array) -> tuple[_Values, str]:
    """Sentinel-looking numbers that lie outside the rest of the column (see the module docstring)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    nothing = rest.only(pa.array([False] * len(rest.values))), ""
    if not pc.any(sentinels).as_py():
        return nothing
    others = rest.only(pc.and_(fits, pc.invert(sentinels)))
    if others.total < 5:
        return nothing
    numbers = pc.cast(others.values, pa.float64())
    weighted = _weighted_quartiles(numbers, others.counts)
    low, high = pc.min_max(numbers).values()
    low, high = low.as_py(), high.as_py()
    q1, q3 = weighted
    spread = q3 - q1
    candidates = pc.cast(pc.if_else(sentinels, rest.values, None), pa.float64())
    below = pc.and_(pc.less(candidates, low), pc.or_(pa.scalar(low >= 0), pc.less(candidates, q1 - 3 * spread)))
    above = pc.and_(pc.greater(candidates, high), pc.greater(candidates, q3 + 3 * spread))
    apart = pc.fill_null(pc.or_(below, above), False)
    return rest.only(apart), f"stands apart from the other values ({_number_text(low)} to {_number_text(high)})"


def _weighted_quartiles(values: pa.Array, counts: pa.Array) -> tuple[float, float]:
    """Quartiles (linear interpolation, numpy's default) of values repeated by their counts."""
    import numpy as np

    order = np.argsort(values.to_numpy(zero_copy_only=False))
    sorted_values = values.to_numpy(zero_copy_only=False)[order]
    cumulative = np.cumsum(counts.to_numpy(zero_copy_only=False)[order])
    total = int(cumulative[-1])

    def at(position: float) -> float:
        lower = int(np.floor(position))
        upper = min(lower + 1, total - 1)
        fraction = position - lower
        first = sorted_values[np.searchsorted(cumulative, lower, side="right")]
        second = sorted_values[np.searchsorted(cumulative, upper, side="right")]
        return float(first + fraction * (second - first))

    return at(0.25 * (total - 1)), at(0.75 * (total - 1))


def _drop_codes(proposal: Proposal, rest: _Values, codes: _Values, why: str) -> _Values:
    import pyarrow.compute as pc

    if len(codes.values):
        proposal.missing_codes += _codes(codes, why)
        return rest.only(pc.invert(pc.is_in(rest.values, value_set=codes.values)))
    return rest


def _fits(rest: _Values, codes: _Values, fits: pa.Array) -> pa.Array:
    import pyarrow.compute as pc

    if len(codes.values):
        return pc.filter(fits, pc.invert(pc.is_in(rest.values, value_set=codes.values)))
    return fits


def _codes(found: _Values, why: str) -> list[dict[str, Any]]:
    import pyarrow.compute as pc

    order = pc.array_sort_indices(found.counts, order="descending")
    return [
        {"code": value, "count": count, "why": why}
        for value, count in zip(pc.take(found.values, order).to_pylist(), pc.take(found.counts, order).to_pylist())
    ]


# -------------------------------------------------------------------------------------- names and keys


def id_like_name(name: str) -> bool:
    return bool(ID_NAME.search(name.strip()))


def _looks_like_codes(rest: _Values) -> bool:
    import pyarrow.compute as pc

    spaced = pc.any(pc.match_substring_regex(rest.values, r"\s")).as_py()
    longest = pc.max(pc.utf8_length(rest.values)).as_py() or 0
    return not spaced and longest <= 64


def _propose_sensitivity(proposal: Proposal, rest: _Values) -> None:
    import pyarrow.compute as pc

    name = proposal.name.strip()
    if DIRECT_IDENTIFIER_NAMES.match(name):
        proposal.sensitivity = "direct-identifier"
        proposal.evidence.notes.append("the name suggests a direct identifier")
    elif _emails(rest) >= 0.5 * rest.total:
        proposal.sensitivity = "direct-identifier"
        proposal.evidence.notes.append("the values look like e-mail addresses")
    elif QUASI_IDENTIFIER_NAMES.match(name):
        proposal.sensitivity = "quasi-identifier"
        proposal.evidence.notes.append("the name suggests a quasi-identifier")


def _emails(rest: _Values) -> int:
    """How many values look like e-mail addresses (none without an @, which is looked for first)."""
    import pyarrow.compute as pc

    if not pc.any(pc.match_substring(rest.values, "@")).as_py():
        return 0
    return rest.weight(rest.matches(EMAIL_PATTERN))


# ------------------------------------------------------------------------------------------- formatting


def _clip(value: Any, limit: int = 40) -> str:
    text = str(value)
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _number_text(value: float | None) -> str | None:
    if value is None:
        return None
    return str(int(value)) if float(value).is_integer() and abs(value) < 2**53 else repr(float(value))


def _moment_text(value: Any, kind: str) -> str | None:
    if value is None:
        return None
    return value.date().isoformat() if kind == "date" else value.isoformat()
