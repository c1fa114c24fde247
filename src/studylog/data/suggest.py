"""Things to review, decide or ask, drawn from a profile, each with the studylog command that records it.

Suggestions ask for a review; they never tell the analyst to remove anything. Topics (the command
contract): missing-data, sentinel-code, case-variant, impossible-negative, outlier (only values beyond
Tukey's outer fences or outside the declared possible range), near-zero-variance, class-imbalance,
redundant-pair, many-levels, possible-leakage.
"""

from __future__ import annotations

import shlex
from collections.abc import Mapping
from typing import Any

from studylog.data.spec import VariableSpec

# a class-imbalance suggestion from this majority/minority ratio on (a minority of 20% or less in two
# classes); our threshold, stated in the help
IMBALANCE_REVIEW_RATIO = 4.0
# a few negatives among otherwise non-negative values look like a sign or entry error; our threshold
NEGATIVE_SHARE_LIMIT = 0.01

# the decision kind of `studylog log` (journal.KINDS) that each topic leads to
KIND = {
    "missing-data": "missing",
    "sentinel-code": "missing",
    "case-variant": "merge-levels",
    "impossible-negative": "cleaning",
    "outlier": "outliers",
    "near-zero-variance": "select-features",
    "class-imbalance": "sampling",
    "redundant-pair": "select-features",
    "many-levels": "merge-levels",
    "possible-leakage": "exclude-variables",
}


def _log(text: str, topic: str, *variables: str) -> str:
    parts = ["studylog", "log", text, "--kind", KIND[topic]]
    for name in variables:
        parts += ["--var", name]
    parts.append("--proposed")
    return shlex.join(parts)


def _ask(text: str, *variables: str) -> str:
    parts = ["studylog", "ask", text]
    for name in variables:
        parts += ["--var", name]
    return shlex.join(parts)


def _item(variable: str | None, topic: str, message: str, command: str, **extra: Any) -> dict[str, Any]:
    return {"variable": variable, "topic": topic, "message": message, "command": command, **extra}


def _percent(share: float) -> str:
    return f"{100 * share:.1f}%" if share >= 0.001 else f"{100 * share:.2g}%"


def _variable(entry: Mapping[str, Any], spec: VariableSpec | None) -> list[dict[str, Any]]:
    name = entry["name"]
    out: list[dict[str, Any]] = []
    rows = entry["rows"] or 1
    if entry["missing"]:
        share = entry["missing"] / rows
        out.append(_item(
            name, "missing-data",
            f"{name}: {entry['missing']} of {entry['rows']} values missing ({_percent(share)}); "
            "review why they are missing and decide how the analysis handles them",
            _log(f"Missing values of {name}: handled by ...", "missing-data", name),
            share=share,
        ))
    for code in entry.get("missing_codes", []):
        if code["count"] and not code.get("declared"):
            out.append(_item(
                name, "sentinel-code",
                f"{name}: \"{code['code']}\" occurs {code['count']} times and stands apart from the other "
                "values; it was treated as missing here. Ask whether it is a missing code and what it means",
                _ask(f"Is \"{code['code']}\" in {name} a missing code, and what does it mean?", name),
                code=code["code"], count=code["count"],
            ))
    if entry.get("invalid"):
        out.append(_item(
            name, "sentinel-code",
            f"{name}: {_count(entry['invalid'], 'present value')} not valid as {entry['type']} "
            f"(e.g. {', '.join(repr(v) for v in entry.get('invalid_examples', [])[:3])}); ask what they mean",
            _ask(f"What do the non-{entry['type']} values in {name} mean?", name),
            count=entry["invalid"],
        ))
    for group in entry.get("variants") or []:
        shown = ", ".join(f'"{v}"' for v in group[:5])
        out.append(_item(
            name, "case-variant",
            f"{name}: {shown} differ only by letter case or surrounding spaces; review whether they are "
            "one level",
            _log(f"Levels {shown} of {name} are merged into one", "case-variant", name),
            values=group,
        ))
    negative = entry.get("negative") or 0
    count = entry.get("count") or 0
    declared_min = spec.minimum if spec is not None else None
    impossible = entry.get("impossible") or {}
    if negative and declared_min is not None and impossible.get("below_minimum"):
        pass  # reported below as an impossible value
    elif negative and count and negative / count <= NEGATIVE_SHARE_LIMIT and (entry.get("min") or 0) < 0 \
            and entry.get("q1") is not None and entry["q1"] >= 0:
        out.append(_item(
            name, "impossible-negative",
            f"{name}: {_count(negative, 'negative value')} among otherwise non-negative ones; review whether a "
            "negative value is possible here",
            _ask(f"Can {name} be negative? {negative} values are below 0.", name),
            count=negative,
        ))
    outliers = entry.get("outliers") or {}
    if outliers.get("tukey_far"):
        fences = entry.get("fences") or {}
        outer = fences.get("outer_fences") or [None, None]
        out.append(_item(
            name, "outlier",
            f"{name}: {_count(outliers['tukey_far'], 'value')} beyond Tukey's outer fences "
            f"({_fmt(outer[0])}, {_fmt(outer[1])}); review them before deciding how they are handled",
            _log(f"Values of {name} beyond the outer fences: reviewed and handled by ...", "outlier", name),
            count=outliers["tukey_far"],
        ))
    if impossible.get("below_minimum") or impossible.get("above_maximum"):
        total = impossible.get("below_minimum", 0) + impossible.get("above_maximum", 0)
        out.append(_item(
            name, "outlier",
            f"{name}: {total} values outside the possible range [{spec.minimum if spec else ''}, "
            f"{spec.maximum if spec else ''}] declared in the dictionary; review them",
            _ask(f"{total} values of {name} are outside its possible range: errors, or is the range wrong?", name),
            count=total,
        ))
    if entry.get("near_zero_variance"):
        detail = ""
        if entry.get("minority_count") is not None:
            detail = (f"; the rarer value occurs {entry['minority_count']} times "
                      f"({_percent(entry['minority_share'])}), which may be a rare but real exposure")
        out.append(_item(
            name, "near-zero-variance",
            f"{name}: nearly constant (frequency ratio > 95/5 and < 10% distinct values){detail}; "
            "review whether it can inform the analysis",
            _log(f"{name} is nearly constant: kept or set aside because ...", "near-zero-variance", name),
        ))
    if entry.get("many_levels") and entry["type"] in ("categorical", "ordinal"):
        out.append(_item(
            name, "many-levels",
            f"{name}: {entry['distinct']} distinct levels; review whether rare levels should be grouped",
            _log(f"Levels of {name}: grouped as ...", "many-levels", name),
            distinct=entry["distinct"],
        ))
    return out


def _count(number: int, noun: str) -> str:
    return f"{number} {noun}" if number == 1 else f"{number} {noun}s"


def _fmt(value: Any) -> str:
    return "" if value is None else f"{value:.4g}"


def suggestions(document: Mapping[str, Any], specs: Mapping[str, VariableSpec]) -> list[dict[str, Any]]:
    """Every suggestion of a profile document, variable by variable, then target and pairs."""
    out: list[dict[str, Any]] = []
    for entry in document["variables"]:
        out.extend(_variable(entry, specs.get(entry["name"])))
    target = document.get("target")
    if target and target.get("imbalance_ratio") and target["imbalance_ratio"] >= IMBALANCE_REVIEW_RATIO:
        name = target["name"]
        classes = target["classes"]
        minority = min((c for c in classes if c["count"]), key=lambda c: c["count"])
        out.append(_item(
            name, "class-imbalance",
            f"{name}: imbalance ratio {target['imbalance_ratio']:.3g} (rarest class \"{minority['value']}\", "
            f"{minority['count']} rows); review how the analysis and its evaluation treat the imbalance",
            _log(f"Class imbalance of {name}: handled by ...", "class-imbalance", name),
            ratio=target["imbalance_ratio"],
        ))
    for pair in document.get("correlations", []):
        if pair.get("strong"):
            keep = pair["b"] if pair["consider"] == pair["a"] else pair["a"]
            out.append(_item(
                pair["consider"], "redundant-pair",
                f"{pair['a']} and {pair['b']}: r = {pair['pearson']:.3f}; consider whether {pair['consider']} "
                f"is needed beside {keep} ({pair['because']})",
                _log(f"{pair['a']} and {pair['b']} are strongly correlated: ...", "redundant-pair",
                     pair["a"], pair["b"]),
                pair=[pair["a"], pair["b"]],
            ))
    for item in document.get("leakage", []):
        name = item["variable"]
        if item["measure"] is None:
            message = f"{name}: recorded as available after the index time; review whether it may be used"
        else:
            message = (f"{name}: nearly determined by the target ({item['measure']} = {item['value']:.3f}); "
                       "ask when it is recorded relative to the target")
        out.append(_item(
            name, "possible-leakage", message,
            _ask(f"When is {name} recorded, relative to the outcome? Could it reflect the outcome?", name),
            measure=item["measure"], value=item["value"],
        ))
    return out
