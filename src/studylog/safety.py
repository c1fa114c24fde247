"""What leaves the study is safe: masked values, small counts withheld, spreadsheet formulas neutralised.

Used by the checker (offending values are stored masked), the question packet and every report.
"""

from __future__ import annotations

MASK = "[masked]"
DEFAULT_MIN_CELL = 5
# OWASP "CSV Injection": cells beginning with these are run as formulas by spreadsheets
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
NEUTRALISER = "'"


def mask(value: object) -> str:
    """The stand-in for a value that must not leave the study."""
    return MASK


def small_count(count: int | None, min_cell: int = DEFAULT_MIN_CELL) -> str | int | None:
    """A count as it may be shown to others: counts from 1 to ``min_cell - 1`` become "<min_cell"."""
    if count is None:
        return None
    if 0 < count < min_cell:
        return f"<{min_cell}"
    return count


def neutralise_cell(text: str) -> str:
    """Prefix a cell a spreadsheet would execute, so that it opens as text."""
    if text and (text.startswith(FORMULA_STARTS) or text.startswith(NEUTRALISER)):
        return NEUTRALISER + text
    return text


def restore_cell(text: str) -> str:
    """Undo :func:`neutralise_cell` on a cell read back from a file we wrote."""
    if text.startswith(NEUTRALISER) and len(text) > 1 and (
        text[1:].startswith(FORMULA_STARTS) or text[1:].startswith(NEUTRALISER)
    ):
        return text[1:]
    return text
