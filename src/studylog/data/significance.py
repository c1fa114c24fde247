"""Test statistics and p-values computed from sums, so that large files never need a second pass.

scipy.special's compiled functions give the distribution tails (loaded without the rest of the package:
see ``tails``); every function here is checked against scipy.stats in the reference tests.

- D'Agostino-Pearson K^2 = Z(skewness)^2 + Z(kurtosis)^2 (D'Agostino, Belanger & D'Agostino 1990),
  chi-square with 2 degrees of freedom;
- one-way ANOVA F with eta^2 = SS_between / SS_total;
- Kruskal-Wallis H on average ranks with the tie correction, epsilon^2 = H / (n - 1)
  (= H / ((n^2 - 1) / (n + 1)), Tomczak & Tomczak 2014);
- Pearson's chi-square of independence (no continuity correction), Cramer's V and Bergsma's (2013)
  bias-corrected V;
- Kendall's tau-b from a contingency table of two ordered variables;
- Holm's (1979) step-down adjustment.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Sequence
from typing import Any

import numpy as np

_tails: Any = None
_tails_lock = threading.Lock()


def tails() -> Any:
    """The module holding scipy.special's compiled functions (``chdtrc``, ``fdtrc``: the same objects
    as ``scipy.special``'s).

    ``import scipy.special`` also loads scipy's array-API layer, which walks numpy's namespace and
    so imports numpy.testing, f2py, ma and polynomial: a tenth to a fifth of a second of a profile,
    all of it holding Python's lock. The compiled module alone takes a fiftieth: it is imported
    under a bare package object that stands in for scipy.special while it loads and is then taken
    out of ``sys.modules``, so that a later ``import scipy.special`` (scipy.stats's) runs the
    package as usual and finds the module already loaded. Any failure takes the usual import."""
    global _tails
    if _tails is None:
        with _tails_lock:
            if _tails is None:
                _tails = _load_tails()
    return _tails


def _load_tails() -> Any:
    import importlib
    import importlib.util
    import sys

    if "scipy.special" in sys.modules:
        from scipy import special

        return special
    try:
        spec = importlib.util.find_spec("scipy.special")
        if spec is None or spec.submodule_search_locations is None:
            raise ImportError("scipy.special")
        package = importlib.util.module_from_spec(spec)
        sys.modules["scipy.special"] = package
        try:
            compiled = importlib.import_module("scipy.special._ufuncs")
        finally:
            if sys.modules.get("scipy.special") is package:
                del sys.modules["scipy.special"]
        compiled.chdtrc, compiled.fdtrc  # noqa: B018 - what this module uses, else the usual import
        return compiled
    except Exception:  # noqa: BLE001 - any trouble: the package's own import (which reports a real failure)
        from scipy import special

        return special


def _chi2_sf(statistic: float, df: float) -> float:
    return float(tails().chdtrc(df, statistic))


def dagostino_pearson(values: np.ndarray) -> tuple[float, float]:
    """K^2 and its p-value (n >= 20 advised; used here above 5000 values)."""
    mean = values.mean()
    d = values - mean
    d2 = d * d
    m2 = d2.mean()
    # biased skewness g1 and biased (not excess) kurtosis b2
    return dagostino_pearson_from_moments(values.size, (d2 * d).mean() / m2**1.5, (d2 * d2).mean() / m2**2)


def dagostino_pearson_from_moments(count: int, b1: float, b2: float) -> tuple[float, float]:
    """K^2 and its p-value from n, the biased skewness g1 and the biased kurtosis b2 = m4 / m2^2."""
    n = float(count)
    # skewness test
    y = b1 * math.sqrt(((n + 1) * (n + 3)) / (6.0 * (n - 2)))
    beta2 = (3.0 * (n * n + 27 * n - 70) * (n + 1) * (n + 3)) / ((n - 2) * (n + 5) * (n + 7) * (n + 9))
    w2 = -1 + math.sqrt(2 * (beta2 - 1))
    delta = 1 / math.sqrt(0.5 * math.log(w2))
    alpha = math.sqrt(2.0 / (w2 - 1))
    y = y if y != 0 else 1.0
    z_skew = delta * math.log(y / alpha + math.sqrt((y / alpha) ** 2 + 1))
    # kurtosis test (Anscombe & Glynn 1983)
    expected = 3.0 * (n - 1) / (n + 1)
    variance = 24.0 * n * (n - 2) * (n - 3) / ((n + 1) ** 2 * (n + 3) * (n + 5))
    x = (b2 - expected) / math.sqrt(variance)
    sqrt_beta1 = 6.0 * (n * n - 5 * n + 2) / ((n + 7) * (n + 9)) * math.sqrt(
        (6.0 * (n + 3) * (n + 5)) / (n * (n - 2) * (n - 3))
    )
    a = 6.0 + 8.0 / sqrt_beta1 * (2.0 / sqrt_beta1 + math.sqrt(1 + 4.0 / sqrt_beta1**2))
    term1 = 1 - 2 / (9.0 * a)
    denominator = 1 + x * math.sqrt(2 / (a - 4.0))
    if denominator == 0:
        return float("nan"), float("nan")
    term2 = math.copysign(abs((1 - 2.0 / a) / denominator) ** (1 / 3), denominator)
    z_kurt = (term1 - term2) / math.sqrt(2 / (9.0 * a))
    k2 = z_skew**2 + z_kurt**2
    return k2, _chi2_sf(k2, 2)


def anova(groups: np.ndarray, values: np.ndarray, k: int, sizes: np.ndarray | None = None) -> dict[str, Any] | None:
    """One-way ANOVA of ``values`` by integer group ``groups`` (0..k-1): F, p, eta^2. ``sizes``: the
    rows in each group, when the caller has counted them."""
    sizes = (np.bincount(groups, minlength=k) if sizes is None else sizes).astype(float)
    sums = np.bincount(groups, weights=values, minlength=k)
    mean = values.mean() if values.size else 0.0
    return _anova_table(sizes, sums, float(mean), float(((values - mean) ** 2).sum()), values.size)


def anova_of_sums(sizes: np.ndarray, sums: np.ndarray, squares: float) -> dict[str, Any] | None:
    """``anova`` from each group's rows and sum of values and the sum of the squared values of all of
    them, for values centred near their mean (then squares - n mean^2 loses no precision)."""
    sizes = sizes.astype(float)
    n = int(sizes.sum())
    if n == 0:
        return None
    mean = float(sums.sum()) / n
    ss_total = squares - n * mean * mean
    # a variable constant on these rows leaves only rounding error in its sum of squares
    if ss_total <= 1e-12 * max(squares, 1e-300):
        return None
    return _anova_table(sizes, sums, mean, ss_total, n)


def _anova_table(sizes: np.ndarray, sums: np.ndarray, mean: float, ss_total: float,
                 n: int) -> dict[str, Any] | None:
    k = sizes.size
    used = sizes > 0
    groups_used = int(used.sum())
    if groups_used < 2 or n - groups_used < 1:
        return None
    group_means = np.divide(sums, sizes, out=np.zeros(k), where=used)
    ss_between = float((sizes * (group_means - mean) ** 2).sum())
    ss_within = ss_total - ss_between
    df_between, df_within = groups_used - 1, n - groups_used
    if ss_total == 0:
        return None
    f = (ss_between / df_between) / (ss_within / df_within) if ss_within > 0 else math.inf
    p = float(tails().fdtrc(df_between, df_within, f)) if math.isfinite(f) else 0.0
    return {"f": f, "df_between": df_between, "df_within": df_within, "p_unadjusted": p,
            "eta_squared": ss_between / ss_total}


def kruskal_wallis(groups: np.ndarray, ranks: np.ndarray, k: int, tie_sum: float) -> dict[str, Any] | None:
    """Kruskal-Wallis H from average ranks (1..n) and sum(t^3 - t) over tie groups: H, p, epsilon^2."""
    n = ranks.size
    sizes = np.bincount(groups, minlength=k).astype(float)
    used = sizes > 0
    groups_used = int(used.sum())
    if groups_used < 2 or n < 3:
        return None
    rank_sums = np.bincount(groups, weights=ranks, minlength=k)
    h = 12.0 / (n * (n + 1)) * float((rank_sums[used] ** 2 / sizes[used]).sum()) - 3.0 * (n + 1)
    correction = 1.0 - tie_sum / (float(n) ** 3 - n)
    if correction <= 0:
        return None
    h /= correction
    return {"h": h, "df": groups_used - 1, "p_unadjusted": _chi2_sf(h, groups_used - 1),
            "epsilon_squared": h / (n - 1)}


def holm(p_values: Sequence[float | None]) -> list[float | None]:
    """Holm (1979) step-down adjusted p-values (monotone, capped at 1); None stays None."""
    present = [(p, i) for i, p in enumerate(p_values) if p is not None]
    m = len(present)
    adjusted: list[float | None] = [None] * len(p_values)
    running = 0.0
    for rank, (p, i) in enumerate(sorted(present)):
        running = max(running, min(1.0, (m - rank) * p))
        adjusted[i] = running
    return adjusted


def contingency(a: np.ndarray, b: np.ndarray, ka: int, kb: int) -> np.ndarray:
    """Counts of each (a, b) pair of level indices (both >= 0) as a ka x kb table."""
    return np.bincount(a * kb + b, minlength=ka * kb).reshape(ka, kb)


def chi_square(table: np.ndarray) -> dict[str, Any] | None:
    """Pearson's chi-square of independence without continuity correction; empty rows/columns dropped."""
    table = table[table.sum(axis=1) > 0][:, table.sum(axis=0) > 0].astype(float)
    rows, cols = table.shape
    n = table.sum()
    if rows < 2 or cols < 2 or n == 0:
        return None
    expected = np.outer(table.sum(axis=1), table.sum(axis=0)) / n
    statistic = float(((table - expected) ** 2 / expected).sum())
    df = (rows - 1) * (cols - 1)
    return {"chi2": statistic, "df": df, "p_value": _chi2_sf(statistic, df), "rows": rows, "cols": cols,
            "n": int(n)}


def cramers_v(test: dict[str, Any] | None) -> tuple[float | None, float | None]:
    """Cramer's V and Bergsma's (2013) bias-corrected form clipped at 0; None for a 1-row/column table."""
    if test is None:
        return None, None
    n, rows, cols = test["n"], test["rows"], test["cols"]
    phi2 = test["chi2"] / n
    v = math.sqrt(phi2 / min(rows - 1, cols - 1))
    if n < 2:
        return v, None
    phi2_corrected = max(0.0, phi2 - (rows - 1) * (cols - 1) / (n - 1))
    rows_corrected = rows - (rows - 1) ** 2 / (n - 1)
    cols_corrected = cols - (cols - 1) ** 2 / (n - 1)
    denominator = min(rows_corrected - 1, cols_corrected - 1)
    if denominator <= 0:
        return v, None
    return v, math.sqrt(phi2_corrected / denominator)


def kendall_tau_b(table: np.ndarray) -> float | None:
    """Kendall's tau-b from a table whose rows and columns are in the variables' order.

    Concordant pairs P = sum n_ij * (cells below and to the right), discordant Q = sum n_ij * (below and
    to the left); tau-b = (P - Q) / sqrt((n0 - n1)(n0 - n2)), n0 = n(n-1)/2, n1 and n2 the tied pairs
    within rows and within columns.
    """
    t = table.astype(float)
    n = t.sum()
    # cells strictly below-right of (i, j): reverse cumulative sums shifted by one row and column
    tail = t[::-1, ::-1].cumsum(axis=0).cumsum(axis=1)[::-1, ::-1]
    below_right = np.zeros_like(t)
    below_right[:-1, :-1] = tail[1:, 1:]
    head = t[::-1, :].cumsum(axis=0)[::-1, :].cumsum(axis=1)
    below_left = np.zeros_like(t)
    below_left[:-1, 1:] = head[1:, :-1]
    concordant = float((t * below_right).sum())
    discordant = float((t * below_left).sum())
    n0 = n * (n - 1) / 2
    row_ties = float((t.sum(axis=1) * (t.sum(axis=1) - 1) / 2).sum())
    col_ties = float((t.sum(axis=0) * (t.sum(axis=0) - 1) / 2).sum())
    denominator = math.sqrt((n0 - row_ties) * (n0 - col_ties)) if n0 > row_ties and n0 > col_ties else 0.0
    if denominator == 0:
        return None
    return (concordant - discordant) / denominator
