"""What-if: project per-route database time and elapsed time under changes to query templates.

Four scenario kinds, applied to each (request, template) in this order (docs/whatif-compare.md):

1. ``remove T``: every call of T disappears (its duration; the application time around it stays).
2. ``cache T``: within a request, a call of T with the same parameter hash as an earlier call is served
   from a cache: its duration goes, and so does one round trip (the template's median gap) per dropped
   call (:func:`attrib.stats.cache_saving_ms`). Without parameter hashes every repeat counts.
3. ``batch T``: the r calls of T left in the request become one call: (r - 1) fixed costs per call and
   (r - 1) median gaps go (:func:`attrib.stats.loop_saving_ms`, fixed cost from
   :func:`attrib.stats.fit_fixed_cost`); the saving is capped so the batch keeps at least one average
   call's time.
4. ``faster T=s``: what is left of T's time is divided by s.

Model: a request's statements run one after another on its critical path, so its new elapsed time is the
old one minus the time saved, never below its non-database time (elapsed - database time) minus the
gaps the scenario removes. Per-request work is SQL over the store; numpy only bootstraps per-request
arrays.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from datetime import datetime

import duckdb
import numpy as np
import pandas as pd

from attrib import nplus1
from attrib.attribute import request_filter
from attrib.errors import UsageError
from attrib.stats import cache_saving_ms, loop_saving_ms

#: Above this many requests a route's bootstrap runs on a deterministic subsample of this size.
BOOTSTRAP_CAP = 20_000
#: Bootstrap resamples are drawn in blocks of at most this many values (memory bound).
_BLOCK_VALUES = 4_000_000
#: The label of the row that covers every request of the store (or window).
ALL_ROUTES = "(all routes)"
PERCENTILES = (50, 95, 99)

COLUMNS = [
    "route",
    "requests",
    "requests_affected",
    "db_ms_per_request_before",
    "db_ms_per_request_after",
    "db_ms_p50_before",
    "db_ms_p50_after",
    *[
        f"elapsed_p{q}_{part}"
        for q in PERCENTILES
        for part in ("before", "after", "after_ci_low", "after_ci_high")
    ],
    "elapsed_mean_before",
    "elapsed_mean_after",
    "amdahl_fraction",
    "amdahl_factor",
    "amdahl_speedup",
    "amdahl_elapsed_mean",
    "db_ms_saved_per_hour",
    "db_ms_saved_per_day",
    "busy_connections_before",
    "busy_connections_after",
    "span_s",
    "bootstrap_requests",
]

#: The columns of the aligned-table view (csv and json carry all of :data:`COLUMNS`).
TABLE_COLUMNS = [
    "route",
    "requests",
    "requests_affected",
    "db_ms_per_request_before",
    "db_ms_per_request_after",
    "elapsed_p50_before",
    "elapsed_p50_after",
    "elapsed_p50_after_ci_low",
    "elapsed_p50_after_ci_high",
    "elapsed_p99_before",
    "elapsed_p99_after",
    "amdahl_speedup",
    "db_ms_saved_per_hour",
    "busy_connections_before",
    "busy_connections_after",
]


@dataclass(frozen=True)
class Scenario:
    """Changes to templates: speed-up factors (divisors of duration), batched, cached, removed."""

    faster: dict[str, float] = field(default_factory=dict)
    batch: tuple[str, ...] = ()
    cache: tuple[str, ...] = ()
    remove: tuple[str, ...] = ()

    @property
    def templates(self) -> list[str]:
        """Every template the scenario touches, sorted."""
        return sorted({*self.faster, *self.batch, *self.cache, *self.remove})

    @classmethod
    def parse(
        cls,
        faster: list[str] | tuple[str, ...] = (),
        batch: list[str] | tuple[str, ...] = (),
        cache: list[str] | tuple[str, ...] = (),
        remove: list[str] | tuple[str, ...] = (),
    ) -> Scenario:
        """Build a scenario from CLI-style texts (``faster`` items are ``TEMPLATE_ID=FACTOR``).

        >>> Scenario.parse(faster=["a1=3x"], batch=["b2"]).faster
        {'a1': 3.0}
        """
        speed: dict[str, float] = {}
        for item in faster:
            tid, sep, factor = item.partition("=")
            if not sep or not tid.strip():
                raise UsageError(f"--faster {item!r} must be TEMPLATE_ID=FACTOR, e.g. 3fa1c2=3x")
            speed[tid.strip()] = parse_factor(factor)
        scenario = cls(speed, tuple(batch), tuple(cache), tuple(remove))
        if not scenario.templates:
            raise UsageError(
                "no scenario: give at least one of --faster, --batch, --cache, --remove"
            )
        return scenario


_FACTOR = re.compile(r"^\s*([0-9]*\.?[0-9]+)\s*(x|%)\s*$", re.IGNORECASE)


def parse_factor(text: str) -> float:
    """Turn ``3x`` (a third of the time) or ``40%`` (40% less time) into a divisor of duration.

    >>> parse_factor("3x")
    3.0
    >>> round(parse_factor("40%"), 6)
    1.666667
    """
    m = _FACTOR.match(text)
    if not m:
        raise UsageError(
            f"factor {text!r} must look like 3x (3 times faster) or 40% (40% less time)"
        )
    value, unit = float(m.group(1)), m.group(2).lower()
    if unit == "x":
        if value <= 0:
            raise UsageError(f"factor {text!r} must be above 0x")
        return value
    if value >= 100:
        raise UsageError(f"factor {text!r}: 100% less time or more is a removal; use --remove")
    return 1.0 / (1.0 - value / 100.0)


def amdahl_speedup(fraction: float, factor: float) -> float:
    """Amdahl's law: overall speedup when ``fraction`` of the time becomes ``factor`` times faster.

    speedup = 1 / ((1 - p) + p / s) (Amdahl 1967). ``factor`` may be ``inf`` (the part disappears).

    >>> amdahl_speedup(0.4, 10)
    1.5625
    >>> round(amdahl_speedup(0.5, math.inf), 6)
    2.0
    """
    if not 0 <= fraction <= 1:
        raise ValueError(f"fraction {fraction} is outside 0-1")
    if factor <= 0:
        raise ValueError("factor must be positive")
    rest = (1.0 - fraction) + fraction / factor
    return math.inf if rest == 0 else 1.0 / rest


def busy_connections(statements_per_s: float, mean_duration_ms: float) -> float:
    """Little's law L = λW: mean number of statements in progress (busy connections).

    >>> busy_connections(200.0, 5.0)
    1.0
    """
    return statements_per_s * mean_duration_ms / 1000.0


def bootstrap_percentiles(
    values: np.ndarray,
    percentiles: tuple[float, ...] = PERCENTILES,
    *,
    resamples: int = 1000,
    seed: int | np.random.Generator = 0,
    level: float = 0.95,
) -> tuple[np.ndarray, np.ndarray]:
    """Percentile-bootstrap confidence intervals for several percentiles of one sample.

    Draws ``resamples`` samples of size n with replacement (``rng.integers(0, n, (B, n))``, in blocks),
    computes each percentile (linear interpolation, Hyndman and Fan definition 7) per resample, and
    returns the (1 - level)/2 and (1 + level)/2 quantiles of those bootstrap distributions.

    Args:
        values: the per-request values.
        percentiles: which percentiles (0-100) to bracket.
        resamples: B, the number of bootstrap resamples.
        seed: an integer seed or a numpy Generator.
        level: the confidence level.

    Returns:
        Two arrays (low, high) with one entry per percentile; NaN for an empty sample.

    >>> lo, hi = bootstrap_percentiles(np.arange(100.0), (50,), resamples=200, seed=1)
    >>> bool(lo[0] < 49.5 < hi[0])
    True
    """
    x = np.asarray(values, dtype=float)
    qs = np.asarray(percentiles, dtype=float)
    if x.size == 0:
        nan = np.full(len(qs), np.nan)
        return nan, nan.copy()
    dist = _resample(x, lambda s: np.percentile(s, qs, axis=1), resamples, seed)
    alpha = (1.0 - level) / 2.0
    low, high = np.quantile(dist, [alpha, 1.0 - alpha], axis=1)
    return low, high


def bootstrap_blocks(n: int, resamples: int, seed: int | np.random.Generator = 0):
    """Yield index matrices (b, n) of bootstrap resamples, ``resamples`` rows in all.

    The draws are ``rng.integers(0, n, (B, n))`` split into row blocks (the same stream as one draw),
    each block at most a few million values so memory stays bounded.
    """
    if resamples < 1:
        raise UsageError(f"--resamples must be at least 1, not {resamples}")
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    block = max(1, min(resamples, _BLOCK_VALUES // max(n, 1)))
    for done in range(0, resamples, block):
        yield rng.integers(0, n, (min(block, resamples - done), n))


def _resample(x: np.ndarray, statistic, resamples: int, seed) -> np.ndarray:
    """Bootstrap distribution of ``statistic`` (maps (b, n) -> (k, b)); returns shape (k, B)."""
    parts = [np.atleast_2d(statistic(x[idx])) for idx in bootstrap_blocks(x.size, resamples, seed)]
    return np.concatenate(parts, axis=1)


# --- SQL over the store -----------------------------------------------------------------------


def _per_template_sql(where: str) -> str:
    """One row per (request, template): route, calls, their time, and repeats of a parameter set.

    ``n_dup``/``d_dup`` (calls, and their time, whose parameter hash occurred earlier in the request)
    are only filled for the templates in the ``?`` list (the cached ones). One pass, group-bys only.
    """
    return f"""
    WITH {_req_cte(where)},
    byp AS (
        SELECT req.rs, req.rl, req.rq, any_value(req.route) AS route, s.template_id AS t,
               CASE WHEN list_contains(?::VARCHAR[], s.template_id)
                    THEN coalesce(s.param_hash, 0) END AS ph,
               count(*) AS n, coalesce(sum(s.duration_ms), 0) AS d,
               arg_min(coalesce(s.duration_ms, 0), (s.started_at, s.source_id, s.line, s.seq))
                   AS d_first
        FROM req
        JOIN links l ON l.req_source_id = req.rs AND l.req_line = req.rl AND l.req_seq = req.rq
        JOIN statements s ON s.source_id = l.source_id AND s.line = l.line AND s.seq = l.seq
        GROUP BY req.rs, req.rl, req.rq, s.template_id, ph
    )
    SELECT rs, rl, rq, any_value(route) AS route, t, sum(n) AS n_all, sum(d) AS d_all,
           CASE WHEN any_value(ph) IS NULL THEN 0 ELSE sum(n) - count(*) END AS n_dup,
           CASE WHEN any_value(ph) IS NULL THEN 0 ELSE sum(d - d_first) END AS d_dup
    FROM byp GROUP BY rs, rl, rq, t
    """


def _req_cte(where: str) -> str:
    return f"""req AS (
        SELECT r.source_id AS rs, r.line AS rl, r.seq AS rq, r.route, r.started_at, r.elapsed_ms
        FROM requests r WHERE {where}
    )"""


def _check_templates(con: duckdb.DuckDBPyConnection, scenario: Scenario) -> None:
    known = {
        row[0]
        for row in con.execute(
            "SELECT template_id FROM templates WHERE template_id IN (SELECT unnest(?::VARCHAR[]))",
            [scenario.templates],
        ).fetchall()
    }
    missing = [t for t in scenario.templates if t not in known]
    if missing:
        raise UsageError(
            f"template {missing[0]!r} is not in the store; list template ids with `attrib templates`"
        )


def _savings_table(
    con: duckdb.DuckDBPyConnection,
    scenario: Scenario,
    since: datetime | None,
    until: datetime | None,
) -> pd.DataFrame:
    """One row per (route, template, kind, repeats) the scenario needs, with the model's savings.

    The fixed cost per call and the median gap between consecutive calls of a template are the ones
    ``attrib nplus1`` reports (:func:`attrib.nplus1.fixed_costs`, :func:`attrib.nplus1.find` with
    ``min_repeats=2``), so a batch here and a finding there use the same figures.
    """
    looped = sorted({*scenario.batch, *scenario.cache} - set(scenario.remove))
    cols = ["route", "t", "kind", "n", "db_ms", "gap_ms"]
    if not looped:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in cols})
    findings = nplus1.find(con, min_repeats=2, since=since, until=until)
    findings = findings[findings["child_template_id"].isin(looped)]
    gap = {
        (r, t, k): 0.0 if pd.isna(g) else float(g)
        for r, t, k, g in zip(
            findings["route"],
            findings["child_template_id"],
            findings["kind"],
            findings["gap_ms_median"],
            strict=True,
        )
    }

    def median_gap(route: str, t: str, prefer: str) -> float:
        other = "redundant" if prefer == "n_plus_one" else "n_plus_one"
        return gap.get((route, t, prefer), gap.get((route, t, other), 0.0))

    # find() fits the fixed cost of every loop's child; fit the batched templates it did not cover.
    loops = findings[findings["kind"] == "n_plus_one"]
    fixed = dict(zip(loops["child_template_id"], loops["fixed_cost_ms"], strict=True))
    rest = [t for t in scenario.batch if t not in fixed]
    fits = nplus1.fixed_costs(con, rest, since=since, until=until) if rest else {}
    fixed |= {t: f.fixed_ms for t, f in fits.items()}
    fixed = {t: 0.0 if pd.isna(f) else float(f) for t, f in fixed.items()}
    combos = con.execute(
        "SELECT DISTINCT route, t, n_all, n_dup FROM _whatif_pert"
        " WHERE t IN (SELECT unnest(?::VARCHAR[])) AND n_all > 1",
        [looped],
    ).fetchall()
    rows = {}
    for route, t, n_all, n_dup in combos:
        cached = t in scenario.cache
        if cached and n_dup > 0:
            g = median_gap(route, t, "redundant")
            rows[(route, t, "cache", n_dup + 1)] = (0.0, cache_saving_ms(n_dup + 1, 0.0, g))
        n_keep = n_all - (n_dup if cached else 0)
        if t in scenario.batch and n_keep > 1:
            g = median_gap(route, t, "n_plus_one")
            f = fixed.get(t, 0.0)
            rows[(route, t, "batch", n_keep)] = (
                loop_saving_ms(n_keep, f, 0.0),
                loop_saving_ms(n_keep, 0.0, g),
            )
    return pd.DataFrame([(*k, *v) for k, v in rows.items()], columns=cols)


def _per_request_sql(where: str) -> str:
    """One row per request: elapsed, db time, the scenario's savings and its Amdahl portion."""
    return f"""
    WITH {_req_cte(where)},
    tot AS (
        SELECT req.rs, req.rl, req.rq, any_value(req.route) AS route,
               any_value(req.started_at) AS started_at, any_value(req.elapsed_ms) AS elapsed_ms,
               coalesce(sum(p.n_all), 0) AS queries, coalesce(sum(p.d_all), 0) AS db_ms
        FROM req LEFT JOIN _whatif_pert p USING (rs, rl, rq)
        GROUP BY req.rs, req.rl, req.rq
    ),
    per AS (SELECT * FROM _whatif_pert WHERE t IN (SELECT t FROM _whatif_scenario)),
    step1 AS (  -- remove, then cache
        SELECT per.*, sc.removed, sc.cached, sc.batched, sc.factor,
               CASE WHEN sc.removed THEN d_all WHEN sc.cached THEN d_dup ELSE 0 END AS db1,
               CASE WHEN NOT sc.removed AND sc.cached AND n_dup > 0
                    THEN coalesce(cs.gap_ms, 0) ELSE 0 END AS gap1,
               CASE WHEN sc.removed THEN n_all WHEN sc.cached THEN n_dup ELSE 0 END AS drop1
        FROM per JOIN _whatif_scenario sc USING (t)
        LEFT JOIN _whatif_savings cs
          ON cs.kind = 'cache' AND cs.route = per.route AND cs.t = per.t AND cs.n = per.n_dup + 1
    ),
    step2 AS (  -- batch what is left
        SELECT step1.*, n_all - drop1 AS n_keep, d_all - db1 AS d_rem,
               CASE WHEN NOT removed AND batched AND n_all - drop1 > 1
                    THEN least(coalesce(bs.db_ms, 0),
                               (d_all - db1) * (n_all - drop1 - 1) / (n_all - drop1))
                    ELSE 0 END AS db2,
               CASE WHEN NOT removed AND batched AND n_all - drop1 > 1
                    THEN coalesce(bs.gap_ms, 0) ELSE 0 END AS gap2,
               CASE WHEN NOT removed AND batched AND n_all - drop1 > 1
                    THEN n_all - drop1 - 1 ELSE 0 END AS drop2
        FROM step1
        LEFT JOIN _whatif_savings bs
          ON bs.kind = 'batch' AND bs.route = step1.route AND bs.t = step1.t
         AND bs.n = step1.n_all - step1.drop1
    ),
    step3 AS (  -- then make the rest faster
        SELECT rs, rl, rq, d_all, gap1 + gap2 AS gap,
               db1 + db2 + CASE WHEN removed THEN 0
                                ELSE (d_rem - db2) * (1 - 1 / factor) END AS db_saved,
               drop1 + drop2 AS dropped
        FROM step2
    ),
    sav AS (
        SELECT rs, rl, rq, sum(d_all) AS target_ms, sum(db_saved) AS db_saved,
               sum(gap) AS gap, sum(dropped) AS dropped
        FROM step3 GROUP BY ALL
    ),
    j AS (
        SELECT tot.*, coalesce(sav.db_saved <> 0 OR sav.gap <> 0 OR sav.dropped > 0, false) AS affected,
               coalesce(sav.target_ms, 0) AS target_ms, coalesce(sav.db_saved, 0) AS db_saved,
               least(coalesce(sav.gap, 0), greatest(tot.elapsed_ms - tot.db_ms, 0)) AS gap_saved,
               coalesce(sav.dropped, 0) AS dropped
        FROM tot LEFT JOIN sav USING (rs, rl, rq)
    )
    SELECT route, rs, rl, rq, hash(rs, rl, rq) AS h, affected, queries, queries - dropped AS queries_after,
           epoch_us(started_at) - min(epoch_us(started_at)) OVER () AS start_us, elapsed_ms, db_ms, db_ms - db_saved AS db_ms_after,
           greatest(elapsed_ms - db_saved - gap_saved,
                    greatest(elapsed_ms - db_ms, 0) - gap_saved) AS elapsed_after,
           target_ms + gap_saved AS portion_before, target_ms - db_saved AS portion_after
    FROM j
    """


_AGG = """
    count(*) AS requests,
    count(*) FILTER (WHERE affected) AS requests_affected,
    avg(db_ms) AS db_ms_per_request_before,
    avg(db_ms_after) AS db_ms_per_request_after,
    quantile_cont(db_ms, 0.5) AS db_ms_p50_before,
    quantile_cont(db_ms_after, 0.5) AS db_ms_p50_after,
    {pcts}
    avg(elapsed_ms) AS elapsed_mean_before,
    avg(elapsed_after) AS elapsed_mean_after,
    sum(portion_before) / nullif(sum(elapsed_ms), 0) AS amdahl_fraction,
    sum(portion_before) / sum(portion_after) AS amdahl_factor,
    (max(start_us + elapsed_ms * 1000) - min(start_us)) / 1e6 AS span_s,
    sum(queries) AS statements_before, sum(queries_after) AS statements_after,
    sum(db_ms) AS db_total_before, sum(db_ms_after) AS db_total_after
"""


def whatif(
    con: duckdb.DuckDBPyConnection,
    scenario: Scenario,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
    resamples: int = 1000,
    seed: int = 0,
    bootstrap_cap: int = BOOTSTRAP_CAP,
) -> pd.DataFrame:
    """Project each affected route (and all routes together) under ``scenario``.

    Args:
        con: a store connection.
        scenario: the changes to apply.
        since, until: only requests that started in [since, until).
        resamples: bootstrap resamples for the confidence intervals of the "after" percentiles.
        seed: seed of the bootstrap (each route starts from ``default_rng(seed)``).
        bootstrap_cap: routes with more requests bootstrap a deterministic subsample of this size.

    Returns:
        One row per affected route, most database time saved first, then the all-routes row; columns
        :data:`COLUMNS` (definitions in docs/whatif-compare.md).
    """
    with _projection(con, scenario, since, until):
        return _summarise(con, resamples, seed, bootstrap_cap)


def per_request(
    con: duckdb.DuckDBPyConnection,
    scenario: Scenario,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
) -> pd.DataFrame:
    """One row per request the scenario changes, with its figures now and projected.

    Columns: route, queries_before, queries_after, db_ms_before, db_ms_after, elapsed_ms_before,
    elapsed_ms_after (the same model as :func:`whatif`; used by the ``whatif`` chart).
    """
    with _projection(con, scenario, since, until):
        return con.execute(
            """SELECT route, queries AS queries_before, queries_after, db_ms AS db_ms_before,
                      db_ms_after, elapsed_ms AS elapsed_ms_before, elapsed_after AS elapsed_ms_after
               FROM _whatif_requests WHERE affected ORDER BY h, rs, rl, rq"""
        ).df()


@contextmanager
def _projection(
    con: duckdb.DuckDBPyConnection,
    scenario: Scenario,
    since: datetime | None,
    until: datetime | None,
) -> Iterator[None]:
    """Fill the temporary table ``_whatif_requests`` (one row per request) for the scenario."""
    _check_templates(con, scenario)
    where, params = request_filter("r", since=since, until=until)
    if not con.execute(f"SELECT count(*) FROM requests r WHERE {where}", params).fetchone()[0]:
        raise UsageError("no requests in the store for this time range; check --since/--until")
    con.execute(
        f"CREATE OR REPLACE TEMP TABLE _whatif_pert AS {_per_template_sql(where)}",
        [*params, list(scenario.cache)],
    )
    try:
        _project(con, scenario, where, params, since, until)
        yield
    finally:
        con.execute("DROP TABLE IF EXISTS _whatif_requests")
        con.execute("DROP TABLE IF EXISTS _whatif_pert")


def _project(
    con: duckdb.DuckDBPyConnection,
    scenario: Scenario,
    where: str,
    params: list,
    since: datetime | None,
    until: datetime | None,
) -> None:
    savings = _savings_table(con, scenario, since, until)
    scn = pd.DataFrame(
        {
            "t": scenario.templates,
            "removed": [t in scenario.remove for t in scenario.templates],
            "cached": [t in scenario.cache for t in scenario.templates],
            "batched": [t in scenario.batch for t in scenario.templates],
            "factor": [float(scenario.faster.get(t, 1.0)) for t in scenario.templates],
        }
    )
    savings = savings.astype({"n": "int64", "db_ms": "float64", "gap_ms": "float64"})
    con.register("_whatif_scenario", scn)
    con.register("_whatif_savings", savings)
    try:
        con.execute(
            f"CREATE OR REPLACE TEMP TABLE _whatif_requests AS {_per_request_sql(where)}", params
        )
    finally:
        con.unregister("_whatif_scenario")
        con.unregister("_whatif_savings")


def _summarise(con: duckdb.DuckDBPyConnection, resamples: int, seed: int, cap: int) -> pd.DataFrame:
    pcts = "".join(
        f"quantile_cont(elapsed_ms, {q / 100}) AS elapsed_p{q}_before, "
        f"quantile_cont(elapsed_after, {q / 100}) AS elapsed_p{q}_after, "
        for q in PERCENTILES
    )
    agg = _AGG.format(pcts=pcts)
    per_route = con.execute(
        f"""
        SELECT route, {agg} FROM _whatif_requests
        WHERE route IN (SELECT route FROM _whatif_requests WHERE affected)
        GROUP BY route
        ORDER BY sum(db_ms) - sum(db_ms_after) DESC, route
        """
    ).df()
    overall = con.execute(f"SELECT '{ALL_ROUTES}' AS route, {agg} FROM _whatif_requests").df()
    df = pd.concat([per_route, overall], ignore_index=True)
    for q in PERCENTILES:
        df[f"elapsed_p{q}_after_ci_low"] = np.nan
        df[f"elapsed_p{q}_after_ci_high"] = np.nan
    df["bootstrap_requests"] = 0
    for i, route in enumerate(df["route"]):
        cond, args = ("TRUE", []) if i == len(df) - 1 else ("route = ?", [route])
        values = con.execute(
            f"SELECT elapsed_after FROM _whatif_requests WHERE {cond} ORDER BY h, rs, rl, rq LIMIT ?",
            [*args, cap],
        ).fetchnumpy()["elapsed_after"]
        low, high = bootstrap_percentiles(np.asarray(values, float), resamples=resamples, seed=seed)
        for q, lo, hi in zip(PERCENTILES, low, high, strict=True):
            df.loc[i, f"elapsed_p{q}_after_ci_low"] = lo
            df.loc[i, f"elapsed_p{q}_after_ci_high"] = hi
        df.loc[i, "bootstrap_requests"] = len(values)
    span = df["span_s"].where(df["span_s"] > 0)
    saved = df["db_total_before"] - df["db_total_after"]
    df["db_ms_saved_per_hour"] = saved / span * 3600
    df["db_ms_saved_per_day"] = saved / span * 86400
    df["busy_connections_before"] = busy_connections(
        df["statements_before"] / span, df["db_total_before"] / df["statements_before"]
    )
    df["busy_connections_after"] = busy_connections(
        df["statements_after"] / span,
        df["db_total_after"] / df["statements_after"].where(df["statements_after"] > 0),
    ).fillna(0.0)
    df["amdahl_factor"] = df["amdahl_factor"].astype(float).replace(np.nan, np.inf)
    df["amdahl_speedup"] = [
        amdahl_speedup(min(max(p, 0.0), 1.0), s) if p == p and s > 0 else np.nan
        for p, s in zip(df["amdahl_fraction"], df["amdahl_factor"], strict=True)
    ]
    df["amdahl_elapsed_mean"] = df["elapsed_mean_before"] / df["amdahl_speedup"]
    df["bootstrap_requests"] = df["bootstrap_requests"].astype("int64")
    return df[COLUMNS]
