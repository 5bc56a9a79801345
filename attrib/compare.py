"""Compare: two windows (of one store or of two stores) -> per-route changes, tests and verdicts.

Per route, the per-request distributions of the two sides are compared: queries per request, database
time per request and elapsed time. Changes are after - before: difference of means for queries and
database time, difference of medians for elapsed time, each with a percentile-bootstrap 95% interval
(requests resampled with replacement, each side on its own). Each route gets two-sided Mann-Whitney U
tests (``scipy.stats.mannwhitneyu``, ``method="asymptotic"``: normal approximation with tie and
continuity correction), whose p-values are corrected for the number of routes (Holm by default,
Benjamini-Hochberg on request). Definitions and thresholds: docs/whatif-compare.md.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import UTC

import duckdb
import numpy as np
import pandas as pd
from scipy import stats as _scipy_stats

from attrib.attribute import request_filter
from attrib.attribute import request_totals as attribute_request_totals
from attrib.errors import UsageError
from attrib.whatif import BOOTSTRAP_CAP, bootstrap_blocks
from attrib.windows import Window, parse_window, zone

CORRECTIONS = ("holm", "bh")
#: Warn when the request rate of one side is more than this many times the other's (common practice,
#: no source).
VOLUME_RATIO = 1.5
#: Warn when the total variation distance between the two sides' route shares exceeds this (common
#: practice, no source).
MIX_TVD = 0.1

ROUTE_COLUMNS = [
    "route",
    "requests_before",
    "requests_after",
    "queries_per_request_before",
    "queries_per_request_after",
    "queries_change",
    "queries_change_ci_low",
    "queries_change_ci_high",
    "queries_p_value",
    "queries_p_adjusted",
    "queries_verdict",
    "db_ms_per_request_before",
    "db_ms_per_request_after",
    "db_ms_p50_before",
    "db_ms_p50_after",
    "db_ms_change",
    "db_ms_change_ci_low",
    "db_ms_change_ci_high",
    "elapsed_p50_before",
    "elapsed_p50_after",
    "elapsed_p99_before",
    "elapsed_p99_after",
    "elapsed_p50_change",
    "elapsed_p50_change_ci_low",
    "elapsed_p50_change_ci_high",
    "p_value",
    "p_adjusted",
    "elapsed_verdict",
]

#: The columns of the aligned-table view (csv and json carry all of :data:`ROUTE_COLUMNS`).
ROUTE_TABLE_COLUMNS = [
    "route",
    "requests_before",
    "requests_after",
    "queries_per_request_before",
    "queries_per_request_after",
    "queries_verdict",
    "db_ms_per_request_before",
    "db_ms_per_request_after",
    "elapsed_p50_before",
    "elapsed_p50_after",
    "elapsed_p50_change_ci_low",
    "elapsed_p50_change_ci_high",
    "p_adjusted",
    "elapsed_verdict",
]

TEMPLATE_COLUMNS = [
    "route",
    "template_id",
    "template",
    "calls_per_request_before",
    "calls_per_request_after",
    "mean_ms_before",
    "mean_ms_after",
    "status",
]


@dataclass
class Comparison:
    """The result of :func:`compare`: per-route rows, per-template rows and warnings."""

    routes: pd.DataFrame
    templates: pd.DataFrame
    warnings: list[str] = field(default_factory=list)


# --- corrections for many tests -----------------------------------------------------------------


def holm(p_values: np.ndarray | list[float]) -> np.ndarray:
    """Holm-Bonferroni adjusted p-values (Holm 1979); NaN entries stay NaN and are not counted.

    Sort the m p-values ascending, multiply the i-th (1-based) by m - i + 1, take the running maximum
    and cap at 1. A hypothesis is rejected at level alpha when its adjusted p-value is <= alpha.

    >>> holm([0.01, 0.04, 0.03, 0.005]).round(4).tolist()
    [0.03, 0.06, 0.06, 0.02]
    """
    p = np.asarray(p_values, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = ~np.isnan(p)
    m = int(ok.sum())
    if m == 0:
        return out
    idx = np.flatnonzero(ok)[np.argsort(p[ok], kind="stable")]
    adj = np.maximum.accumulate((m - np.arange(m)) * p[idx])
    out[idx] = np.minimum(adj, 1.0)
    return out


def benjamini_hochberg(p_values: np.ndarray | list[float]) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (false discovery rate, 1995); NaN entries stay NaN.

    Sort ascending, multiply the i-th (1-based) by m / i, take the running minimum from the largest
    down and cap at 1.

    >>> benjamini_hochberg([0.01, 0.04, 0.03, 0.005]).round(4).tolist()
    [0.02, 0.04, 0.04, 0.02]
    """
    p = np.asarray(p_values, dtype=float)
    out = np.full(p.shape, np.nan)
    ok = ~np.isnan(p)
    m = int(ok.sum())
    if m == 0:
        return out
    idx = np.flatnonzero(ok)[np.argsort(p[ok], kind="stable")]
    scaled = p[idx] * m / np.arange(1, m + 1)
    adj = np.minimum.accumulate(scaled[::-1])[::-1]
    out[idx] = np.minimum(adj, 1.0)
    return out


def adjust(p_values: np.ndarray | list[float], correction: str = "holm") -> np.ndarray:
    """Adjust p-values with ``"holm"`` or ``"bh"``."""
    if correction == "holm":
        return holm(p_values)
    if correction == "bh":
        return benjamini_hochberg(p_values)
    raise UsageError(f"unknown correction {correction!r}; use one of {', '.join(CORRECTIONS)}")


def mann_whitney(before: np.ndarray, after: np.ndarray) -> tuple[float, float]:
    """Two-sided Mann-Whitney U test; returns (p-value, direction).

    direction is +1 when "before" values tend to be larger (U of before > n1 n2 / 2), -1 when smaller,
    0 on a tie. ``method="asymptotic"``: normal approximation with tie correction and continuity
    correction; exact p-values are too slow for large samples and invalid with ties. Empty sides give
    NaN.

    >>> p, d = mann_whitney(np.array([5.0, 6, 7, 8]), np.array([1.0, 2, 3, 4]))
    >>> (round(p, 4), d)
    (0.0304, 1)
    """
    if len(before) == 0 or len(after) == 0:
        return float("nan"), 0
    res = _scipy_stats.mannwhitneyu(before, after, alternative="two-sided", method="asymptotic")
    centre = len(before) * len(after) / 2.0
    return float(res.pvalue), int(np.sign(res.statistic - centre))


def verdict(
    p_adjusted: float, direction: int, alpha: float, words: tuple[str, str, str]
) -> str | None:
    """``words`` = (lower after, unchanged, higher after); significant when p_adjusted <= alpha.

    None when there is no p-value (the route has requests on one side only).

    >>> verdict(0.001, 1, 0.05, ("fewer", "unchanged", "more"))
    'fewer'
    """
    if p_adjusted != p_adjusted:  # NaN: one side has no requests
        return None
    if p_adjusted <= alpha and direction != 0:
        return words[0] if direction > 0 else words[2]
    return words[1]


# --- reading the two sides ---------------------------------------------------------------------


def _where(window: Window | None) -> tuple[str, list]:
    if window is None:
        return request_filter("r")
    return request_filter("r", since=window.start, until=window.end)


def request_totals(con: duckdb.DuckDBPyConnection, window: Window | None) -> pd.DataFrame:
    """One row per request in ``window``: route, start, queries, database ms, elapsed ms."""
    where, params = _where(window)
    return attribute_request_totals(con, where, params)


def template_calls(con: duckdb.DuckDBPyConnection, window: Window | None) -> pd.DataFrame:
    """Per (route, template): calls, total ms, and the route's request count in ``window``."""
    where, params = _where(window)
    return con.execute(
        f"""
        WITH req AS (SELECT r.source_id, r.line, r.seq, r.route FROM requests r WHERE {where}),
        n AS (SELECT route, count(*) AS requests FROM req GROUP BY route)
        SELECT req.route, s.template_id, count(*) AS calls, sum(s.duration_ms) AS total_ms,
               any_value(n.requests) AS requests, any_value(t.template) AS template
        FROM req
        JOIN links l ON l.req_source_id = req.source_id AND l.req_line = req.line
                    AND l.req_seq = req.seq
        JOIN statements s ON s.source_id = l.source_id AND s.line = l.line AND s.seq = l.seq
        JOIN n USING (route)
        LEFT JOIN templates t ON t.template_id = s.template_id
        GROUP BY req.route, s.template_id
        """,
        params,
    ).df()


# --- the comparison ----------------------------------------------------------------------------


def compare(
    con_before: duckdb.DuckDBPyConnection,
    con_after: duckdb.DuckDBPyConnection | None = None,
    *,
    before: Window | str | None = None,
    after: Window | str | None = None,
    alpha: float = 0.05,
    correction: str = "holm",
    resamples: int = 1000,
    seed: int = 0,
    tz: str = "UTC",
    bootstrap_cap: int = BOOTSTRAP_CAP,
) -> Comparison:
    """Compare the requests of two windows (of one store, or of two stores) route by route.

    Args:
        con_before: the store of the "before" side.
        con_after: the store of the "after" side (default: ``con_before``).
        before, after: the two windows, as :class:`attrib.windows.Window` or ``START/END`` text in
            ``tz`` (None = the whole store; both needed with one store).
        alpha: significance level for the verdicts, applied to corrected p-values.
        correction: ``"holm"`` (family-wise error rate) or ``"bh"`` (false discovery rate).
        resamples, seed: bootstrap settings for the confidence intervals of the changes.
        tz: zone of windows given as text, and of the weekdays named when a side has no window.
        bootstrap_cap: per route and side, bootstrap a deterministic subsample of this many requests.

    Returns:
        A :class:`Comparison` (columns :data:`ROUTE_COLUMNS` and :data:`TEMPLATE_COLUMNS`).
    """
    if isinstance(before, str):
        before = parse_window(before, tz)
    if isinstance(after, str):
        after = parse_window(after, tz)
    if con_after is None:
        con_after = con_before
        if before is None or after is None:
            raise UsageError("comparing one store needs both --before and --after windows")
    if not 0 < alpha < 1:
        raise UsageError(f"--alpha must be between 0 and 1, not {alpha}")
    if correction not in CORRECTIONS:
        raise UsageError(f"unknown correction {correction!r}; use one of {', '.join(CORRECTIONS)}")
    rb, ra = request_totals(con_before, before), request_totals(con_after, after)
    for side, df in (("before", rb), ("after", ra)):
        if df.empty:
            raise UsageError(f"no requests on the {side} side; check the window and the store")
    routes = _routes(rb, ra, alpha, correction, resamples, seed, bootstrap_cap)
    templates = _templates(template_calls(con_before, before), template_calls(con_after, after))
    return Comparison(routes, templates, traffic_warnings(rb, ra, before, after, tz))


def _routes(
    rb: pd.DataFrame,
    ra: pd.DataFrame,
    alpha: float,
    correction: str,
    resamples: int,
    seed: int,
    cap: int,
) -> pd.DataFrame:
    gb, ga = dict(tuple(rb.groupby("route"))), dict(tuple(ra.groupby("route")))
    rows = []
    for route in sorted(set(gb) | set(ga)):
        b, a = gb.get(route, rb.iloc[:0]), ga.get(route, ra.iloc[:0])
        row = {"route": route, "requests_before": len(b), "requests_after": len(a)}
        qb, qa = b["queries"].to_numpy(float), a["queries"].to_numpy(float)
        db, da = b["db_ms"].to_numpy(float), a["db_ms"].to_numpy(float)
        eb, ea = b["elapsed_ms"].to_numpy(float), a["elapsed_ms"].to_numpy(float)
        row |= {
            "queries_per_request_before": _mean(qb),
            "queries_per_request_after": _mean(qa),
            "db_ms_per_request_before": _mean(db),
            "db_ms_per_request_after": _mean(da),
            "db_ms_p50_before": _pct(db, 50),
            "db_ms_p50_after": _pct(da, 50),
            "elapsed_p50_before": _pct(eb, 50),
            "elapsed_p50_after": _pct(ea, 50),
            "elapsed_p99_before": _pct(eb, 99),
            "elapsed_p99_after": _pct(ea, 99),
        }
        row["queries_change"] = row["queries_per_request_after"] - row["queries_per_request_before"]
        row["db_ms_change"] = row["db_ms_per_request_after"] - row["db_ms_per_request_before"]
        row["elapsed_p50_change"] = row["elapsed_p50_after"] - row["elapsed_p50_before"]
        lo, hi = change_intervals(
            np.column_stack([qb, db, eb]), np.column_stack([qa, da, ea]), resamples, seed, cap
        )
        for i, name in enumerate(("queries_change", "db_ms_change", "elapsed_p50_change")):
            row[f"{name}_ci_low"], row[f"{name}_ci_high"] = lo[i], hi[i]
        row["queries_p_value"], row["_qdir"] = mann_whitney(qb, qa)
        row["p_value"], row["_edir"] = mann_whitney(eb, ea)
        rows.append(row)
    df = pd.DataFrame(rows)
    df["queries_p_adjusted"] = adjust(df["queries_p_value"].to_numpy(), correction)
    df["p_adjusted"] = adjust(df["p_value"].to_numpy(), correction)
    df["queries_verdict"] = [
        verdict(p, d, alpha, ("fewer", "unchanged", "more"))
        for p, d in zip(df["queries_p_adjusted"], df["_qdir"], strict=True)
    ]
    df["elapsed_verdict"] = [
        verdict(p, d, alpha, ("faster", "unchanged", "slower"))
        for p, d in zip(df["p_adjusted"], df["_edir"], strict=True)
    ]
    return df[ROUTE_COLUMNS]


def _mean(x: np.ndarray) -> float:
    return float(x.mean()) if x.size else float("nan")


def _pct(x: np.ndarray, q: float) -> float:
    # numpy's default "linear" method is Hyndman and Fan definition 7, as attrib.stats.percentile.
    return float(np.percentile(x, q)) if x.size else float("nan")


def change_intervals(
    before: np.ndarray,
    after: np.ndarray,
    resamples: int = 1000,
    seed: int = 0,
    cap: int = BOOTSTRAP_CAP,
    level: float = 0.95,
) -> tuple[np.ndarray, np.ndarray]:
    """Percentile-bootstrap intervals of (after - before) for queries, db ms (means), elapsed (median).

    Args:
        before, after: arrays of shape (n, 3): queries, db ms and elapsed ms per request. Rows beyond
            ``cap`` are not used (callers pass requests in a deterministic hash order).
        resamples, seed: B and the seed; the before side is drawn first, from the same generator.
        cap: at most this many requests per side.
        level: confidence level.

    Returns:
        (low, high), three entries each; NaN when a side is empty.
    """
    if len(before) == 0 or len(after) == 0:
        nan = np.full(3, np.nan)
        return nan, nan.copy()
    rng = np.random.default_rng(seed)
    dists = []
    for side in (before[:cap], after[:cap]):
        q, d, e = (np.ascontiguousarray(side[:, i], dtype=float) for i in range(3))
        parts = []
        for idx in bootstrap_blocks(len(side), resamples, rng):
            parts.append(
                np.vstack([q[idx].mean(axis=1), d[idx].mean(axis=1), np.median(e[idx], axis=1)])
            )
        dists.append(np.concatenate(parts, axis=1))
    diff = dists[1] - dists[0]
    alpha = (1.0 - level) / 2.0
    low, high = np.quantile(diff, [alpha, 1.0 - alpha], axis=1)
    return low, high


def _templates(tb: pd.DataFrame, ta: pd.DataFrame) -> pd.DataFrame:
    m = tb.merge(ta, on=["route", "template_id"], how="outer", suffixes=("_b", "_a"))
    if m.empty:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in TEMPLATE_COLUMNS})
    m["template"] = m["template_b"].fillna(m["template_a"])
    m["calls_per_request_before"] = (m["calls_b"] / m["requests_b"]).fillna(0.0)
    m["calls_per_request_after"] = (m["calls_a"] / m["requests_a"]).fillna(0.0)
    m["mean_ms_before"] = m["total_ms_b"] / m["calls_b"]
    m["mean_ms_after"] = m["total_ms_a"] / m["calls_a"]
    m["status"] = np.where(
        m["calls_b"].isna(), "appeared", np.where(m["calls_a"].isna(), "disappeared", "both")
    )
    m = m.sort_values(["route", "status", "template_id"], kind="stable")
    return m[TEMPLATE_COLUMNS].reset_index(drop=True)


# --- warnings ----------------------------------------------------------------------------------


def route_mix_distance(before: pd.Series, after: pd.Series) -> float:
    """Total variation distance between two route mixes (Series of routes, one per request).

    TVD = 1/2 * sum over routes of |share before - share after|: 0 for the same mix, 1 for disjoint.

    >>> route_mix_distance(pd.Series(["/a", "/a", "/b", "/b"]), pd.Series(["/a", "/b", "/b", "/b"]))
    0.25
    """
    sb = before.value_counts(normalize=True)
    sa = after.value_counts(normalize=True)
    sb, sa = sb.align(sa, fill_value=0.0)
    return float(0.5 * (sb - sa).abs().sum())


def traffic_warnings(
    rb: pd.DataFrame,
    ra: pd.DataFrame,
    before: Window | None,
    after: Window | None,
    tz: str = "UTC",
) -> list[str]:
    """Warnings when the two sides differ in request rate, route mix or weekday."""
    out = []
    rate_b, rate_a = _rate(rb, before), _rate(ra, after)
    if rate_b > 0 and rate_a > 0:
        ratio = max(rate_b, rate_a) / min(rate_b, rate_a)
        if ratio > VOLUME_RATIO:
            out.append(
                f"traffic differs: {rate_b:,.0f} requests/hour before, {rate_a:,.0f} after "
                f"({ratio:.1f}x); load may explain changes in elapsed time"
            )
    tvd = route_mix_distance(rb["route"], ra["route"])
    if tvd > MIX_TVD:
        out.append(
            f"route mix differs: total variation distance {tvd:.2f} > {MIX_TVD} between the shares "
            "of requests per route"
        )
    day_b, day_a = _weekday(rb, before, tz), _weekday(ra, after, tz)
    if day_b != day_a:
        out.append(f"the windows fall on different weekdays ({day_b} before, {day_a} after)")
    return out


def _rate(df: pd.DataFrame, window: Window | None) -> float:
    if window is not None:
        hours = window.hours
    else:
        span = df["started_at"].max() - df["started_at"].min()
        hours = span.total_seconds() / 3600.0
    return len(df) / hours if hours > 0 else 0.0


def _weekday(df: pd.DataFrame, window: Window | None, tz: str) -> str:
    if window is not None:
        return window.weekday
    first = pd.Timestamp(df["started_at"].min()).to_pydatetime().replace(tzinfo=UTC)
    return first.astimezone(zone(tz)).strftime("%A")
