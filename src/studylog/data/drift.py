"""Drift between an earlier and a later drop of a table, computed from their stored profiles only.

The earlier drop's file is never re-read. Per variable present in both drops:

- **Population Stability Index** (DESIGN.md, "Statistical definitions"):
  PSI = sum over bins of (p_later - p_earlier) * ln(p_later / p_earlier), which equals
  KL(later || earlier) + KL(earlier || later). Bins of a numeric variable come from the *earlier* drop's
  deciles, tied edges merged, with open end bins: (-inf, d1], (d1, d2], ..., (dk, +inf). Categorical,
  ordinal and boolean variables are binned by level (the union of both drops' levels, plus
  one bin for the levels beyond the stored 1,000). Missing values (empty cells, missing codes, and cells
  that do not parse as the type) are their own bin. A bin share of 0 in either drop is replaced by
  EMPTY_BIN_SHARE = 0.0001 (no renormalisation), so that the logarithm is defined.
  Bin shares: exact when the drop's profile lists its value counts (at most 1,000 distinct values) or
  levels, else from the drop's KLL sketch CDF at the edges (rank error at most the profile's
  ``quantile_error``, about 1.3%).
- **Noise floor**: about (B - 1)(1/n_earlier + 1/n_later) for B bins: the PSI expected between two
  samples of one distribution (PSI times n1 n2 / (n1 + n2) is asymptotically chi-square with B - 1
  degrees of freedom; Yurdakul 2018).
- **Band** (common practice in credit scoring): stable < 0.1 <= moderate <= 0.25 < shifted; "too few
  rows" when the noise floor reaches 0.1, whatever the PSI.
- new and vanished levels, the change in the missing share and in each missing code's share, and the
  standardised mean difference (mean_later - mean_earlier) / sqrt((sd_earlier^2 + sd_later^2) / 2).

Date and datetime variables, identifiers (each drop brings new ones; the record comparison covers
them), and variables whose levels are withheld (free text, direct identifiers) get no PSI (``value``
null, with a ``note``).
"""

from __future__ import annotations

import math
from typing import Any

from studylog.data.spec import NUMERIC_TYPES

EMPTY_BIN_SHARE = 0.0001
STABLE_BELOW = 0.1
SHIFTED_ABOVE = 0.25
NOISE_LIMIT = 0.1
MISSING_BIN = "(missing)"
OTHER_BIN = "(other levels)"
BANDS = ("stable", "moderate", "shifted", "too few rows")


def psi(earlier: list[float], later: list[float], empty: float = EMPTY_BIN_SHARE) -> float:
    """PSI of two lists of bin shares (same bins, same order); zero shares become ``empty``."""
    total = 0.0
    for e, a in zip(earlier, later, strict=True):
        e, a = (e if e > 0 else empty), (a if a > 0 else empty)
        total += (a - e) * math.log(a / e)
    return total


def noise_floor(bins: int, n_earlier: int, n_later: int) -> float | None:
    if n_earlier <= 0 or n_later <= 0:
        return None
    return (bins - 1) * (1.0 / n_earlier + 1.0 / n_later)


def band(value: float | None, floor: float | None) -> str | None:
    """stable < 0.1 <= moderate <= 0.25 < shifted; too few rows when the noise floor reaches 0.1."""
    if value is None:
        return None
    if floor is None or floor >= NOISE_LIMIT:
        return "too few rows"
    if value < STABLE_BELOW:
        return "stable"
    if value <= SHIFTED_ABOVE:
        return "moderate"
    return "shifted"


def decile_edges(profile: dict[str, Any]) -> list[float]:
    """The earlier drop's deciles with tied edges merged (sorted, distinct)."""
    deciles = profile.get("deciles") or []
    return sorted({float(d) for d in deciles if d is not None})


def _missing_count(profile: dict[str, Any]) -> int:
    # missing cells plus present cells that do not parse as the variable's type
    return int(profile.get("missing") or 0) + int(profile.get("invalid") or 0)


def numeric_shares(profile: dict[str, Any], edges: list[float]) -> tuple[list[float], bool]:
    """Shares of the drop's rows in bins (-inf, e1], (e1, e2], ..., (ek, inf) and the missing bin;
    and whether they are exact."""
    import numpy as np

    rows = int(profile.get("rows") or 0)
    if rows == 0:
        return [0.0] * (len(edges) + 2), True
    valued = rows - _missing_count(profile)
    counts_known = profile.get("value_counts")
    if valued <= 0:
        value_shares, exact = np.zeros(len(edges) + 1), True
    elif counts_known:
        values = np.asarray(counts_known["values"], dtype=float)
        counts = np.asarray(counts_known["counts"], dtype=float)
        # bin i holds edges[i-1] < v <= edges[i]
        index = np.searchsorted(np.asarray(edges, dtype=float), values, side="left")
        value_shares = np.bincount(index, weights=counts, minlength=len(edges) + 1) / counts.sum()
        exact = True
    elif profile.get("sketch"):
        from studylog.data.numeric_summary import decode_sketch

        sketch = decode_sketch(profile["sketch"])
        cdf = np.asarray(sketch.get_cdf(edges) if edges else [1.0], dtype=float)  # P(X <= edge), inclusive
        value_shares = np.diff(np.concatenate([[0.0], cdf]))
        exact = not sketch.is_estimation_mode()
    else:
        value_shares, exact = np.zeros(len(edges) + 1), True
    shares = (value_shares * valued / rows).tolist() + [_missing_count(profile) / rows]
    return shares, exact


def level_shares(earlier: dict[str, Any], later: dict[str, Any]) -> tuple[list[str], list[float], list[float]]:
    """Bins by level: the union of both drops' levels, the other-levels bin, the missing bin."""
    def counts(profile: dict[str, Any]) -> dict[str, int]:
        return {str(level["value"]): int(level["count"]) for level in profile.get("levels") or []}

    first, second = counts(earlier), counts(later)
    names = list(first) + [name for name in second if name not in first]
    bins = names + [OTHER_BIN, MISSING_BIN]

    def shares(profile: dict[str, Any], known: dict[str, int]) -> list[float]:
        rows = int(profile.get("rows") or 0)
        if rows == 0:
            return [0.0] * len(bins)
        values = [known.get(name, 0) for name in names]
        values += [int(profile.get("levels_other") or 0), _missing_count(profile)]
        return [v / rows for v in values]

    return bins, shares(earlier, first), shares(later, second)


def _share(profile: dict[str, Any], count: int | None) -> float | None:
    rows = int(profile.get("rows") or 0)
    return None if rows == 0 or count is None else count / rows


def _rounded(value: float | None, digits: int = 6) -> float | None:
    return None if value is None else round(value, digits)


def variable_drift(earlier: dict[str, Any], later: dict[str, Any]) -> dict[str, Any]:
    """Drift of one variable between its profile in the earlier drop and in the later drop."""
    name = later.get("name") or earlier.get("name")
    n_earlier, n_later = int(earlier.get("rows") or 0), int(later.get("rows") or 0)
    result: dict[str, Any] = {
        "variable": name, "measure": "psi", "value": None, "band": None,
        "n_earlier": n_earlier, "n_later": n_later, "noise_floor": None, "bins": None,
        "exact": None, "type": later.get("type"),
    }
    share_earlier = _share(earlier, int(earlier.get("missing") or 0))
    share_later = _share(later, int(later.get("missing") or 0))
    result["missing_share_earlier"] = _rounded(share_earlier)
    result["missing_share_later"] = _rounded(share_later)
    result["missing_share_change"] = (
        None if share_earlier is None or share_later is None else _rounded(share_later - share_earlier))
    codes_earlier = {c["code"]: int(c["count"]) for c in earlier.get("missing_codes") or []}
    codes_later = {c["code"]: int(c["count"]) for c in later.get("missing_codes") or []}
    result["missing_codes"] = [
        {"code": code,
         "share_earlier": _rounded(_share(earlier, codes_earlier.get(code, 0))),
         "share_later": _rounded(_share(later, codes_later.get(code, 0))),
         "change": _rounded((_share(later, codes_later.get(code, 0)) or 0.0)
                            - (_share(earlier, codes_earlier.get(code, 0)) or 0.0))}
        for code in list(codes_earlier) + [c for c in codes_later if c not in codes_earlier]
    ]
    result["smd"] = _smd(earlier, later)
    result["new_levels"], result["vanished_levels"] = _level_changes(earlier, later)
    kind_earlier, kind_later = earlier.get("type"), later.get("type")
    if "identifier" in (kind_earlier, kind_later):
        result["new_levels"] = result["vanished_levels"] = None
        result["note"] = "identifiers are compared record by record, not by their distribution"
        return result
    numeric = kind_earlier in NUMERIC_TYPES and kind_later in NUMERIC_TYPES
    levelled = "levels" in earlier and "levels" in later
    if kind_earlier != kind_later and not numeric:
        result["note"] = f"the type changed from {kind_earlier} to {kind_later}"
        return result
    if numeric:
        edges = decile_edges(earlier)
        first, exact_first = numeric_shares(earlier, edges)
        second, exact_second = numeric_shares(later, edges)
        result["edges"] = edges
        result["exact"] = exact_first and exact_second
    elif levelled and not (earlier.get("levels_withheld") or later.get("levels_withheld")):
        bins, first, second = level_shares(earlier, later)
        result["exact"] = bool(earlier.get("levels_exact", True) and later.get("levels_exact", True))
    else:
        result["note"] = "no distribution is stored for this variable (dates, free text, identifiers)"
        return result
    # a bin empty in both drops carries no information: drop it before counting B
    pairs = [(e, a) for e, a in zip(first, second) if e > 0 or a > 0]
    if not pairs:
        return result
    value = psi([e for e, _ in pairs], [a for _, a in pairs])
    floor = noise_floor(len(pairs), n_earlier, n_later)
    result.update(value=_rounded(value), bins=len(pairs), noise_floor=_rounded(floor),
                  band=band(value, floor))
    return result


def _smd(earlier: dict[str, Any], later: dict[str, Any]) -> float | None:
    try:
        m1, m2 = float(earlier["mean"]), float(later["mean"])
        s1, s2 = float(earlier["sd"]), float(later["sd"])
    except (KeyError, TypeError, ValueError):
        return None
    pooled = math.sqrt((s1 * s1 + s2 * s2) / 2)
    return None if pooled == 0 else _rounded((m2 - m1) / pooled)


def _level_changes(earlier: dict[str, Any], later: dict[str, Any]) -> tuple[list[str] | None, list[str] | None]:
    """Levels seen only in the later drop, and only in the earlier one (null when not knowable)."""
    if "levels" not in earlier or "levels" not in later:
        return None, None
    if earlier.get("levels_withheld") or later.get("levels_withheld"):
        return None, None
    first = [str(level["value"]) for level in earlier["levels"]]
    second = [str(level["value"]) for level in later["levels"]]
    complete_first = not earlier.get("levels_other")
    complete_second = not later.get("levels_other")
    known_first, known_second = set(first), set(second)
    # a level missing from a list that was cut at 1,000 levels may still be there
    new = [v for v in second if v not in known_first] if complete_first else None
    vanished = [v for v in first if v not in known_second] if complete_second else None
    return new, vanished


def compare_profiles(earlier: dict[str, dict[str, Any]],
                     later: dict[str, dict[str, Any]]) -> dict[str, Any]:
    """Drift of every variable in both drops, and the variables found in only one of them."""
    common = [name for name in later if name in earlier]
    return {
        "variables": [variable_drift(earlier[name], later[name]) for name in common],
        "only_earlier": [name for name in earlier if name not in later],
        "only_later": [name for name in later if name not in earlier],
    }
