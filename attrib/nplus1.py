"""N+1 loops and redundant repeats inside requests, with the parent of each loop and a saving estimate.

A template that runs at least ``min_repeats`` times in one request is a candidate. Its calls are an
``n_plus_one`` loop when they carry more than one parameter set (``statements.param_hash``; NULL counts
as one value of its own, "no parameters seen"), and ``redundant`` repeats when they all carry the same
one. The heavy work (ordering statements inside requests, counting repeats, gaps and predecessors) is
SQL over the store; Python receives one row per (route, child template, kind, predecessor) and builds
a small networkx graph per route to pick each loop's parent. See docs/methods.md.
"""

from __future__ import annotations

import math
import uuid
from datetime import datetime
from typing import Any

import duckdb
import networkx as nx
import numpy as np
import pandas as pd

from attrib import stats
from attrib.attribute import order, request_filter, time_filter
from attrib.errors import UsageError

#: Default: a template must run this many times in one request to be a candidate.
MIN_REPEATS = 3

#: The graph node that stands for "nothing before it in the request".
START = "(start)"

NPLUS1_COLUMNS = [
    "route",
    "kind",
    "child_template_id",
    "child_template",
    "parent_template_id",
    "parent_template",
    "requests",
    "repeats_mean",
    "repeats_max",
    "parent_rows_match_share",
    "wasted_ms_total",
    "fixed_cost_ms",
    "gap_ms_median",
    "saving_ms_estimate",
]


def find(
    con: duckdb.DuckDBPyConnection,
    *,
    min_repeats: int = MIN_REPEATS,
    since: datetime | None = None,
    until: datetime | None = None,
    route: str | None = None,
    exact_route: bool = False,
    top: int | None = None,
) -> pd.DataFrame:
    """Find N+1 loops and redundant repeats, ranked by estimated saving.

    Args:
        con: a store connection.
        min_repeats: calls of one template in one request that make a candidate (≥ 2).
        since, until: keep requests that started in [since, until).
        route: keep routes equal to this or matching it as a glob pattern.
        exact_route: match ``route`` only exactly (no glob).
        top: keep the first ``top`` findings.

    Returns:
        A DataFrame with :data:`NPLUS1_COLUMNS`, one row per (route, child template, kind).
    """
    if min_repeats < 2:
        raise UsageError(f"--min-repeats must be at least 2, not {min_repeats}")
    if exact_route and route is not None:
        where, params = time_filter("r", since=since, until=until)
        where, params = f"{where} AND r.route = ?", [*params, route]
    else:
        where, params = request_filter("r", since=since, until=until, route=route)
    pairs = f"attrib_nplus1_{uuid.uuid4().hex}"
    sql = _pairs_sql(where, _order_key(con))
    con.execute(f"CREATE TEMP TABLE {pairs} AS {sql}", [*params, min_repeats])
    try:
        findings = con.execute(_FINDINGS_SQL.format(pairs=pairs)).df()
        edges = con.execute(_EDGES_SQL.format(pairs=pairs)).df()
    finally:
        con.execute(f"DROP TABLE IF EXISTS {pairs}")
    if findings.empty:
        return _empty()
    findings = _attach_parents(findings, edges)
    fits = fixed_costs(
        con,
        findings.loc[findings["kind"] == "n_plus_one", "child_template_id"].unique().tolist(),
        since=since,
        until=until,
    )
    findings["fixed_cost_ms"] = [
        fits[t].fixed_ms if k == "n_plus_one" else math.nan
        for t, k in zip(findings["child_template_id"], findings["kind"], strict=True)
    ]
    findings["saving_ms_estimate"] = [_saving(row) for row in findings.itertuples()]
    names = _template_names(
        con, set(findings["child_template_id"]) | set(findings["parent_template_id"].dropna())
    )
    findings["child_template"] = findings["child_template_id"].map(names)
    findings["parent_template"] = findings["parent_template_id"].map(names)
    findings = findings.astype({"requests": "int64", "repeats_max": "int64"})
    out = findings[NPLUS1_COLUMNS]
    out = out.sort_values(
        ["saving_ms_estimate", "wasted_ms_total", "route", "child_template_id", "kind"],
        ascending=[False, False, True, True, True],
        na_position="last",
        kind="stable",
    )
    return order(out.reset_index(drop=True), "saving_ms_estimate", top=top, tie=None)


def fixed_costs(
    con: duckdb.DuckDBPyConnection,
    template_ids: list[str],
    *,
    since: datetime | None = None,
    until: datetime | None = None,
    sample: int = stats.FIT_SAMPLE,
) -> dict[str, stats.CostFit]:
    """Fit each template's fixed cost per call on a bounded, deterministic sample of its calls.

    Among a template's calls with a known duration, the sample keeps those whose
    ``hash(source_id, line, seq)`` is a multiple of a stride (count // sample, at least 1), then the
    ``sample`` smallest hashes: one scan, no sort of the whole table, and the same store always
    gives the same fit.

    Args:
        con: a store connection.
        template_ids: the templates to fit.
        since, until: keep statements that started in [since, until).
        sample: calls per template at most.

    Returns:
        template id -> :class:`attrib.stats.CostFit` (every requested id is present).
    """
    if not template_ids:
        return {}
    where, params = time_filter("s", since=since, until=until)
    known = f"""
        FROM statements s
        WHERE s.template_id IN (SELECT unnest(?::VARCHAR[])) AND s.duration_ms IS NOT NULL
          AND {where}
    """
    counts = con.execute(
        f"SELECT s.template_id, count(*) {known} GROUP BY s.template_id", [template_ids, *params]
    ).fetchall()
    strides = {t: max(1, n // sample) for t, n in counts}
    df = con.execute(
        f"""
        WITH stride AS (
            SELECT unnest(?::VARCHAR[]) AS template_id, unnest(?::UBIGINT[]) AS k
        ),
        calls AS (
            SELECT s.template_id, s.duration_ms, s.rows, hash(s.source_id, s.line, s.seq) AS h
            {known}
        )
        SELECT c.template_id, c.duration_ms, c.rows
        FROM calls c JOIN stride USING (template_id)
        WHERE c.h % stride.k = 0
        QUALIFY row_number() OVER (PARTITION BY c.template_id ORDER BY c.h) <= ?
        """,
        [list(strides), list(strides.values()), template_ids, *params, sample],
    ).df()
    groups = {t: g for t, g in df.groupby("template_id", sort=False)}
    out = {}
    for t in template_ids:
        g = groups.get(t)
        if g is None:
            out[t] = stats.CostFit(math.nan, 0.0, "median", 0)
            continue
        out[t] = stats.fit_fixed_cost(
            g["duration_ms"].to_numpy(dtype=float, na_value=np.nan),
            g["rows"].to_numpy(dtype=float, na_value=np.nan),
        )
    return out


def parent_graphs(edges: pd.DataFrame) -> dict[str, nx.DiGraph]:
    """Per route, a directed graph of the transitions into the first call of each repeated template.

    Args:
        edges: rows of ``route, parent_template_id, child_template_id, kind, requests`` (NULL parent
            = the child ran first in the request), already counted in SQL.

    Returns:
        route -> DiGraph whose edge ``u -> v`` carries ``weight`` (requests where ``u`` came right
        before the first call of ``v``) and one count per kind.
    """
    graphs: dict[str, nx.DiGraph] = {}
    for row in edges.itertuples(index=False):
        g = graphs.setdefault(row.route, nx.DiGraph())
        u = START if pd.isna(row.parent_template_id) else row.parent_template_id
        v = row.child_template_id
        if not g.has_edge(u, v):
            g.add_edge(u, v, weight=0)
        g[u][v]["weight"] += int(row.requests)
        g[u][v][row.kind] = g[u][v].get(row.kind, 0) + int(row.requests)
    return graphs


def pick_parent(graph: nx.DiGraph, child: str, kind: str) -> str | None:
    """The template that most often runs right before the first call of ``child`` (for ``kind``).

    Ties go to the edge with more requests of any kind, then to the smaller template id. ``None``
    when the child most often starts the request.

    >>> g = nx.DiGraph()
    >>> g.add_edge("a", "c", weight=3, n_plus_one=3)
    >>> g.add_edge("b", "c", weight=1, n_plus_one=1)
    >>> pick_parent(g, "c", "n_plus_one")
    'a'
    """
    ranked = sorted(
        (-data.get(kind, 0), -data["weight"], u) for u, _v, data in graph.in_edges(child, data=True)
    )
    best = ranked[0][2] if ranked else None
    return None if best in (None, START) else best


# --- SQL ----------------------------------------------------------------------------------------


def _order_key(con: duckdb.DuckDBPyConnection) -> str:
    """SQL for a value that sorts a request's statements by (source_id, line, started_at, seq).

    Log order comes first: within one statement log a session's statements appear in the order they
    ran, while their start times are log times truncated to milliseconds minus durations measured in
    microseconds, so two statements that end in the same millisecond can look swapped by time. The
    start time then orders statements that share a line (OTLP spans of one export batch).

    A HUGEINT (15 bits of source id, 32 of line, 64 of start microseconds, 16 of seq) when every
    value fits those widths, which one cheap scan checks; otherwise a STRUCT of the four columns,
    which sorts the same way but compares several times slower.
    """
    fits = con.execute(
        "SELECT coalesce(min(source_id) >= 0 AND max(source_id) < 32768 AND min(line) >= 0"
        " AND max(line) < 4294967296 AND min(seq) >= 0 AND max(seq) < 65536"
        " AND min(epoch_us(started_at)) >= 0, true)"
        " FROM statements"
    ).fetchone()[0]
    if fits:
        return (
            "(({a}source_id::HUGEINT << 112) | ({a}line::HUGEINT << 80)"
            " | (epoch_us({a}started_at)::HUGEINT << 16) | {a}seq::HUGEINT)"
        )
    return "{{'s': {a}source_id, 'l': {a}line, 't': {a}started_at, 'q': {a}seq}}"


def _pairs_sql(where: str, key: str) -> str:
    """One row per candidate (request, template): calls, kind, predecessor, wasted time, gaps.

    A lean count per (request, template) finds the candidates; one window pass over the statements
    of requests with a candidate, ordered by ``key`` (see :func:`_order_key`), gives every statement
    its predecessor; one GROUP BY over the candidates' calls reads the predecessor and duration of
    their first and last call.
    """
    k = key.format(a="")
    return f"""
    WITH req AS (SELECT r.source_id, r.line, r.seq, r.route FROM requests r WHERE {where}),
    linked AS NOT MATERIALIZED (
        SELECT l.req_source_id AS rs, l.req_line AS rl, l.req_seq AS rq,
               s.source_id, s.line, s.seq, s.started_at, s.duration_ms, s.rows,
               s.template_id, s.param_hash
        FROM links l
        SEMI JOIN req
          ON l.req_source_id = req.source_id AND l.req_line = req.line AND l.req_seq = req.seq
        JOIN statements s ON s.source_id = l.source_id AND s.line = l.line AND s.seq = l.seq
    ),
    -- candidates first (a lean count), so that ordering and the detailed aggregates only touch
    -- the requests and calls that matter
    cand AS (
        SELECT rs, rl, rq, template_id FROM linked
        GROUP BY rs, rl, rq, template_id HAVING count(*) >= ?
    ),
    st AS (
        SELECT rs, rl, rq, started_at, duration_ms, template_id, param_hash, {k} AS key,
               lag(template_id) OVER w AS prev_template_id,
               lag(rows) OVER w AS prev_rows
        FROM linked SEMI JOIN (SELECT DISTINCT rs, rl, rq FROM cand) c USING (rs, rl, rq)
        WINDOW w AS (PARTITION BY rs, rl, rq ORDER BY {k})
    ),
    pairs AS (
        SELECT rs, rl, rq, template_id,
               count(*) AS n,
               -- more than one parameter set among the calls (NULL counts as a value of its own)
               CASE WHEN min(param_hash) <> max(param_hash)
                         OR count(param_hash) BETWEEN 1 AND count(*) - 1
                    THEN 'n_plus_one' ELSE 'redundant' END AS kind,
               arg_min_null(prev_template_id, key) AS prev_template_id,
               arg_min_null(prev_rows, key) AS prev_rows,
               min(started_at) AS first_at, max(started_at) AS last_at,
               arg_min_null(duration_ms, key) AS first_ms,
               arg_max_null(duration_ms, key) AS last_ms,
               coalesce(sum(duration_ms), 0) AS ms
        FROM st SEMI JOIN cand USING (rs, rl, rq, template_id)
        GROUP BY rs, rl, rq, template_id
    )
    SELECT req.route, p.rs, p.rl, p.rq, p.template_id, p.n, p.kind,
           p.prev_template_id, p.prev_rows,
           p.ms - coalesce(p.first_ms, 0) AS wasted_ms,
           -- sum over consecutive calls of (next start - previous end), telescoped
           ((epoch_us(p.last_at) - epoch_us(p.first_at)) / 1000.0
               - (p.ms - coalesce(p.last_ms, 0))) / (p.n - 1) AS gap_ms_mean
    FROM pairs p
    JOIN req ON req.source_id = p.rs AND req.line = p.rl AND req.seq = p.rq
    """


_FINDINGS_SQL = """
SELECT route, template_id AS child_template_id, kind,
       count(*) AS requests, avg(n) AS repeats_mean, max(n) AS repeats_max,
       sum(n - 1) AS extra_calls, sum(wasted_ms) AS wasted_ms_total,
       quantile_cont(greatest(gap_ms_mean, 0), 0.5) AS gap_ms_median
FROM {pairs}
GROUP BY route, template_id, kind
"""

_EDGES_SQL = """
SELECT route, prev_template_id AS parent_template_id, template_id AS child_template_id, kind,
       count(*) AS requests,
       count(*) FILTER (WHERE prev_rows IS NOT NULL) AS rows_known,
       count(*) FILTER (WHERE prev_rows = n) AS rows_match
FROM {pairs}
GROUP BY route, prev_template_id, template_id, kind
"""


# --- helpers ------------------------------------------------------------------------------------


def _attach_parents(findings: pd.DataFrame, edges: pd.DataFrame) -> pd.DataFrame:
    graphs = parent_graphs(edges)
    counts = {
        (
            r.route,
            START if pd.isna(r.parent_template_id) else r.parent_template_id,
            r.child_template_id,
            r.kind,
        ): (r.rows_known, r.rows_match)
        for r in edges.itertuples(index=False)
    }
    parents, shares = [], []
    for row in findings.itertuples(index=False):
        parent = pick_parent(graphs[row.route], row.child_template_id, row.kind)
        known, match = counts[(row.route, parent or START, row.child_template_id, row.kind)]
        parents.append(parent)
        shares.append(match / known if known else math.nan)
    return findings.assign(parent_template_id=parents, parent_rows_match_share=shares)


def _saving(row: Any) -> float:
    # The per-request model is linear in (repeats - 1), so its sum over the requests of a finding is
    # the model applied once to 1 + the sum of (repeats - 1).
    if row.kind == "redundant":
        return stats.cache_saving_ms(row.extra_calls + 1, row.wasted_ms_total, row.gap_ms_median)
    return stats.loop_saving_ms(row.extra_calls + 1, row.fixed_cost_ms, row.gap_ms_median)


def _template_names(con: duckdb.DuckDBPyConnection, ids: set[str]) -> dict[str, str]:
    if not ids:
        return {}
    rows = con.execute(
        "SELECT template_id, template FROM templates WHERE template_id IN (SELECT unnest(?))",
        [sorted(ids)],
    ).fetchall()
    return dict(rows)


def _empty() -> pd.DataFrame:
    dtypes = {"requests": "int64", "repeats_max": "int64"}
    text = {"route", "kind", "child_template_id", "child_template"}
    text |= {"parent_template_id", "parent_template"}
    return pd.DataFrame(
        {
            c: pd.Series(dtype=dtypes.get(c, "object" if c in text else "float64"))
            for c in NPLUS1_COLUMNS
        }
    )
