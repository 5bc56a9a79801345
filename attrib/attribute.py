"""Route and template rankings: one SQL query per listing over the store, results as DataFrames.

All grouping runs inside DuckDB; pandas only receives one row per route or template. Definitions of
every column are in docs/methods.md. Percentiles are DuckDB's ``quantile_cont`` (Hyndman and Fan
definition 7, the same rule as :func:`attrib.stats.percentile`).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any

import duckdb
import pandas as pd

from attrib.errors import UsageError

#: The route shown for statements that no request claims.
NO_REQUEST = "(no request)"

ROUTE_COLUMNS = [
    "route",
    "requests",
    "queries_per_request_mean",
    "queries_per_request_p50",
    "queries_per_request_p95",
    "queries_per_request_max",
    "db_ms_total",
    "db_share",
    "db_ms_per_request_p50",
    "db_ms_per_request_p95",
    "db_fraction_p50",
    "db_fraction_aggregate",
    "elapsed_ms_p50",
    "elapsed_ms_p95",
    "elapsed_ms_p99",
    "distinct_templates_per_request_mean",
    "repeat_fraction",
]

TEMPLATE_COLUMNS = [
    "template_id",
    "template",
    "calls",
    "calls_per_request",
    "total_ms",
    "share",
    "mean_ms",
    "p50_ms",
    "p95_ms",
    "p99_ms",
    "rows_per_call",
    "routes",
    "first_seen",
    "last_seen",
]

ROUTE_TEMPLATE_COLUMNS = [
    "template_id",
    "template",
    "calls",
    "calls_per_request",
    "requests_share",
    "total_ms",
    "share",
    "mean_ms",
    "p50_ms",
    "p95_ms",
    "rows_per_call",
]


# --- filters ------------------------------------------------------------------------------------


def request_filter(
    alias: str,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
    route: str | None = None,
) -> tuple[str, list[Any]]:
    """A WHERE condition on the requests table (aliased ``alias``) and its parameters.

    ``since`` is inclusive, ``until`` exclusive, both on ``started_at``. ``route`` matches exactly
    or as a glob pattern (``*``, ``?``, ``[...]``).

    >>> request_filter("r", route="/huts/*")
    ('(r.route = ? OR r.route GLOB ?)', ['/huts/*', '/huts/*'])
    """
    conds, params = time_filter(alias, since=since, until=until)
    if route is not None:
        conds = f"{conds} AND " if conds != "TRUE" else ""
        return f"{conds}({alias}.route = ? OR {alias}.route GLOB ?)", [*params, route, route]
    return conds, params


def request_totals_sql(where: str, *, ordered: bool = False) -> str:
    """SQL for one row per request matching ``where`` (a condition on ``requests r``, see
    :func:`request_filter`): route, started_at, queries, db_ms, elapsed_ms.

    ``ordered`` sorts the rows by a hash of the request's position: a fixed pseudo-random order, so
    that subsamples and bootstraps are reproducible.
    """
    order_by = (
        "ORDER BY hash(r.source_id, r.line, r.seq), r.source_id, r.line, r.seq" if ordered else ""
    )
    return f"""
        SELECT any_value(r.route) AS route, any_value(r.started_at) AS started_at,
               count(s.template_id) AS queries, coalesce(sum(s.duration_ms), 0) AS db_ms,
               any_value(r.elapsed_ms) AS elapsed_ms
        FROM requests r
        LEFT JOIN links l ON l.req_source_id = r.source_id AND l.req_line = r.line
                         AND l.req_seq = r.seq
        LEFT JOIN statements s ON s.source_id = l.source_id AND s.line = l.line AND s.seq = l.seq
        WHERE {where}
        GROUP BY r.source_id, r.line, r.seq
        {order_by}
        """


def request_totals(con: duckdb.DuckDBPyConnection, where: str, params: list[Any]) -> pd.DataFrame:
    """The rows of :func:`request_totals_sql` (in its fixed order) as a DataFrame, aggregated by
    DuckDB: statements never reach pandas."""
    return con.execute(request_totals_sql(where, ordered=True), params).df()


def time_filter(
    alias: str, *, since: datetime | None = None, until: datetime | None = None
) -> tuple[str, list[Any]]:
    """A condition ``since <= alias.started_at < until`` (each side optional) and its parameters.

    >>> time_filter("s")
    ('TRUE', [])
    """
    if since is not None and until is not None and since >= until:
        raise UsageError(f"--since {since.isoformat()} is not before --until {until.isoformat()}")
    conds, params = [], []
    if since is not None:
        conds.append(f"{alias}.started_at >= ?")
        params.append(since)
    if until is not None:
        conds.append(f"{alias}.started_at < ?")
        params.append(until)
    return (" AND ".join(conds) or "TRUE"), params


def order(
    df: pd.DataFrame,
    sort: str,
    *,
    top: int | None = None,
    reverse: bool = False,
    tie: str | None = None,
) -> pd.DataFrame:
    """Sort a listing by one of its columns (numbers and times descending, text ascending).

    Args:
        df: the listing.
        sort: a column name.
        top: keep only the first ``top`` rows.
        reverse: flip the direction.
        tie: a column that breaks ties (ascending).

    Returns:
        The sorted listing with a fresh index.
    """
    if sort not in df.columns:
        raise UsageError(f"cannot sort by {sort!r}; choose one of: {', '.join(df.columns)}")
    if top is not None and top < 0:
        raise UsageError(f"--top must be 0 or more, not {top}")
    text = pd.api.types.is_object_dtype(df[sort]) or pd.api.types.is_string_dtype(df[sort])
    ascending = text != reverse
    by, asc = [sort], [ascending]
    if tie is not None and tie != sort:
        by.append(tie)
        asc.append(True)
    out = df.sort_values(by, ascending=asc, na_position="last", kind="stable")
    if top is not None:
        out = out.head(top)
    return out.reset_index(drop=True)


# --- routes -------------------------------------------------------------------------------------


def routes(
    con: duckdb.DuckDBPyConnection,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
    route: str | None = None,
    sort: str = "db_share",
    top: int | None = None,
    reverse: bool = False,
) -> pd.DataFrame:
    """One row per route: request count, queries, database time and its share, elapsed times.

    Args:
        con: a store connection.
        since, until: keep requests that started in [since, until); also bounds the statements that
            make up the ``db_share`` denominator.
        route: keep routes equal to this or matching it as a glob pattern.
        sort, top, reverse: see :func:`order`.

    Returns:
        A DataFrame with :data:`ROUTE_COLUMNS`.
    """
    where, params = request_filter("r", since=since, until=until, route=route)
    swhere, sparams = time_filter("s", since=since, until=until)
    # Statements are grouped per (request, template) first: the number of groups in a request is its
    # count of distinct templates, without a DISTINCT aggregate over millions of rows.
    sql = f"""
    WITH per_tpl AS (
        SELECT l.req_source_id, l.req_line, l.req_seq,
               count(*) AS n, coalesce(sum(s.duration_ms), 0) AS ms
        FROM links l JOIN statements s USING (source_id, line, seq)
        GROUP BY l.req_source_id, l.req_line, l.req_seq, s.template_id
    ),
    per_req AS (
        SELECT req_source_id, req_line, req_seq,
               sum(n) AS queries, sum(ms) AS db_ms, count(*) AS templates
        FROM per_tpl GROUP BY req_source_id, req_line, req_seq
    ),
    req AS (
        SELECT r.route, r.elapsed_ms,
               coalesce(p.queries, 0) AS queries,
               coalesce(p.db_ms, 0) AS db_ms,
               coalesce(p.templates, 0) AS templates
        FROM requests r
        LEFT JOIN per_req p
          ON p.req_source_id = r.source_id AND p.req_line = r.line AND p.req_seq = r.seq
        WHERE {where}
    ),
    total AS (SELECT sum(s.duration_ms) AS ms FROM statements s WHERE {swhere}),
    agg AS (
    SELECT route,
           count(*) AS requests,
           avg(queries) AS queries_per_request_mean,
           quantile_cont(queries, [0.5, 0.95]) AS qq,
           max(queries) AS queries_per_request_max,
           sum(db_ms) AS db_ms_total,
           sum(db_ms) / nullif(any_value(total.ms), 0) AS db_share,
           quantile_cont(db_ms, [0.5, 0.95]) AS qd,
           quantile_cont(db_ms / nullif(elapsed_ms, 0), 0.5) AS db_fraction_p50,
           sum(db_ms) / nullif(sum(elapsed_ms), 0) AS db_fraction_aggregate,
           quantile_cont(elapsed_ms, [0.5, 0.95, 0.99]) AS qe,
           avg(templates) AS distinct_templates_per_request_mean,
           (sum(queries) - sum(templates)) / nullif(sum(queries), 0) AS repeat_fraction
    FROM req, total
    GROUP BY route
    )
    SELECT *, qq[1] AS queries_per_request_p50, qq[2] AS queries_per_request_p95,
           qd[1] AS db_ms_per_request_p50, qd[2] AS db_ms_per_request_p95,
           qe[1] AS elapsed_ms_p50, qe[2] AS elapsed_ms_p95, qe[3] AS elapsed_ms_p99
    FROM agg
    """
    df = _frame(con, sql, [*params, *sparams], ROUTE_COLUMNS)
    df = df.astype({"requests": "int64", "queries_per_request_max": "int64"})
    return order(df, sort, top=top, reverse=reverse, tie="route")


# --- templates ----------------------------------------------------------------------------------


def templates(
    con: duckdb.DuckDBPyConnection,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
    sort: str = "total_ms",
    top: int | None = None,
    reverse: bool = False,
) -> pd.DataFrame:
    """One row per query template: calls, time and its share, duration percentiles, routes.

    Args:
        con: a store connection.
        since, until: keep statements that started in [since, until).
        sort, top, reverse: see :func:`order`.

    Returns:
        A DataFrame with :data:`TEMPLATE_COLUMNS`; ``routes`` holds lists of ``{route, share}``
        dicts (largest share first; statements no request claims count under ``"(no request)"``).
    """
    where, params = time_filter("s", since=since, until=until)
    # Per-template figures come from the statements alone; only linked statements are joined to
    # their request, and the "(no request)" part is what remains of each template's totals.
    sql = f"""
    WITH tpl AS (
        SELECT template_id, count(*) AS calls,
               coalesce(sum(duration_ms), 0) AS total_ms,
               avg(duration_ms) AS mean_ms,
               quantile_cont(duration_ms, [0.5, 0.95, 0.99]) AS q,
               avg(rows) AS rows_per_call,
               min(started_at) AS first_seen, max(started_at) AS last_seen
        FROM statements s WHERE {where}
        GROUP BY template_id
    ),
    per_req AS (
        SELECT s.template_id, l.req_source_id, l.req_line, l.req_seq,
               count(*) AS calls, coalesce(sum(s.duration_ms), 0) AS ms
        FROM links l
        JOIN statements s ON s.source_id = l.source_id AND s.line = l.line AND s.seq = l.seq
        WHERE {where}
        GROUP BY s.template_id, l.req_source_id, l.req_line, l.req_seq
    ),
    per_route AS (
        SELECT p.template_id, r.route, sum(p.calls) AS calls, sum(p.ms) AS ms,
               count(*) AS requests
        FROM per_req p
        JOIN requests r
          ON r.source_id = p.req_source_id AND r.line = p.req_line AND r.seq = p.req_seq
        GROUP BY p.template_id, r.route
    ),
    unlinked AS (
        SELECT t.template_id, '{NO_REQUEST}' AS route,
               t.calls - coalesce(sum(p.calls), 0) AS calls,
               t.total_ms - coalesce(sum(p.ms), 0) AS ms,
               0 AS requests
        FROM tpl t LEFT JOIN per_route p USING (template_id)
        GROUP BY t.template_id, t.calls, t.total_ms
        HAVING t.calls > coalesce(sum(p.calls), 0)
    ),
    parts AS (SELECT * FROM per_route UNION ALL SELECT * FROM unlinked),
    shares AS (
        SELECT p.template_id,
               sum(p.calls) FILTER (WHERE p.route <> '{NO_REQUEST}')
                   / nullif(sum(p.requests), 0) AS calls_per_request,
               list({{'route': p.route,
                      'share': CASE WHEN t.total_ms > 0 THEN p.ms / t.total_ms
                                    ELSE p.calls / t.calls END}}
                    ORDER BY p.ms DESC, p.calls DESC, p.route) AS routes
        FROM parts p JOIN tpl t USING (template_id)
        GROUP BY p.template_id
    ),
    total AS (SELECT sum(total_ms) AS ms FROM tpl)
    SELECT t.template_id, tt.template, t.calls, sh.calls_per_request, t.total_ms,
           t.total_ms / nullif(total.ms, 0) AS share,
           t.mean_ms, t.q[1] AS p50_ms, t.q[2] AS p95_ms, t.q[3] AS p99_ms, t.rows_per_call,
           sh.routes, t.first_seen, t.last_seen
    FROM tpl t JOIN shares sh USING (template_id)
    LEFT JOIN templates tt USING (template_id), total
    """
    df = _frame(con, sql, [*params, *params], TEMPLATE_COLUMNS)
    df["calls"] = df["calls"].astype("int64")
    df["routes"] = [_route_list(v) for v in df["routes"]]
    return order(df, sort, top=top, reverse=reverse, tie="template_id")


def routes_text(routes: list[dict[str, Any]]) -> str:
    """The compact form of a template's ``routes`` cell for tables and CSV.

    >>> routes_text([{"route": "/huts/{id}", "share": 0.82}, {"route": "/search", "share": 0.18}])
    '/huts/{id} 82%, /search 18%'
    """
    return ", ".join(f"{r['route']} {_pct(r['share'])}" for r in routes)


def templates_as_text(df: pd.DataFrame) -> pd.DataFrame:
    """A copy of a templates listing whose ``routes`` column is the compact text form."""
    out = df.copy()
    out["routes"] = [routes_text(v) for v in out["routes"]]
    return out


# --- one route ----------------------------------------------------------------------------------


@dataclass(frozen=True)
class RouteDetail:
    """The drill-down into one route: its templates and its N+1 findings."""

    route: str
    requests: int
    templates: pd.DataFrame
    nplus1: pd.DataFrame


def route_templates(
    con: duckdb.DuckDBPyConnection,
    route: str,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
) -> tuple[int, pd.DataFrame]:
    """The templates one route runs, with calls per request and share of the route's database time.

    Args:
        con: a store connection.
        route: the route, exactly as in ``attrib routes``.
        since, until: keep requests that started in [since, until).

    Returns:
        ``(requests, listing)``: the route's request count and a DataFrame with
        :data:`ROUTE_TEMPLATE_COLUMNS`, largest total time first.
    """
    where, params = time_filter("r", since=since, until=until)
    n = con.execute(
        f"SELECT count(*) FROM requests r WHERE r.route = ? AND {where}", [route, *params]
    ).fetchone()[0]
    if n == 0:
        raise UsageError(f"no requests for route {route!r} in the store; see `attrib routes`")
    sql = f"""
    WITH req AS (
        SELECT r.source_id, r.line, r.seq FROM requests r WHERE r.route = ? AND {where}
    ),
    st AS (
        SELECT s.template_id, s.duration_ms, s.rows, l.req_source_id, l.req_line, l.req_seq
        FROM req
        JOIN links l
          ON l.req_source_id = req.source_id AND l.req_line = req.line AND l.req_seq = req.seq
        JOIN statements s ON s.source_id = l.source_id AND s.line = l.line AND s.seq = l.seq
    ),
    tpl AS (
        SELECT template_id, count(*) AS calls,
               count(DISTINCT hash(req_source_id, req_line, req_seq)) AS requests,
               coalesce(sum(duration_ms), 0) AS total_ms,
               avg(duration_ms) AS mean_ms,
               quantile_cont(duration_ms, 0.5) AS p50_ms,
               quantile_cont(duration_ms, 0.95) AS p95_ms,
               avg(rows) AS rows_per_call
        FROM st GROUP BY template_id
    )
    SELECT t.template_id, tt.template, t.calls, t.calls / ? AS calls_per_request,
           t.requests / ? AS requests_share, t.total_ms,
           t.total_ms / nullif(sum(t.total_ms) OVER (), 0) AS share,
           t.mean_ms, t.p50_ms, t.p95_ms, t.rows_per_call
    FROM tpl t LEFT JOIN templates tt USING (template_id)
    """
    df = _frame(con, sql, [route, *params, n, n], ROUTE_TEMPLATE_COLUMNS)
    df["calls"] = df["calls"].astype("int64")
    return int(n), order(df, "total_ms", tie="template_id")


# --- helpers ------------------------------------------------------------------------------------


def _frame(
    con: duckdb.DuckDBPyConnection, sql: str, params: list[Any], columns: list[str]
) -> pd.DataFrame:
    df = con.execute(sql, params).df()
    if df.empty:
        return pd.DataFrame({c: pd.Series(dtype=_EMPTY_DTYPES.get(c, "float64")) for c in columns})
    return df[columns]


_EMPTY_DTYPES = {
    "route": "object",
    "template_id": "object",
    "template": "object",
    "routes": "object",
    "requests": "int64",
    "calls": "int64",
    "queries_per_request_max": "int64",
    "first_seen": "datetime64[us]",
    "last_seen": "datetime64[us]",
}


def _route_list(value: Any) -> list[dict[str, Any]]:
    return [{"route": str(v["route"]), "share": float(v["share"])} for v in value]


def _pct(share: float) -> str:
    pct = share * 100
    return f"{pct:.0f}%" if pct >= 1 or pct == 0 else "<1%"


def route_detail(
    con: duckdb.DuckDBPyConnection,
    route: str,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
    min_repeats: int = 3,
) -> RouteDetail:
    """The drill-down into one route: :func:`route_templates` and its N+1 findings.

    Args:
        con: a store connection.
        route: the route, exactly as in ``attrib routes``.
        since, until: keep requests that started in [since, until).
        min_repeats: see :func:`attrib.nplus1.find`.

    Returns:
        A :class:`RouteDetail`.
    """
    from attrib import nplus1  # nplus1 builds on this module

    n, listing = route_templates(con, route, since=since, until=until)
    findings = nplus1.find(
        con, min_repeats=min_repeats, since=since, until=until, route=route, exact_route=True
    )
    return RouteDetail(route=route, requests=n, templates=listing, nplus1=findings)
