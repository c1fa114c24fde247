"""Small distribution charts for the documents, drawn as inline SVG text from a stored profile.

No plotting library and no image files: a chart is a short ``<svg>`` string that the HTML templates place
inline, so a document stays one self-contained file. Drawn in black and greys so that it prints in black
and white. Every text that comes from the data (level values, bin edges) is XML-escaped here.

Privacy is the caller's decision (``report_context`` never asks for a chart of a masked variable); what is
done here is that bins and bars with fewer than ``min_cell`` records are drawn at the height of
``min_cell`` with a dashed outline and labelled "<min_cell", so that a small count cannot be read off the
picture, and that a quasi-identifier's histogram is drawn without its end labels (its extremes).
"""

from __future__ import annotations

from html import escape
from typing import Any

WIDTH = 260
HIST_HEIGHT = 64
BAR_HEIGHT = 11
BAR_GAP = 3
LABEL_WIDTH = 96
MAX_LEVELS = 8
MAX_LABEL = 16


def _fmt(value: Any) -> str:
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def _short(text: str, limit: int = MAX_LABEL) -> str:
    return text if len(text) <= limit else text[: limit - 1] + "…"


def _svg(width: int, height: int, label: str, body: list[str]) -> str:
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" class="chart" width="{width}" height="{height}" '
        f'viewBox="0 0 {width} {height}" role="img" aria-label="{escape(label)}">'
        f"<title>{escape(label)}</title>" + "".join(body) + "</svg>"
    )


def histogram(
    edges: list[float],
    counts: list[int],
    *,
    min_cell: int,
    show_extremes: bool = True,
    label: str = "histogram",
) -> str | None:
    """Vertical bars, one per bin; None when there is nothing to draw."""
    if not counts or len(edges) != len(counts) + 1:
        return None
    shown = [max(c, min_cell) if 0 < c < min_cell else c for c in counts]
    top = max(shown) or 1
    plot_height = HIST_HEIGHT - 14
    step = WIDTH / len(counts)
    body: list[str] = [
        f'<line x1="0" y1="{plot_height}" x2="{WIDTH}" y2="{plot_height}" stroke="#000" '
        'stroke-width="0.8"/>'
    ]
    for index, (count, height_count) in enumerate(zip(counts, shown, strict=True)):
        height = plot_height * height_count / top
        x = index * step
        small = 0 < count < min_cell
        tip = f"<{min_cell}" if small else str(count)
        title = f"{_fmt(edges[index])} to {_fmt(edges[index + 1])}: {tip}"
        if not show_extremes and index in (0, len(counts) - 1):
            title = f"end bin: {tip}"
        style = (
            'fill="#fff" stroke="#000" stroke-width="0.8" stroke-dasharray="2 1.5"'
            if small
            else 'fill="#555" stroke="#000" stroke-width="0.4"'
        )
        body.append(
            f'<rect x="{x + 0.5:.2f}" y="{plot_height - height:.2f}" width="{max(step - 1, 0.5):.2f}" '
            f'height="{height:.2f}" {style}><title>{escape(title)}</title></rect>'
        )
    left = escape(_fmt(edges[0])) if show_extremes else "…"
    right = escape(_fmt(edges[-1])) if show_extremes else "…"
    body.append(f'<text x="0" y="{HIST_HEIGHT - 2}" font-size="9">{left}</text>')
    body.append(
        f'<text x="{WIDTH}" y="{HIST_HEIGHT - 2}" font-size="9" text-anchor="end">{right}</text>'
    )
    return _svg(WIDTH, HIST_HEIGHT, label, body)


def level_bars(
    levels: list[dict[str, Any]],
    *,
    other: int = 0,
    min_cell: int,
    label: str = "levels",
) -> str | None:
    """Horizontal bars for the most frequent levels (and the rest as "other"); None when empty."""
    rows = [(str(level["value"]), int(level["count"])) for level in levels[:MAX_LEVELS]]
    rest = other + sum(int(level["count"]) for level in levels[MAX_LEVELS:])
    if rest:
        rows.append(("(other)", rest))
    if not rows:
        return None
    shown = [max(c, min_cell) if 0 < c < min_cell else c for _, c in rows]
    top = max(shown) or 1
    bar_space = WIDTH - LABEL_WIDTH - 34
    height = len(rows) * (BAR_HEIGHT + BAR_GAP) + BAR_GAP
    body: list[str] = []
    for index, ((value, count), bar_count) in enumerate(zip(rows, shown, strict=True)):
        y = BAR_GAP + index * (BAR_HEIGHT + BAR_GAP)
        small = 0 < count < min_cell
        shown_count = f"<{min_cell}" if small else str(count)
        width = bar_space * bar_count / top
        style = (
            'fill="#fff" stroke="#000" stroke-width="0.8" stroke-dasharray="2 1.5"'
            if small
            else 'fill="#555" stroke="#000" stroke-width="0.4"'
        )
        body.append(
            f'<text x="{LABEL_WIDTH - 4}" y="{y + BAR_HEIGHT - 2}" font-size="9" '
            f'text-anchor="end">{escape(_short(value))}</text>'
        )
        body.append(
            f'<rect x="{LABEL_WIDTH}" y="{y}" width="{max(width, 0.5):.2f}" height="{BAR_HEIGHT}" '
            f"{style}><title>{escape(value)}: {escape(shown_count)}</title></rect>"
        )
        body.append(
            f'<text x="{LABEL_WIDTH + width + 3:.2f}" y="{y + BAR_HEIGHT - 2}" '
            f'font-size="9">{escape(shown_count)}</text>'
        )
    return _svg(WIDTH, height, label, body)
