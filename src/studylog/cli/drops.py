"""``studylog drops``, ``drop show ID`` and ``drift [A B]``: the checked drops over time, from the store."""

from __future__ import annotations

from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION, reading

def _records_text(records: dict[str, Any] | None) -> str:
    if not records or records.get("new") is None:
        return ""
    return f"+{records['new']} -{records['vanished']} ~{records['changed']}"


def _bands_text(bands: dict[str, int]) -> str:
    return ", ".join(f"{n} {band}" for band, n in bands.items())


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
    render.table(
        ["id", "table", "file", "rows", "checked", "errors", "warnings", "analysed", "against", "drift",
         "records +new -gone ~changed"],
        ([d["id"], d["table"], d["file"] + (f" ({d['label']})" if d["label"] else ""), d["rows"],
          d["checked_at"][:10], d["errors"], d["warnings"], d["analysis"], d["against"],
          _bands_text(d["drift_bands"]), _records_text(d["records"])] for d in result),
    )


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
        render.table(["variable", "rule", "severity", "count", "rows", "keys", "message"],
                     ([f["variable"], f["rule"], f["severity"], f["count"], f["rows"][:5], f["keys"][:5],
                       f["message"]] for f in result["findings"]), title="Findings")
    else:
        render.say("no findings")
    render.table(["variable", "type", "rows", "count", "missing", "distinct", "median / most frequent"],
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
    if drift:
        render.table(
            ["variable", "PSI", "band", "n earlier", "n later", "noise floor", "missing share change",
             "SMD", "new levels", "vanished levels"],
            ([d["variable"], d["value"], d["band"] or d.get("note"), d["n_earlier"], d["n_later"],
              d["noise_floor"], d.get("missing_share_change"), d.get("smd"),
              (d.get("new_levels") or [])[:5], (d.get("vanished_levels") or [])[:5]] for d in drift),
            title="Drift (earlier drop -> later drop)",
        )
    if records and records.get("new") is not None:
        render.say(f"records: {records['new']} new, {records['vanished']} vanished, "
                   f"{records['changed']} changed, {records.get('unchanged')} unchanged")
        for kind in ("new", "vanished", "changed"):
            shown = records.get(f"{kind}_examples") or []
            if shown:
                where = "earlier drop" if kind == "vanished" else "later drop"
                render.say(f"  {kind} (rows of the {where}): " + ", ".join(
                    f"{e['key']} (row {e['row']}"
                    + (f"; {', '.join(e['columns'])}" if e.get("columns") else "") + ")" for e in shown[:10]))
        if records.get("changed_columns"):
            render.say("  changed columns: " + ", ".join(
                f"{c} {n}" for c, n in records["changed_columns"].items()))
    elif records:
        render.say(f"records: {records.get('note', 'not compared')}")


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
