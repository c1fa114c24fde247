"""``studylog profile FILE``: the initial-analysis profile of a data file."""

from __future__ import annotations

from typing import Any

import typer

from studylog.cli import render
from studylog.cli.common import JSON_OPTION

DEFINITIONS = """\
Definitions: quartiles and deciles by linear interpolation (Hyndman & Fan 1996 type 7, numpy's default);
sd with n - 1; skewness G1 (adjusted Fisher-Pearson) and excess kurtosis G2. Outliers: Tukey's fences
on Tukey's hinges (as box plots draw them), 'tukey' beyond the inner fences (1.5 x hinge spread),
'tukey_far' beyond the outer (3 x); modified z-score M = 0.6745 (x - median) / MAD, |M| > 3.5
(Iglewicz & Hoaglin 1993), null when MAD = 0. Missing: empty or blank cells plus declared or inferred
missing codes (never counted as values). Near-zero variance: frequency ratio > 95/5 and < 10% distinct
(Kuhn & Johnson 2013). Normality: Shapiro-Wilk for 3 <= n <= 5000, D'Agostino-Pearson above (at large n
trivial departures are significant). Pairs: Pearson and Spearman (average ranks, ranked on the pair's
complete cases) for pairs with >= 10 complete cases, first 50 numeric columns; strong when |r| >=
--strong, with the one to consider removing (more missing values, else larger mean |r| with the other
inputs); Kendall's tau-b for ordinal pairs; Cramer's V (no continuity correction) and Bergsma's (2013)
bias-corrected V, clipped at 0, for categorical pairs with <= 50 levels each, missing excluded.
--by: one-way ANOVA (eta^2) and Kruskal-Wallis (epsilon^2), p-values unadjusted and Holm-adjusted.
Target: class counts, shares, imbalance ratio = majority / minority (null with one class).
Leakage: an input with eta^2, bias-corrected V or r^2 >= 0.9 with the target, or available after the
index time. Class imbalance is suggested for review from a ratio of 4. The profile is unweighted."""


def profile(
    file: str = typer.Argument(..., help="The data file (CSV, TSV, Parquet, Excel .xlsx)."),
    target: str = typer.Option(None, "--target", help="The outcome column (default: the dictionary's "
                               "target variable, else the study's target)."),
    by: str = typer.Option(None, "--by", help="Compare every numeric variable across the groups of COL."),
    strong: float = typer.Option(0.9, "--strong", help="|r| from which a pair is flagged as strong."),
    table: str = typer.Option(None, "--table", help="The dictionary table the file holds."),
    encoding: str = typer.Option(None, "--encoding", help="Text encoding of a CSV (default UTF-8)."),
    sheet: str = typer.Option(None, "--sheet", help="Excel sheet (default: the first)."),
    as_json: bool = JSON_OPTION,
) -> None:
    """Profile a data file: each variable, the target, pairs, and things to review.

    Types and missing codes come from the study's dictionary when the file's table is in it, else from
    inference; no study is needed.
    """
    from studylog.data import runtime

    runtime.one_blas_thread()
    runtime.keep_freed_arrow_memory()
    from studylog import profiling
    from studylog.cli.common import location
    from studylog.errors import NoStudyFound

    runtime.reuse_freed_memory()
    try:
        where = location()
    except NoStudyFound:
        where = None
    document = profiling.profile_file(
        file, target=target, by=by, strong=strong, table=table, encoding=encoding, sheet=sheet,
        location=where,
    )
    if as_json:
        render.emit_json(document)
        return
    show(document)


profile.__doc__ = f"{profile.__doc__}\n\n{DEFINITIONS}"

def _num(value: Any) -> str:
    """A number for the screen: whole numbers as they are, else four significant digits, and no
    exponent below a million (incomes and counts read better as 48391.2 than 4.839e+04)."""
    if value is None:
        return ""
    if isinstance(value, float):
        if value.is_integer() and abs(value) < 1e15:
            return str(int(value))
        if 1000 <= abs(value) < 1e6:
            return f"{value:.1f}"
        return f"{value:.4g}"
    return str(value)


def _level(value: Any) -> str:
    """A level as it is, quoted when blanks at its ends (or emptiness) would be invisible."""
    text = str(value)
    return repr(text) if text != text.strip() or not text else text


def _when(value: Any) -> Any:
    """An ISO date-time for the screen: a space for the 'T', whole minutes without ':00' seconds."""
    if not isinstance(value, str) or "T" not in value:
        return value
    text = value.replace("T", " ", 1)
    return text[:-3] if len(text) == 19 and text.endswith(":00") else text


def _p(value: Any) -> str:
    if value is None:
        return ""
    return "<0.0001" if value < 1e-4 else f"{value:.4f}"


def _n(name: str) -> render.Column:
    return render.Column(name, numeric=True)


NAME = render.Column("variable", wrap=False)


def _columns(headers: list[str], *, names: tuple[str, ...] = (),
             texts: tuple[str, ...] = ()) -> list[render.Column]:
    """Columns for ``compact_table``: ``names`` on one line, ``texts`` wrapped, the others numbers."""
    return [render.Column(h, wrap=False) if h in names else render.Column(h, min_width=14) if h in texts
            else _n(h) for h in headers]


def _numeric(numeric: list[dict[str, Any]]) -> None:
    """Two tables, so that each fits 100 columns: the distribution, then shape, outliers and normality."""
    render.compact_table(
        [NAME, _n("count"), _n("missing"), _n("distinct"), _n("min"),
         _n("q1"), _n("median"), _n("q3"), _n("max"), _n("mean"), _n("sd")],
        [[v["name"], v["count"], v["missing"], v["distinct"], _num(v["min"]), _num(v["q1"]),
          _num(v["median"]), _num(v["q3"]), _num(v["max"]), _num(v["mean"]), _num(v["sd"])] for v in numeric],
        title="Numeric variables: distribution (quartiles type 7, sd with n - 1)",
    )
    rows = []
    for v in numeric:
        outliers = v["outliers"]
        normality = v.get("normality") or {}
        modified = "MAD=0" if outliers["modified_z"] is None and v["count"] else outliers["modified_z"]
        rows.append([v["name"], _num(v["skewness"]), _num(v.get("kurtosis")), outliers["tukey"],
                     outliers["tukey_far"], modified, normality.get("test") or "",
                     _p(normality.get("p_value")), normality.get("n")])
    render.compact_table(
        [NAME, _n("skewness\nG1"), _n("kurtosis\nG2"), _n("Tukey\ninner"), _n("Tukey\nouter"),
         _n("modified\nz > 3.5"), render.Column("normality\ntest", wrap=False), _n("normality\np"), _n("n")],
        rows,
        title="Numeric variables: shape and outliers (values beyond Tukey's fences on the hinges)",
    )


def _categorical(levels: list[dict[str, Any]]) -> None:
    """Counts and the three most frequent levels; case or blank variants only when there are some."""
    variants = any(v.get("variants") for v in levels)
    headers = ["variable", "type", "count", "missing", "distinct", "most frequent (count)"] + (
        ["variants"] if variants else []) + ["near-zero\nvariance"]
    rows = []
    for v in levels:
        frequent = ", ".join(f"{_level(lv['value'])} ({lv['count']})" for lv in v["levels"][:3]) + (
            ", ..." if len(v["levels"]) > 3 else "")
        row = [v["name"], v["type"], v["count"], v["missing"], v["distinct"], frequent]
        if variants:
            row.append("; ".join(" / ".join(repr(x) for x in g) for g in v.get("variants") or []))
        rows.append(row + [v.get("near_zero_variance")])
    columns = _columns(headers, names=("variable", "type"))
    # the two text columns share what the counts leave (rich would otherwise cut the last column)
    columns[5] = render.Column(headers[5], width=18 if variants else None, min_width=18)
    if variants:
        columns[6] = render.Column("variants", width=18)
    render.compact_table(columns, rows, title="Categorical variables")


def show(document: dict[str, Any]) -> None:
    """The profile for people: sections of tables."""
    source = document.get("source") or {}
    origin = f"dictionary table '{source['table']}'" if source.get("table") else "inference"
    render.say(f"{document['file']}: {document['rows']} rows, {document['columns']} columns "
               f"(types from {origin}; inferred: {len(source.get('inferred', []))})")
    variables = document["variables"]
    numeric = [v for v in variables if v["type"] in ("integer", "number")]
    if numeric:
        _numeric(numeric)
    levels = [v for v in variables if v["type"] in ("categorical", "ordinal", "boolean")]
    if levels:
        _categorical(levels)
    dates = [v for v in variables if v["type"] in ("date", "datetime")]
    if dates:
        render.compact_table(
            _columns(["variable", "count", "missing", "invalid", "min", "max", "granularity",
                      "periods\nwithout data"], names=("variable", "min", "max", "granularity")),
            [[v["name"], v["count"], v["missing"], v["invalid"], _when(v["min"]), _when(v["max"]),
              v["granularity"],
              (v.get("gaps") or {}).get("periods_without_data")] for v in dates],
            title="Dates and date-times",
        )
    texts = [v for v in variables if v["type"] in ("text", "identifier")]
    if texts:
        render.compact_table(
            _columns(["variable", "type", "count", "missing", "distinct", "repeated"], names=("variable", "type")),
            [[v["name"], v["type"], v["count"], v["missing"], v["distinct"], v.get("repeated")] for v in texts],
            title="Text and identifiers",
        )
    coded = [(v["name"], c) for v in variables for c in v.get("missing_codes", []) if c["count"]]
    if coded:
        render.compact_table(_columns(["variable", "missing code", "count", "declared"],
                                      names=("variable", "missing code", "declared")),
                     [[name, c["code"], c["count"], c["declared"]] for name, c in coded], title="Missing codes")
    target = document.get("target")
    if target:
        if target.get("classes"):
            ratio = _num(target.get("imbalance_ratio")) or "undefined (one class)"
            render.say(f"Target {target['name']}: imbalance ratio {ratio} (majority / minority)")
            render.compact_table(_columns(["class", "count", "share"], names=("class",)),
                                 [[c["value"], c["count"], f"{100 * c['share']:.1f}%"] for c in target["classes"]])
        elif target.get("distribution"):
            render.fields(list(target["distribution"].items())[:-1], title=f"Target {target['name']}")
    correlations = sorted(
        (p for p in document["correlations"] if p["pearson"] is not None),
        key=lambda p: -abs(p["pearson"]),
    )
    if correlations:
        render.compact_table(_columns(["a", "b", "pearson", "spearman", "n", "strong", "consider"],
                                      names=("a", "b", "strong", "consider")),
                     [[p["a"], p["b"], _num(p["pearson"]), _num(p["spearman"]), p["n"], p["strong"],
                       p.get("consider")] for p in correlations[:30]],
                     title="Correlations (largest |r| first, at most 30 shown)")
    associations = sorted(
        (a for a in document["associations"] if a["cramers_v"] is not None), key=lambda a: -a["cramers_v"]
    )
    if associations:
        render.compact_table(_columns(["a", "b", "Cramér's V", "corrected\nV", "Kendall\ntau-b", "n",
                                       "missing\nexcluded"], names=("a", "b")),
                     [[a["a"], a["b"], _num(a["cramers_v"]), _num(a["cramers_v_corrected"]),
                       _num(a.get("kendall_tau_b")), a["n"], a["missing_excluded"]] for a in associations[:30]],
                     title="Associations (largest V first, at most 30 shown)")
    groups = document.get("groups")
    if groups:
        render.compact_table(
            _columns(["variable", "n", "groups", "ANOVA\nF", "η²", "p", "p\nHolm", "Kruskal\nH", "ε²",
                      "p", "p\nHolm"], names=("variable",)),
            [[c["variable"], c["n"], c.get("groups"),
              _num((c["anova"] or {}).get("f")), _num((c["anova"] or {}).get("eta_squared")),
              _p((c["anova"] or {}).get("p_unadjusted")), _p((c["anova"] or {}).get("p_holm")),
              _num((c["kruskal_wallis"] or {}).get("h")),
              _num((c["kruskal_wallis"] or {}).get("epsilon_squared")),
              _p((c["kruskal_wallis"] or {}).get("p_unadjusted")), _p((c["kruskal_wallis"] or {}).get("p_holm"))]
             for c in groups["comparisons"]],
            title=f"Groups by {groups['by']} (p unadjusted, and Holm-adjusted across the variables)",
        )
    suggestions = document["suggestions"]
    if suggestions:
        # the command on a line of its own after the message, so that it can be copied whole
        render.fields([(s["topic"], f"{s['message']}\n$ {s['command']}") for s in suggestions],
                      title="Suggestions (to review; the command records the outcome)")
    else:
        render.say("No suggestions: nothing stood out for review.")
    if document.get("unweighted"):
        render.say(f"Note: {document['unweighted']}.")


def register(app: typer.Typer) -> None:
    app.command("profile")(profile)
