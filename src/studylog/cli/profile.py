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
    from studylog import profiling
    from studylog.cli.common import location
    from studylog.errors import NoStudyFound

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
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def _p(value: Any) -> str:
    if value is None:
        return ""
    return "<0.0001" if value < 1e-4 else f"{value:.4f}"


def show(document: dict[str, Any]) -> None:
    """The profile for people: sections of tables."""
    source = document.get("source") or {}
    origin = f"dictionary table '{source['table']}'" if source.get("table") else "inference"
    render.say(f"{document['file']}: {document['rows']} rows, {document['columns']} columns "
               f"(types from {origin}; inferred: {len(source.get('inferred', []))})")
    variables = document["variables"]
    numeric = [v for v in variables if v["type"] in ("integer", "number")]
    if numeric:
        render.table(
            ["variable", "type", "count", "missing", "distinct", "min", "q1", "median", "q3", "max", "mean",
             "sd", "skew", "tukey", "far", "mod z", "normality p"],
            [[v["name"], v["type"], v["count"], v["missing"], v["distinct"], _num(v["min"]), _num(v["q1"]),
              _num(v["median"]), _num(v["q3"]), _num(v["max"]), _num(v["mean"]), _num(v["sd"]),
              _num(v["skewness"]), v["outliers"]["tukey"], v["outliers"]["tukey_far"],
              "MAD=0" if v["outliers"]["modified_z"] is None and v["count"] else v["outliers"]["modified_z"],
              _p((v.get("normality") or {}).get("p_value"))] for v in numeric],
            title="Numeric variables",
        )
    levels = [v for v in variables if v["type"] in ("categorical", "ordinal", "boolean")]
    if levels:
        render.table(
            ["variable", "type", "count", "missing", "distinct", "most frequent", "variants", "near-zero var."],
            [[v["name"], v["type"], v["count"], v["missing"], v["distinct"],
              ", ".join(f"{lv['value']} ({lv['count']})" for lv in v["levels"][:4]),
              "; ".join("/".join(repr(x) for x in g) for g in v.get("variants") or []),
              v.get("near_zero_variance")] for v in levels],
            title="Categorical variables",
        )
    dates = [v for v in variables if v["type"] in ("date", "datetime")]
    if dates:
        render.table(
            ["variable", "type", "count", "missing", "invalid", "min", "max", "granularity", "periods without data"],
            [[v["name"], v["type"], v["count"], v["missing"], v["invalid"], v["min"], v["max"], v["granularity"],
              (v.get("gaps") or {}).get("periods_without_data")] for v in dates],
            title="Dates",
        )
    texts = [v for v in variables if v["type"] in ("text", "identifier")]
    if texts:
        render.table(
            ["variable", "type", "count", "missing", "distinct", "repeated"],
            [[v["name"], v["type"], v["count"], v["missing"], v["distinct"], v.get("repeated")] for v in texts],
            title="Text and identifiers",
        )
    coded = [(v["name"], c) for v in variables for c in v.get("missing_codes", []) if c["count"]]
    if coded:
        render.table(["variable", "missing code", "count", "declared"],
                     [[name, c["code"], c["count"], c["declared"]] for name, c in coded], title="Missing codes")
    target = document.get("target")
    if target:
        if target.get("classes"):
            render.table(["class", "count", "share"],
                         [[c["value"], c["count"], f"{100 * c['share']:.1f}%"] for c in target["classes"]],
                         title=f"Target {target['name']} (imbalance ratio {_num(target.get('imbalance_ratio'))})")
        elif target.get("distribution"):
            render.fields(list(target["distribution"].items())[:-1], title=f"Target {target['name']}")
    correlations = sorted(
        (p for p in document["correlations"] if p["pearson"] is not None),
        key=lambda p: -abs(p["pearson"]),
    )
    if correlations:
        render.table(["a", "b", "pearson", "spearman", "n", "strong", "consider"],
                     [[p["a"], p["b"], _num(p["pearson"]), _num(p["spearman"]), p["n"], p["strong"],
                       p.get("consider")] for p in correlations[:30]],
                     title="Correlations (largest |r| first, at most 30 shown)")
    associations = sorted(
        (a for a in document["associations"] if a["cramers_v"] is not None), key=lambda a: -a["cramers_v"]
    )
    if associations:
        render.table(["a", "b", "cramer's V", "corrected", "kendall tau-b", "n", "missing excluded"],
                     [[a["a"], a["b"], _num(a["cramers_v"]), _num(a["cramers_v_corrected"]),
                       _num(a.get("kendall_tau_b")), a["n"], a["missing_excluded"]] for a in associations[:30]],
                     title="Associations (largest V first, at most 30 shown)")
    groups = document.get("groups")
    if groups:
        render.table(
            ["variable", "n", "groups", "anova F", "eta^2", "p", "p Holm", "kruskal H", "epsilon^2", "p", "p Holm"],
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
        render.table(["topic", "variable", "to review", "to record it"],
                     [[s["topic"], s["variable"], s["message"], s["command"]] for s in suggestions],
                     title="Suggestions")
    else:
        render.say("No suggestions: nothing stood out for review.")
    if document.get("unweighted"):
        render.say(f"Note: {document['unweighted']}.")


def register(app: typer.Typer) -> None:
    app.command("profile")(profile)
