"""The fields of a dictionary entry: their kinds, how a value given as text or as a Python value becomes the
stored value, and the rules an entry as a whole must keep.

One place for this so that ``var add``/``var set``, ``var import`` (CSV cells are all text) and the Python
API agree on every value. Lists of codes and names travel as one text in the command line and in CSV cells:
comma-separated, ``code`` or ``code=label``, a backslash escaping ``,`` ``=`` and ``\\`` inside a part.
"""

from __future__ import annotations

import math
import re
from datetime import datetime
from typing import Any

from studylog.data.spec import (
    AVAILABILITY,
    LEVEL_TYPES,
    NUMERIC_TYPES,
    ROLES,
    SENSITIVITY,
    SOURCES,
    STATUSES,
    TYPES,
)
from studylog.errors import InvalidValue

TEXT_FIELDS = (
    "label", "description", "unit", "source_detail", "instrument", "question_text", "derivation",
    "time_association", "pattern", "date_format", "timezone", "references", "confirmed_by", "confirmed_at",
)
CHOICE_FIELDS: dict[str, tuple[str, ...]] = {
    "type": TYPES,
    "role": ROLES,
    "source": SOURCES,
    "availability": AVAILABILITY,
    "sensitivity": SENSITIVITY,
    "status": STATUSES,
}
CHOICE_DEFAULTS = {"role": "input", "sensitivity": "none", "status": "draft"}
NAME_LIST_FIELDS = ("aliases", "derived_from", "true_values", "false_values")
CODE_LIST_FIELDS = ("levels", "missing_codes")
RANGE_FIELDS = ("minimum", "maximum", "plausible_min", "plausible_max")
BOOL_FIELDS = ("required", "unique")

# Every settable field of a variable, in the order of `var show` and the export's columns.
FIELDS = (
    "label", "description", "type", "unit", "precision", "role", "source", "source_detail", "instrument",
    "question_text", "derivation", "derived_from", "time_association", "availability", "levels",
    "true_values", "false_values", "minimum", "maximum", "plausible_min", "plausible_max",
    "missing_codes", "max_missing", "required", "unique", "pattern", "date_format", "timezone",
    "aliases", "references", "sensitivity", "status", "confirmed_by", "confirmed_at",
)
DEFAULT_DATE_FORMAT = "%Y-%m-%d"
_OFFSET = re.compile(r"^(UTC|Z|[+-]\d{2}:?\d{2})$")
_PLAIN_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")


def empty_value(field: str) -> Any:
    if field in NAME_LIST_FIELDS or field in CODE_LIST_FIELDS:
        return []
    if field in BOOL_FIELDS:
        return False
    return CHOICE_DEFAULTS.get(field)


# ---- lists as text --------------------------------------------------------------------------------


def split_escaped(text: str, separator: str, limit: int | None = None) -> list[str]:
    """Split on unescaped ``separator`` (at most ``limit`` times); escapes stay in the parts."""
    parts: list[str] = []
    current: list[str] = []
    index = 0
    while index < len(text):
        char = text[index]
        if char == "\\" and index + 1 < len(text):
            current.append(text[index : index + 2])
            index += 2
            continue
        if char == separator and (limit is None or len(parts) < limit):
            parts.append("".join(current))
            current = []
        else:
            current.append(char)
        index += 1
    parts.append("".join(current))
    return parts


def unescape(text: str) -> str:
    return re.sub(r"\\(.)", r"\1", text, flags=re.DOTALL)


def escape(text: str) -> str:
    return re.sub(r"([\\,=])", r"\\\1", text)


def names_from_text(text: str) -> list[str]:
    """``a,b\\,c`` -> ``["a", "b,c"]``; parts are trimmed, empty parts dropped."""
    return [unescape(part).strip() for part in split_escaped(text, ",") if part.strip()]


def names_to_text(names: list[str]) -> str:
    return ",".join(escape(name) for name in names)


def codes_from_text(text: str) -> list[dict[str, Any]]:
    """``1=low,2=high,9`` -> ``[{"code": "1", "label": "low"}, ..., {"code": "9", "label": None}]``."""
    codes = []
    for part in split_escaped(text, ","):
        if not part.strip():
            continue
        pieces = split_escaped(part, "=", limit=1)
        label = unescape(pieces[1]).strip() if len(pieces) > 1 else ""
        codes.append({"code": unescape(pieces[0]).strip(), "label": label or None})
    return codes


def codes_to_text(codes: list[dict[str, Any]]) -> str:
    parts = []
    for code in codes:
        part = escape(code["code"])
        if code.get("label"):
            part += "=" + escape(code["label"])
        parts.append(part)
    return ",".join(parts)


# ---- one value ------------------------------------------------------------------------------------


def _text(field: str, value: Any) -> str | None:
    if value is None:
        return None
    if not isinstance(value, str):
        value = str(value)
    if "\x00" in value:
        raise InvalidValue(f"{field} contains a NUL character")
    return value if value.strip() else None


def _choice(field: str, value: Any) -> str | None:
    text = _text(field, value)
    if text is None:
        return CHOICE_DEFAULTS.get(field)
    text = text.strip().lower()
    allowed = CHOICE_FIELDS[field]
    if text not in allowed:
        raise InvalidValue(f"unknown {field} '{text}'; allowed: {', '.join(allowed)}")
    return text


def _name_list(field: str, value: Any) -> list[str]:
    if value is None:
        return []
    items = names_from_text(value) if isinstance(value, str) else [str(v).strip() for v in value]
    items = [item for item in items if item]
    seen: set[str] = set()
    for item in items:
        if item in seen:
            raise InvalidValue(f"{field} lists '{item}' twice")
        seen.add(item)
        _text(field, item)
    return items


def _code_list(field: str, value: Any) -> list[dict[str, Any]]:
    if value is None:
        return []
    if isinstance(value, str):
        raw = codes_from_text(value)
    else:
        raw = []
        for item in value:
            if isinstance(item, dict):
                if "code" not in item:
                    raise InvalidValue(f"each entry of {field} needs a 'code'")
                raw.append({"code": item["code"], "label": item.get("label"), "order": item.get("order")})
            else:
                raw.extend(codes_from_text(str(item)) if "=" in str(item) else [{"code": item, "label": None}])
        if raw and all(isinstance(r.get("order"), int) for r in raw):
            raw.sort(key=lambda r: r["order"])
    codes = []
    seen: set[str] = set()
    for item in raw:
        code = "" if item["code"] is None else str(item["code"]).strip()
        if not code:
            raise InvalidValue(f"{field} has an empty code")
        if code in seen:
            raise InvalidValue(f"{field} lists the code '{code}' twice")
        seen.add(code)
        label = _text(field, item.get("label"))
        codes.append({"code": code, "label": label.strip() if label else None})
    return codes


def _bool(field: str, value: Any) -> bool:
    if value is None:
        return False
    if isinstance(value, bool):
        return value
    text = str(value).strip().lower()
    if text in ("true", "yes", "1", "y"):
        return True
    if text in ("false", "no", "0", "n", ""):
        return False
    raise InvalidValue(f"{field} must be true or false, not '{value}'")


def _precision(value: Any) -> int | None:
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    try:
        number = int(str(value).strip()) if not isinstance(value, int) else value
    except ValueError:
        raise InvalidValue(f"precision must be a whole number of decimals, not '{value}'") from None
    if isinstance(number, bool) or number < 0:
        raise InvalidValue(f"precision must be 0 or more decimals, not {value}")
    return number


def _share(value: Any) -> float | None:
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    try:
        share = float(value)
    except (TypeError, ValueError):
        raise InvalidValue(f"max_missing must be a share between 0 and 1, not '{value}'") from None
    if math.isnan(share) or not 0.0 <= share <= 1.0:
        raise InvalidValue(f"max_missing must be a share between 0 and 1, not {value}")
    return share


def normalise(field: str, value: Any) -> Any:
    """The stored form of ``value`` for ``field``; raises InvalidValue naming the field."""
    if field in CHOICE_FIELDS:
        return _choice(field, value)
    if field in NAME_LIST_FIELDS:
        return _name_list(field, value)
    if field in CODE_LIST_FIELDS:
        return _code_list(field, value)
    if field in BOOL_FIELDS:
        return _bool(field, value)
    if field == "precision":
        return _precision(value)
    if field == "max_missing":
        return _share(value)
    if field in RANGE_FIELDS:
        text = _text(field, value)
        return text.strip() if text else None
    if field in TEXT_FIELDS:
        text = _text(field, value)
        if text is not None and field in ("references", "date_format", "timezone", "pattern"):
            text = text if field == "pattern" else text.strip()
        return text
    raise InvalidValue(f"unknown field '{field}'; fields are: {', '.join(FIELDS)}")


# ---- the entry as a whole -------------------------------------------------------------------------


def parse_bound(value: str, field: str, entry: dict[str, Any]) -> float | datetime:
    """A range bound as a number (numeric types) or a datetime (date types, in the entry's format)."""
    kind = entry["type"]
    if kind in NUMERIC_TYPES:
        if not _PLAIN_NUMBER.match(value):
            raise InvalidValue(f"{field} of a {kind} variable must be a number, not '{value}'")
        return float(value)
    fmt = entry.get("date_format")
    try:
        if fmt:
            return datetime.strptime(value, fmt)
        if kind == "date":
            return datetime.strptime(value, DEFAULT_DATE_FORMAT)
        return datetime.fromisoformat(value).replace(tzinfo=None)
    except ValueError:
        shown = fmt or (DEFAULT_DATE_FORMAT if kind == "date" else "ISO 8601")
        raise InvalidValue(f"{field} '{value}' does not match the date format {shown}") from None


def _check_ranges(entry: dict[str, Any]) -> None:
    given = {f: entry[f] for f in RANGE_FIELDS if entry.get(f) is not None}
    if not given:
        return
    if entry["type"] not in NUMERIC_TYPES + ("date", "datetime"):
        raise InvalidValue(
            f"ranges apply to numeric and date types, not to a {entry['type']} variable"
        )
    bound = {f: parse_bound(v, f, entry) for f, v in given.items()}
    low, high = bound.get("minimum"), bound.get("maximum")
    plow, phigh = bound.get("plausible_min"), bound.get("plausible_max")
    if low is not None and high is not None and low > high:
        raise InvalidValue(f"minimum {given['minimum']} is above maximum {given['maximum']}")
    if plow is not None and phigh is not None and plow > phigh:
        raise InvalidValue(
            f"plausible minimum {given['plausible_min']} is above plausible maximum {given['plausible_max']}"
        )
    for name, value in (("plausible_min", plow), ("plausible_max", phigh)):
        if value is None:
            continue
        if (low is not None and value < low) or (high is not None and value > high):
            possible = f"{given.get('minimum', '-inf')}..{given.get('maximum', 'inf')}"
            raise InvalidValue(
                f"{name.replace('_', ' ')} {given[name]} is outside the possible range {possible}"
            )


def _check_pattern(pattern: str | None) -> None:
    if pattern is None:
        return
    try:
        re.compile(pattern)
    except re.error as exc:
        raise InvalidValue(f"pattern '{pattern}' is not a valid regular expression: {exc}") from None


def _check_date_format(fmt: str | None) -> None:
    if fmt is None:
        return
    if "%" not in fmt:
        raise InvalidValue(f"date format '{fmt}' has no strftime code (e.g. %Y-%m-%d)")
    sample = datetime(2001, 2, 3, 4, 5, 6)
    try:
        datetime.strptime(sample.strftime(fmt), fmt)
    except ValueError as exc:
        raise InvalidValue(f"date format '{fmt}' cannot be read back: {exc}") from None


def _check_timezone(zone: str | None) -> None:
    if zone is None or _OFFSET.match(zone):
        return
    try:
        from zoneinfo import ZoneInfo

        ZoneInfo(zone)
    except (ValueError, KeyError, OSError, ImportError):
        raise InvalidValue(
            f"unknown timezone '{zone}'; use an IANA name such as Europe/Paris, UTC or an offset +01:00"
        ) from None


def check_entry(entry: dict[str, Any]) -> dict[str, Any]:
    """Check the rules that tie fields together; returns the entry with level orders filled in."""
    kind = entry.get("type")
    if kind is None:
        raise InvalidValue(f"a variable needs a type; allowed: {', '.join(TYPES)}")
    levels = entry.get("levels") or []
    if levels and kind not in LEVEL_TYPES:
        where = "a numeric" if kind in NUMERIC_TYPES else f"a {kind}"
        raise InvalidValue(f"levels apply to categorical and ordinal variables, not to {where} variable")
    entry["levels"] = [
        {"code": c["code"], "label": c["label"], "order": index if kind == "ordinal" else None}
        for index, c in enumerate(levels, start=1)
    ]
    if (entry.get("true_values") or entry.get("false_values")) and kind != "boolean":
        raise InvalidValue(f"true and false values apply to boolean variables, not to a {kind} variable")
    both = set(entry.get("true_values") or []) & set(entry.get("false_values") or [])
    if both:
        raise InvalidValue(f"'{sorted(both)[0]}' is listed as both a true and a false value")
    clash = {c["code"] for c in levels} & {c["code"] for c in entry.get("missing_codes") or []}
    if clash:
        raise InvalidValue(f"'{sorted(clash)[0]}' is both a level and a missing code")
    _check_pattern(entry.get("pattern"))
    _check_date_format(entry.get("date_format"))
    _check_timezone(entry.get("timezone"))
    _check_ranges(entry)
    return entry


MAX_NAME = 255


def check_name(name: Any, what: str = "variable") -> str:
    if not isinstance(name, str) or not name.strip():
        raise InvalidValue(f"a {what} needs a name")
    if name != name.strip():
        raise InvalidValue(f"{what} name '{name}' has leading or trailing spaces")
    if any(ord(ch) < 32 for ch in name):
        raise InvalidValue(f"{what} name {name!r} contains a control character")
    if len(name) > MAX_NAME:
        # the store's name columns hold 255 characters (PostgreSQL enforces it; SQLite would not)
        raise InvalidValue(f"{what} name '{name[:40]}...' is longer than {MAX_NAME} characters")
    return name


def plain_number(text: str) -> bool:
    """True for a cell that a spreadsheet reads as a number (and never as a formula)."""
    return bool(_PLAIN_NUMBER.match(text))
