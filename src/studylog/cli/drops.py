"""``studylog drops``, ``drop show ID`` and ``drift [A B]``: the checked drops over time, from the store."""

from __future__ import annotations

from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, reading

# What makes a variable's drift worth showing when most are stable (display thresholds of ours, not
# tests): a band other than stable, new or vanished levels, a missing share (or a missing code's
# share) moved by at least one percentage point, or a standardised mean difference of at least 0.1
# (common practice in balance diagnostics).
MISSING_SHIFT = 0.01
SMD_SHIFT = 0.1
SHOWN_LEVELS = 3
ROUTINE_TYPES = ("identifier", "date", "datetime", "text")


def _records_text(records: dict[str, Any] | None) -> str:
    if not records or records.get("new") is None:
        return ""
    return f"+{records['new']} -{records['vanished']} ~{records['changed']}"


def _bands_text(bands: dict[str, int]) -> str:
    return ", ".join(f"{n} {band}" for band, n in bands.items())


def notable(entry: dict[str, Any]) -> bool:
    """Whether a variable's drift is worth a line when only the changes are shown."""
    if entry.get("band") not in (None, "stable"):
        return True
    if entry.get("new_levels") or entry.get("vanished_levels"):
        return True
    moves = [entry.get("missing_share_change")] + [c.get("change") for c in entry.get("missing_codes") or []]
    if any(m is not None and abs(m) >= MISSING_SHIFT for m in moves):
        return True
    return entry.get("smd") is not None and abs(entry["smd"]) >= SMD_SHIFT


def _level_text(value: str) -> str:
    """A level as it is, quoted when blanks at its ends (or emptiness) would otherwise be invisible."""
    return repr(value) if value != value.strip() or not value else value


def _levels_cell(entry: dict[str, Any]) -> str:
    parts = []
    for sign, key in (("+", "new_levels"), ("-", "vanished_levels")):
        levels = entry.get(key) or []
        if levels:
            shown = ", ".join(_level_text(str(v)) for v in levels[:SHOWN_LEVELS])
            more = f" (+{len(levels) - SHOWN_LEVELS} more)" if len(levels) > SHOWN_LEVELS else ""
            parts.append(f"{sign} {shown}{more}")
    return "; ".join(parts)


def _points(share: float | None) -> str:
    """A change of a share in percentage points."""
    if share is None:
        return ""
    if abs(share) < 0.0005:
        return "0"
    return f"{100 * share:+.1f}pt"


def _fixed(value: float | None, digits: int = 3) -> str:
    return "" if value is None else f"{value:.{digits}f}"


def drift_view(drift: list[dict[str, Any]], *, only_notable: bool, detail: bool) -> None:
    """Drift as a table of the variables with a distribution, and one line per kind of note.

    With ``only_notable`` (the check) the table holds only the changes worth a look and a line says how
    many are stable; ``detail`` adds the noise floor and the standardised mean difference.
    """
    from rich.text import Text

    noted = [d for d in drift if d.get("note")]
    measured = [d for d in drift if not d.get("note")]
    shown = [d for d in measured if notable(d)] if only_notable else measured
    columns: list[render.Column | str] = [render.Column("variable", wrap=False), render.Column("PSI", numeric=True),
                                          render.Column("band", wrap=False)]
    if detail:
        columns.append(render.Column("noise\nfloor", numeric=True))
    columns += [render.Column("n\nearlier", numeric=True), render.Column("n\nlater", numeric=True),
                render.Column("missing\nshare Δ", numeric=True)]
    if detail:
        columns.append(render.Column("SMD", numeric=True))
    columns.append(render.Column("levels\n+ new, - vanished", min_width=18))
    rows = []
    for d in shown:
        band = d.get("band") or ""
        style = {"shifted": "red", "moderate": "yellow", "too few rows": "dim"}.get(band)
        row: list[Any] = [d["variable"], _fixed(d.get("value")), Text(band, style=style or "")]
        if detail:
            row.append(_fixed(d.get("noise_floor")))
        row += [d.get("n_earlier"), d.get("n_later"), _points(d.get("missing_share_change"))]
        if detail:
            row.append(_fixed(d.get("smd"), 2))
        row.append(_levels_cell(d))
        rows.append(row)
    if only_notable:
        if measured and not shown:
            render.say(f"drift: all {len(measured)} variables with a distribution are stable")
        elif shown:
            render.say(f"drift: {len(shown)} of {len(measured)} variables worth a look "
                       f"(the other {len(measured) - len(shown)} are stable)")
    if rows:
        render.compact_table(columns, rows)
    elif measured and not only_notable:
        render.say("drift: no variable with a distribution in both drops")
    by_note: dict[str, list[str]] = {}
    routine = []
    for d in noted:
        if only_notable and d.get("type") in ROUTINE_TYPES:
            routine.append(d["variable"])
        else:
            by_note.setdefault(d["note"], []).append(d["variable"])
    if routine:
        render.say(f"  not compared by distribution (identifiers, dates, text): {', '.join(routine)}")
    for note, names in by_note.items():
        render.say(f"  {', '.join(names)}: {note}")


def _examples(items: list[dict[str, Any]], limit: int) -> str:
    shown = ", ".join(f"{e['key']} (row {e['row']}" + (f"; {', '.join(e['columns'])}" if e.get("columns")
                                                       else "") + ")" for e in items[:limit])
    return shown


def records_view(records: dict[str, Any] | None, *, examples: int) -> None:
    """The record comparison on one line, then a few example keys of each kind."""
    if not records:
        return
    if records.get("new") is None:
        render.say(f"records: {records.get('note', 'not compared')}")
        return
    changed = records.get("changed_columns") or {}
    by_column = sorted(changed.items(), key=lambda item: -item[1])
    columns = f" ({', '.join(f'{c} {n}' for c, n in by_column)})" if by_column else ""
    line = (f"records compared with drop {records['against']}: {records['new']} new, "
            f"{records['vanished']} vanished, {records['changed']} changed{columns}")
    render.say(line)
    extra = [f"{records['unchanged']} unchanged"] if records.get("unchanged") is not None else []
    extra += [f"{records[k]} {what}" for k, what in (
        ("repeated_earlier", "repeated keys in the earlier drop"),
        ("repeated_later", "repeated keys in the later drop"),
        ("without_key", "rows without a key")) if records.get(k)]
    for k, what in (("columns_added", "columns added"), ("columns_removed", "columns removed")):
        if records.get(k):
            extra.append(f"{what}: {', '.join(records[k])}")
    if extra:
        render.say("  " + "; ".join(extra))
    listed = []
    for kind in ("new", "vanished", "changed"):
        items = records.get(f"{kind}_examples") or []
        if items:
            total = records.get(kind) or len(items)
            shown = min(examples, len(items))
            more = f", ... {total - shown} more" if total > shown else ""
            label = "  vanished (earlier rows)" if kind == "vanished" else f"  {kind}"
            listed.append((label, f"{_examples(items, examples)}{more}"))
    render.fields(listed)


def drops(
    table: str = typer.Option(None, "--table", help="Only the drops of this table."),
    as_json: bool = JSON_OPTION,
) -> None:
    """List the checked drops, oldest first: findings, drift bands and record changes against the earlier drop."""
    from studylog import comparison

    with reading() as session:
        result = comparison.list_drops(session, table)
    if as_json:
        render.emit_json(result)
        return
    if not result:
        render.say("no drop recorded yet; check one with 'studylog check FILE'")
        return
    render.compact_table(
        [render.Column("id", numeric=True), render.Column("table", wrap=False),
         render.Column("file\n(label)", wrap=False, width=32), render.Column("rows", numeric=True),
         render.Column("checked", wrap=False), render.Column("errors /\nwarnings", numeric=True),
         render.Column("ana-\nlysed"), render.Column("vs", numeric=True), render.Column("drift", min_width=10),
         render.Column("records\n+new -gone ~changed", min_width=10)],
        ([d["id"], d["table"], d["file"] + (f"\n({d['label']})" if d["label"] else ""), d["rows"],
          d["checked_at"][:10], f"{d['errors']} / {d['warnings']}", "yes" if d["analysis"] else "",
          d["against"], _bands_text(d["drift_bands"]), _records_text(d["records"])] for d in result),
    )
    render.say("vs: the earlier drop each was compared with; drift: how many variables in each band")


def show(
    drop_id: int = typer.Argument(..., help="The drop's id (see 'studylog drops')."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Show a drop: its findings, stored profile, dictionary in force, and comparison with its earlier drop."""
    from studylog import comparison

    with reading() as session:
        result = comparison.show_drop(session, drop_id)
    if as_json:
        render.emit_json(result)
        return
    drop = result["drop"]
    render.fields([(k, drop[k]) for k in ("id", "table", "label", "file", "sha256", "rows", "columns",
                                          "dictionary", "checked_at", "author", "errors", "warnings",
                                          "analysis")], title=f"Drop {drop['id']}")
    if result["findings"]:
        from studylog.cli.check import findings_view

        render.say("Findings")
        findings_view(result["findings"])
    else:
        render.say("no findings")
    render.compact_table(
        [render.Column("variable", wrap=False), render.Column("type", wrap=False),
         render.Column("rows", numeric=True), render.Column("count", numeric=True),
         render.Column("missing", numeric=True), render.Column("distinct", numeric=True),
         render.Column("median / most frequent")],
        ([p.get("name"), p.get("type"), p.get("rows"), p.get("count"), p.get("missing"),
          p.get("distinct"), _centre(p)] for p in result["profile"]), title="Profile")
    _comparison(result["comparison"]["against"], result["comparison"]["drift"],
                result["comparison"]["records"])


def _centre(profile: dict[str, Any]) -> Any:
    if profile.get("median") is not None:
        return profile["median"]
    if profile.get("levels"):
        return profile["levels"][0]["value"]
    return profile.get("min")


def _comparison(against: int | None, drift: list[dict[str, Any]], records: dict[str, Any] | None) -> None:
    if against is None:
        render.say("no earlier drop to compare with")
        return
    render.say(f"compared with the earlier drop {against}")
    drift_view(drift, only_notable=False, detail=True)
    records_view(records, examples=5)


def drift(
    earlier: int = typer.Argument(None, help="The earlier drop (default: the latest drop's predecessor)."),
    later: int = typer.Argument(None, help="The later drop (default: the latest drop)."),
    table: str = typer.Option(None, "--table", help="Without ids: the latest drop of this table."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Compare two drops from their stored profiles and record digests (the files are not re-read).

    With one id: that drop against its predecessor. PSI = sum (p_later - p_earlier) ln(p_later /
    p_earlier) over bins from the earlier drop's deciles (tied edges merged, open end bins), levels for
    categories, and a bin of missing values; an empty bin counts as 0.0001. Bands (common practice in
    credit scoring): stable < 0.1 <= moderate <= 0.25 < shifted; 'too few rows' when the noise floor
    (B - 1)(1/n1 + 1/n2) reaches 0.1.
    """
    from studylog import comparison

    with reading() as session:
        result = comparison.drift_between(session, earlier, later, table=table)
    if as_json:
        render.emit_json(result)
        return
    first, second = result["earlier"], result["later"]
    render.say(f"earlier drop {first['id']} ({first['file']}, {first['rows']} rows) -> "
               f"later drop {second['id']} ({second['file']}, {second['rows']} rows)")
    _comparison(first["id"], result["drift"], result["records"])
    if result["only_earlier"]:
        render.say("only in the earlier drop: " + ", ".join(result["only_earlier"]))
    if result["only_later"]:
        render.say("only in the later drop: " + ", ".join(result["only_later"]))


def register(app: typer.Typer) -> None:
    app.command("drops")(drops)
    group = typer.Typer(help="One checked drop.", no_args_is_help=True)
    group.command("show")(show)
    app.add_typer(group, name="drop")
    app.command("drift")(drift)
