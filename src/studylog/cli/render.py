"""All output of the command line: one rich console for people, plain JSON for scripts.

Rich respects ``NO_COLOR`` and prints no colour codes when stdout is not a terminal. JSON goes straight to
stdout as one document, so that ``--json`` output can be piped into ``jq`` or parsed by a script.
"""

from __future__ import annotations

import json
import os
import sys
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from rich.console import Console


def _width() -> int | None:
    """Rich's own width on a terminal; 120 columns when piped (rich would use 80), unless COLUMNS says."""
    if sys.stdout.isatty() or os.environ.get("COLUMNS"):
        return None
    return 120


class _LazyConsole:
    """A rich console made on first use: commands that print one plain line never import rich.

    Attribute reads and writes go to the console itself (``console.print``, ``console.width = 100``).
    Slots, not a ``__dict__``, so that tools which patch ``width`` see and restore the console's own.
    """

    __slots__ = ("_settings", "_console")

    def __init__(self, **settings: Any) -> None:
        object.__setattr__(self, "_settings", settings)
        object.__setattr__(self, "_console", None)

    def _real(self) -> Console:
        made = object.__getattribute__(self, "_console")
        if made is None:
            from rich.console import Console

            settings = dict(object.__getattribute__(self, "_settings"))
            if settings.pop("wide_when_piped", False):
                settings["width"] = _width()
            made = Console(**settings)
            object.__setattr__(self, "_console", made)
        return made

    def __getattr__(self, name: str) -> Any:
        if name.startswith("__"):
            raise AttributeError(name)
        return getattr(self._real(), name)

    def __setattr__(self, name: str, value: Any) -> None:
        setattr(self._real(), name, value)


console: Console = _LazyConsole(highlight=False, wide_when_piped=True)  # type: ignore[assignment]
err_console: Console = _LazyConsole(stderr=True, highlight=False, soft_wrap=True)  # type: ignore[assignment]


def rich_console(stderr: bool = False) -> Console:
    """The real console behind ``console`` / ``err_console``, for rich objects that need one (progress)."""
    return (err_console if stderr else console)._real()  # type: ignore[attr-defined]


def escape(text: str) -> str:
    """Text from the store or a file, made safe to print through rich (brackets are not markup)."""
    from rich.markup import escape as rich_escape

    return rich_escape(text)


def to_json_text(document: Any) -> str:
    return json.dumps(document, ensure_ascii=False, indent=2, default=str)


def emit_json(document: Any) -> None:
    """Print one JSON document on stdout and nothing else."""
    sys.stdout.write(to_json_text(document) + "\n")
    sys.stdout.flush()


def cell(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.4g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(cell(v) for v in value)
    if isinstance(value, dict):
        return ", ".join(f"{k}={cell(v)}" for k, v in value.items())
    return str(value)


def table(
    columns: Sequence[str],
    rows: Iterable[Sequence[Any]],
    *,
    title: str | None = None,
) -> None:
    """A rich table; cells are escaped so that text from the store never acts as markup."""
    from rich.markup import escape

    from rich.table import Table

    grid = Table(title=title, show_lines=False, title_justify="left")
    for name in columns:
        grid.add_column(name, overflow="fold")
    for row in rows:
        grid.add_row(*(escape(cell(v)) for v in row))
    console.print(grid)


@dataclass(frozen=True)
class Column:
    """A column of ``compact_table``: numbers are right-aligned; ``width`` caps text; ``wrap=False`` keeps
    a cell on one line (names). Headers of numeric columns may wrap, their numbers (one word) do not."""

    name: str
    numeric: bool = False
    width: int | None = None
    wrap: bool = True
    min_width: int | None = None


def compact_table(
    columns: Sequence[Column | str],
    rows: Iterable[Sequence[Any]],
    *,
    title: str | None = None,
) -> None:
    """A table for narrow terminals: a rule under the header, no borders, columns two spaces apart.

    Cells are escaped like ``table``'s; a ``rich.text.Text`` cell is printed as it is (already safe),
    which lets a caller colour one cell.
    """
    from rich.markup import escape

    from rich import box
    from rich.table import Table
    from rich.text import Text

    grid = Table(title=escape(title) if title else None, title_justify="left", box=box.SIMPLE_HEAD,
                 pad_edge=False, padding=(0, 1, 0, 0), show_edge=False, title_style="bold")
    specs = [Column(spec) if isinstance(spec, str) else spec for spec in columns]
    cells = [[v if isinstance(v, Text) else escape(cell(v)) for v in row] for row in rows]
    for i, spec in enumerate(specs):
        least = spec.min_width
        if spec.numeric:  # a number is never cut, nor a word of its header
            words = [len(w) for w in spec.name.split()] + [len(str(row[i])) for row in cells if i < len(row)]
            least = max([least or 0, *words])
        grid.add_column(spec.name, justify="right" if spec.numeric else "left", no_wrap=not spec.wrap,
                        max_width=spec.width, min_width=least, overflow="fold")
    for row in cells:
        grid.add_row(*row)
    console.print(grid)


def fields(pairs: Iterable[tuple[str, Any]], *, title: str | None = None) -> None:
    """A two-column listing of one record's fields, skipping empty ones."""
    from rich.markup import escape

    from rich.table import Table

    grid = Table(title=title, show_header=False, title_justify="left", box=None, padding=(0, 2, 0, 0))
    grid.add_column(style="bold")
    grid.add_column(overflow="fold")
    for name, value in pairs:
        if value is None or value == [] or value == "" or value == {}:
            continue
        grid.add_row(escape(name), escape(cell(value)))
    console.print(grid)


PLAIN_LINE = 80


def say(message: str) -> None:
    """A line for people. A short one is written as it is, so that short answers need no rich at all;
    a longer one is wrapped by the console at its width (markup in the text is escaped, never run)."""
    if len(message) <= PLAIN_LINE and "\n" not in message:
        sys.stdout.write(message + "\n")
        sys.stdout.flush()
        return
    console.print(escape(message))


def created(kind: str, record_id: int, as_json: bool, extra: dict[str, Any] | None = None) -> None:
    """The contract for commands that create a record: print its id (``{"id": N, ...}`` with --json)."""
    if as_json:
        emit_json({"id": record_id, **(extra or {})})
    else:
        say(f"{kind} {record_id} recorded")


def warn(message: str) -> None:
    """One warning line on stderr."""
    sys.stderr.write(f"warning: {message}\n")
    sys.stderr.flush()
