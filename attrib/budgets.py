"""Query budgets: per-route limits read from a TOML file, checked against the store.

File format (docs/whatif-compare.md)::

    [routes."/huts/{id}/bunks"]
    queries_p95 = 5        # queries per request, 95th percentile
    db_ms_p95 = 20         # database ms per request, 95th percentile
    max_nplus1 = 0         # N+1 loop findings (attrib nplus1, kind n_plus_one)

    [routes."/huts*"]      # glob: *, ?, [...]
    queries_p99 = 30

A route is checked against every pattern it matches. Percentiles are DuckDB ``quantile_cont``
(Hyndman and Fan definition 7), the rule of :func:`attrib.stats.percentile`.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass
from datetime import datetime
from fnmatch import fnmatchcase
from pathlib import Path

import duckdb
import pandas as pd

from attrib import nplus1
from attrib.attribute import request_filter, request_totals_sql
from attrib.errors import BudgetExceeded, InputError

_KEY = re.compile(r"^(queries|db_ms)_p(100|[1-9][0-9]?(?:_[0-9]+)?)$")
COLUMNS = ["route", "pattern", "budget", "limit", "actual", "requests", "status"]


@dataclass(frozen=True)
class Limit:
    """One limit: ``metric`` is ``queries``, ``db_ms`` or ``nplus1``; ``percentile`` 0-100 or None."""

    pattern: str
    key: str
    metric: str
    percentile: float | None
    value: float


def parse_budgets(text: str, name: str = "budgets") -> list[Limit]:
    """Parse budgets TOML text into limits; a malformed file raises :class:`InputError`.

    Args:
        text: the TOML text.
        name: the file name, used in error messages.

    Returns:
        The limits, in file order.

    >>> parse_budgets('[routes."/a*"]\\nqueries_p95 = 20')[0]
    Limit(pattern='/a*', key='queries_p95', metric='queries', percentile=95.0, value=20.0)
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{name}: not valid TOML ({exc})") from None
    extra = sorted(set(data) - {"routes"})
    if extra:
        raise InputError(
            f'{name}: unknown top-level key {extra[0]!r}; put limits under [routes."PATTERN"]'
        )
    routes = data.get("routes")
    if not isinstance(routes, dict) or not routes:
        raise InputError(f'{name}: no budgets; add a table such as [routes."/orders/*"]')
    limits = []
    for pattern, table in routes.items():
        if not isinstance(table, dict):
            raise InputError(f"{name}: routes.{pattern!r} must be a table of limits")
        for key, value in table.items():
            where = f"{name}: routes.{pattern!r}.{key}"
            if isinstance(value, bool) or not isinstance(value, int | float):
                raise InputError(f"{where} must be a number, not {value!r}")
            if value < 0 or math.isnan(value):
                raise InputError(f"{where} must be 0 or more, not {value!r}")
            if key == "max_nplus1":
                limits.append(Limit(pattern, key, "nplus1", None, float(value)))
                continue
            m = _KEY.match(key)
            if not m:
                raise InputError(
                    f"{where}: unknown limit; use queries_pNN, db_ms_pNN (NN = 1-100) or max_nplus1"
                )
            pct = float(m.group(2).replace("_", "."))
            limits.append(Limit(pattern, key, m.group(1), pct, float(value)))
    if not limits:
        raise InputError(f"{name}: no limits; add e.g. queries_p95 = 20 under a route pattern")
    return limits


def load_budgets(path: str | Path) -> list[Limit]:
    """Read and parse a budgets file (see :func:`parse_budgets`)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise InputError(f"{p}: cannot read the budgets file ({exc.strerror or exc})") from None
    except UnicodeDecodeError:
        raise InputError(f"{p}: the budgets file is not UTF-8 text") from None
    return parse_budgets(text, str(p))


def check(
    con: duckdb.DuckDBPyConnection,
    limits: list[Limit] | str | Path,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
) -> pd.DataFrame:
    """Check every route against the limits whose pattern it matches.

    Args:
        con: a store connection.
        limits: from :func:`load_budgets` or :func:`parse_budgets`, or the path of a budgets file.
        since, until: only requests that started in [since, until).

    Returns:
        One row per (route, limit) with :data:`COLUMNS`; ``status`` is ``over``, ``ok``, or
        ``no route`` for a pattern that matches no route (then ``route`` is empty). Over-budget rows
        come first.
    """
    if isinstance(limits, str | Path):
        limits = load_budgets(limits)
    figures = route_figures(con, limits, since=since, until=until)
    findings = _nplus1_counts(con, limits, since, until)
    rows = []
    for lim in limits:
        matched = [r for r in figures.index if fnmatchcase(r, lim.pattern)]
        if not matched:
            rows.append(("", lim.pattern, lim.key, lim.value, math.nan, 0, "no route"))
        for route in matched:
            if lim.metric == "nplus1":
                actual = float(findings.get(route, 0))
            else:
                actual = float(figures.loc[route, _col(lim.metric, lim.percentile)])
            status = "over" if actual > lim.value else "ok"
            rows.append(
                (
                    route,
                    lim.pattern,
                    lim.key,
                    lim.value,
                    actual,
                    int(figures.loc[route, "requests"]),
                    status,
                )
            )
    df = pd.DataFrame(rows, columns=COLUMNS)
    rank = df["status"].map({"over": 0, "ok": 1, "no route": 2})
    return (
        df.assign(_r=rank)
        .sort_values(["_r", "route", "pattern", "budget"], kind="stable")
        .drop(columns="_r")
        .reset_index(drop=True)
    )


def _col(metric: str, pct: float | None) -> str:
    return f"{metric}_p{pct:g}"


def route_figures(
    con: duckdb.DuckDBPyConnection,
    limits: list[Limit],
    *,
    since: datetime | None = None,
    until: datetime | None = None,
) -> pd.DataFrame:
    """Per route: requests and each percentile the limits need of queries and db ms per request."""
    wanted = sorted({(lim.metric, lim.percentile) for lim in limits if lim.percentile is not None})
    cols = "".join(
        f', quantile_cont({metric}, {pct / 100!r}) AS "{_col(metric, pct)}"'
        for metric, pct in wanted
    )
    where, params = request_filter("r", since=since, until=until)
    df = con.execute(
        f"""
        WITH per_req AS ({request_totals_sql(where)})
        SELECT route, count(*) AS requests{cols} FROM per_req GROUP BY route ORDER BY route
        """,
        params,
    ).df()
    return df.set_index("route")


def _nplus1_counts(
    con: duckdb.DuckDBPyConnection,
    limits: list[Limit],
    since: datetime | None,
    until: datetime | None,
) -> dict[str, int]:
    if not any(lim.metric == "nplus1" for lim in limits):
        return {}
    found = nplus1.find(con, since=since, until=until)
    loops = found[found["kind"] == "n_plus_one"]
    return loops.groupby("route").size().to_dict()


def raise_if_over(result: pd.DataFrame) -> None:
    """Raise :class:`attrib.errors.BudgetExceeded` (exit status 1) when any row is over budget."""
    over = result[result["status"] == "over"]
    if len(over):
        first = over.iloc[0]
        raise BudgetExceeded(
            f"{len(over)} budget(s) exceeded, e.g. {first['route']} {first['budget']} = "
            f"{first['actual']:g} > {first['limit']:g}"
        )
