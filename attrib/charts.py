"""Charts: DataFrames aggregated in DuckDB, drawn with matplotlib (Agg), returned as Figures.

Functions here never show or save a figure themselves (see :func:`save`). Heavy grouping happens in
SQL: the largest frame a chart pulls into pandas has one row per request (the per-request figures),
never one per statement.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

import duckdb
import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from attrib.attribute import request_filter, request_totals  # noqa: E402
from attrib.errors import AttribError  # noqa: E402

if TYPE_CHECKING:
    from attrib.api import Store

# Okabe & Ito (2008), "Color Universal Design": eight colours told apart by viewers with the common
# forms of colour-vision deficiency. Order chosen so that neighbours differ in lightness too.
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#F0E442", "#000000")
_INK = "#22303c"
_GRID = "#d9dee3"
_PAPER = "#fbfaf7"

KINDS = ("fraction", "histogram", "timeline", "heatmap", "nplus1", "compare", "whatif")
HEXBIN_ABOVE = 4000


class ChartError(AttribError):
    """There is nothing to draw for the requested selection."""


def _style(ax: plt.Axes) -> None:
    ax.set_facecolor(_PAPER)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(_INK)
    ax.tick_params(colors=_INK, labelsize=9)
    ax.grid(True, color=_GRID, linewidth=0.6)
    ax.set_axisbelow(True)


def _figure(width_px: int, height_px: int, dpi: int = 100) -> tuple[Figure, plt.Axes]:
    fig = Figure(figsize=(width_px / dpi, height_px / dpi), dpi=dpi, facecolor="white")
    ax = fig.add_subplot(1, 1, 1)
    _style(ax)
    return fig, ax


def _title(fig: Figure, ax: plt.Axes, title: str, subtitle: str = "") -> None:
    ax.set_title(
        title, loc="left", fontsize=12, color=_INK, fontweight="bold", pad=18 if subtitle else 8
    )
    if subtitle:
        ax.text(0, 1.01, subtitle, transform=ax.transAxes, fontsize=9, color="#5b6770", va="bottom")


def _where(
    since: datetime | None, until: datetime | None, route: str | None
) -> tuple[str, list[Any]]:
    """``WHERE ...`` on ``requests r`` (route: exact or glob, as in the listings)."""
    where, params = request_filter("r", since=since, until=until, route=route)
    return f"WHERE {where}", params


def per_request(
    con: duckdb.DuckDBPyConnection,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
    route: str | None = None,
) -> pd.DataFrame:
    """One row per request: route, started_at, queries, db_ms, elapsed_ms, db_fraction.

    Args:
        con: a store connection.
        since, until: UTC bounds on the request start (until exclusive).
        route: only this route (exact or glob).

    Returns:
        A DataFrame aggregated by DuckDB (statements never reach pandas).
    """
    where, params = request_filter("r", since=since, until=until, route=route)
    df = request_totals(con, where, params)
    df["db_fraction"] = df["db_ms"] / df["elapsed_ms"].where(df["elapsed_ms"] != 0)
    return df


def _top_routes(df: pd.DataFrame, n: int) -> list[str]:
    totals = df.groupby("route")["db_ms"].sum().reset_index()
    totals = totals.sort_values(["db_ms", "route"], ascending=[False, True])
    return totals["route"].head(n).tolist()


def _need(df: pd.DataFrame, what: str) -> None:
    if df.empty:
        raise ChartError(f"no {what} in the store for this selection; nothing to plot")


def db_fraction(
    con: duckdb.DuckDBPyConnection,
    *,
    top: int = 5,
    since: datetime | None = None,
    until: datetime | None = None,
    route: str | None = None,
    width: int = 1000,
    height: int = 600,
) -> Figure:
    """Database fraction of each request's elapsed time against its elapsed time (log scale).

    Many requests are drawn as a hexbin density; the ``top`` routes by database time are outlined
    with their own colour and a diamond at each route's median (elapsed, fraction).
    """
    df = per_request(con, since=since, until=until, route=route)
    df = df[df["elapsed_ms"] > 0]
    _need(df, "requests with an elapsed time")
    fig, ax = _figure(width, height)
    x = df["elapsed_ms"].to_numpy()
    y = df["db_fraction"].clip(upper=1.0).fillna(0).to_numpy()
    lo, hi = np.log10(x.min()), np.log10(x.max())
    if hi - lo < 1:
        lo, hi = lo - 0.5, hi + 0.5
    if len(df) > HEXBIN_ABOVE:
        hb = ax.hexbin(
            x,
            y,
            xscale="log",
            gridsize=(60, 25),
            cmap="Greys",
            mincnt=1,
            bins="log",
            extent=(lo, hi, 0, 1),
            linewidths=0,
        )
        cbar = fig.colorbar(hb, ax=ax, pad=0.01)
        cbar.set_label("requests per cell (log scale)", fontsize=9, color=_INK)
    else:
        ax.scatter(x, y, s=8, color="#9aa5ad", alpha=0.5, linewidths=0, label="all requests")
    ax.set_xscale("log")
    for colour, name in zip(PALETTE, _top_routes(df, top), strict=False):
        sub = df[df["route"] == name]
        if len(df) <= HEXBIN_ABOVE:
            ax.scatter(
                sub["elapsed_ms"],
                sub["db_fraction"].clip(upper=1.0),
                s=10,
                color=colour,
                alpha=0.7,
                linewidths=0,
            )
        ax.scatter(
            [sub["elapsed_ms"].median()],
            [sub["db_fraction"].clip(upper=1.0).median()],
            marker="D",
            s=70,
            color=colour,
            edgecolors=_INK,
            linewidths=0.8,
            zorder=5,
            label=f"{_short(name)} (median)",
        )
    ax.set_ylim(-0.02, 1.02)
    _ms_axis(ax.xaxis)
    ax.set_xlabel("request elapsed time (log scale)", color=_INK)
    ax.set_ylabel("database share of elapsed time", color=_INK)
    ax.yaxis.set_major_formatter(matplotlib.ticker.PercentFormatter(1.0))
    ax.legend(fontsize=8, frameon=False, loc="upper left", bbox_to_anchor=(0, -0.12), ncol=3)
    _title(
        fig,
        ax,
        "Where each request spends its time",
        f"{len(df):,} requests; top {min(top, df['route'].nunique())} routes by database time",
    )
    fig.tight_layout()
    return fig


def elapsed_histogram(
    con: duckdb.DuckDBPyConnection,
    *,
    by_route: bool = False,
    top: int = 5,
    since: datetime | None = None,
    until: datetime | None = None,
    route: str | None = None,
    width: int = 1000,
    height: int = 600,
) -> Figure:
    """Elapsed-time histogram on power-of-two bins (1, 2, 4, ... ms), optionally one series per route.

    The bin of a request is ``floor(log2(elapsed_ms))``, counted in DuckDB.
    """
    where, params = _where(since, until, route)
    extra = "AND"
    counts = con.execute(
        f"""SELECT r.route, floor(log2(greatest(r.elapsed_ms, 0.001)))::INTEGER AS bin, count(*) AS n
            FROM requests r {where} {extra} r.elapsed_ms > 0 GROUP BY ALL""",
        params,
    ).df()
    _need(counts, "requests")
    fig, ax = _figure(width, height)
    bins = np.arange(counts["bin"].min(), counts["bin"].max() + 2)
    edges = np.power(2.0, bins)
    if by_route:
        totals = counts.groupby("route")["n"].sum().sort_values(ascending=False)
        names = totals.head(top).index.tolist()
        for colour, name in zip(PALETTE, names, strict=False):
            sub = (
                counts[counts["route"] == name]
                .set_index("bin")["n"]
                .reindex(bins[:-1], fill_value=0)
            )
            ax.stairs(sub.to_numpy(), edges, color=colour, linewidth=1.8, label=_short(name))
        rest = counts[~counts["route"].isin(names)]
        if not rest.empty:
            sub = rest.groupby("bin")["n"].sum().reindex(bins[:-1], fill_value=0)
            ax.stairs(
                sub.to_numpy(),
                edges,
                color="#9aa5ad",
                linewidth=1.2,
                linestyle="--",
                label="other routes",
            )
        ax.legend(fontsize=8, frameon=False)
    else:
        sub = counts.groupby("bin")["n"].sum().reindex(bins[:-1], fill_value=0)
        ax.stairs(sub.to_numpy(), edges, fill=True, color=PALETTE[0], alpha=0.85)
    ax.set_xscale("log", base=2)
    ax.xaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(_ms_label))
    ax.set_xlabel("request elapsed time (ms, power-of-two bins)", color=_INK)
    ax.set_ylabel("requests per bin", color=_INK)
    _title(fig, ax, "How long requests take", f"{int(counts['n'].sum()):,} requests")
    fig.tight_layout()
    return fig


def timeline(
    con: duckdb.DuckDBPyConnection,
    *,
    interval: str = "1 minute",
    markers: Sequence[tuple[datetime, str]] = (),
    since: datetime | None = None,
    until: datetime | None = None,
    route: str | None = None,
    width: int = 1000,
    height: int = 700,
) -> Figure:
    """Per-interval p50/p95/p99 of elapsed time and of queries per request, with event markers.

    Percentiles are DuckDB ``quantile_cont`` (linear interpolation, Hyndman and Fan type 7).
    """
    where, params = _where(since, until, route)
    try:
        per = con.execute(
            f"""
            WITH q AS (
                SELECT r.started_at, r.elapsed_ms, count(l.line) AS queries
                FROM requests r
                LEFT JOIN links l
                       ON l.req_source_id = r.source_id AND l.req_line = r.line AND l.req_seq = r.seq
                {where}
                GROUP BY r.source_id, r.line, r.seq, r.started_at, r.elapsed_ms
            )
            SELECT time_bucket(INTERVAL '{_interval(interval)}', started_at) AS t,
                   count(*) AS requests,
                   quantile_cont(elapsed_ms, [0.5, 0.95, 0.99]) AS el,
                   quantile_cont(queries, [0.5, 0.95, 0.99]) AS qs
            FROM q GROUP BY t ORDER BY t
            """,
            params,
        ).df()
    except duckdb.Error as exc:
        raise ChartError(f"bad interval {interval!r}: {str(exc).splitlines()[0]}") from None
    _need(per, "requests")
    fig = Figure(figsize=(width / 100, height / 100), dpi=100, facecolor="white")
    top_ax, bottom_ax = fig.subplots(2, 1, sharex=True)
    for ax, column, label in (
        (top_ax, "el", "elapsed time (ms)"),
        (bottom_ax, "qs", "queries per request"),
    ):
        _style(ax)
        values = np.vstack(per[column].to_numpy())
        for i, (name, colour) in enumerate(
            (("p50", PALETTE[0]), ("p95", PALETTE[1]), ("p99", PALETTE[5]))
        ):
            ax.plot(
                per["t"],
                values[:, i],
                color=colour,
                linewidth=1.4,
                label=name,
                marker="o" if len(per) < 3 else None,
            )
        ax.set_ylabel(label, color=_INK)
        for when, text in markers:
            ax.axvline(when, color=_INK, linestyle=":", linewidth=1.2)
            if ax is top_ax:
                ax.annotate(
                    text,
                    (when, 1),
                    xycoords=("data", "axes fraction"),
                    fontsize=8,
                    color=_INK,
                    rotation=90,
                    va="top",
                    ha="right",
                )
    top_ax.set_yscale("log")
    _ms_axis(top_ax.yaxis)
    top_ax.legend(fontsize=8, frameon=False, ncol=3)
    bottom_ax.set_xlabel(f"time (UTC), {interval} intervals", color=_INK)
    fig.autofmt_xdate()
    _title(
        fig,
        top_ax,
        "Latency and queries per request over time",
        f"{int(per['requests'].sum()):,} requests",
    )
    fig.tight_layout()
    return fig


def template_heatmap(
    con: duckdb.DuckDBPyConnection,
    *,
    routes: int = 12,
    templates: int = 12,
    since: datetime | None = None,
    until: datetime | None = None,
    width: int = 1100,
    height: int = 700,
) -> Figure:
    """Route by template heatmap of each cell's share of all linked database time."""
    where, params = _where(since, until, None)
    cells = con.execute(
        f"""
        SELECT r.route, s.template_id, sum(s.duration_ms) AS ms
        FROM statements s
        JOIN links l ON l.source_id = s.source_id AND l.line = s.line AND l.seq = s.seq
        JOIN requests r ON r.source_id = l.req_source_id AND r.line = l.req_line AND r.seq = l.req_seq
        {where}
        GROUP BY ALL HAVING sum(s.duration_ms) > 0
        """,
        params,
    ).df()
    _need(cells, "linked statements with durations")
    total = cells["ms"].sum()
    top_r = cells.groupby("route")["ms"].sum().nlargest(routes).index
    top_t = cells.groupby("template_id")["ms"].sum().nlargest(templates).index
    grid = (
        cells[cells["route"].isin(top_r) & cells["template_id"].isin(top_t)]
        .pivot_table(index="route", columns="template_id", values="ms", aggfunc="sum", fill_value=0)
        .reindex(index=top_r, columns=top_t, fill_value=0)
        / total
    )
    fig, ax = _figure(width, height)
    ax.grid(False)
    image = ax.imshow(grid.to_numpy(), cmap="cividis_r", aspect="auto", vmin=0)
    ax.set_yticks(range(len(grid.index)), [_short(r, 40) for r in grid.index], fontsize=8)
    ax.set_xticks(
        range(len(grid.columns)),
        [t[:8] for t in grid.columns],
        rotation=60,
        ha="right",
        fontsize=8,
        family="monospace",
    )
    for (i, j), value in np.ndenumerate(grid.to_numpy()):
        if value >= 0.005:
            ax.text(
                j,
                i,
                f"{value:.0%}",
                ha="center",
                va="center",
                fontsize=7,
                color="white" if value > grid.to_numpy().max() * 0.6 else _INK,
            )
    cbar = fig.colorbar(image, ax=ax, pad=0.01, format=matplotlib.ticker.PercentFormatter(1.0))
    cbar.set_label("share of all linked database time", fontsize=9, color=_INK)
    ax.set_xlabel("template id (first 8 hex digits)", color=_INK)
    ax.set_ylabel("route", color=_INK)
    _title(
        fig,
        ax,
        "Which routes spend database time in which templates",
        f"top {len(grid.index)} routes x top {len(grid.columns)} templates",
    )
    fig.tight_layout()
    return fig


def nplus1_evidence(
    con: duckdb.DuckDBPyConnection,
    *,
    route: str,
    parent_template_id: str,
    child_template_id: str,
    width: int = 900,
    height: int = 600,
) -> Figure:
    """Repeats of a loop's child template per request against the rows its parent returned.

    Points on the diagonal are requests where the loop ran once per parent row.
    """
    df = con.execute(
        """
        WITH req AS (
            SELECT l.req_source_id, l.req_line, l.req_seq,
                   count(*) FILTER (WHERE s.template_id = ?) AS repeats,
                   max(s.rows) FILTER (WHERE s.template_id = ?) AS parent_rows
            FROM statements s
            JOIN links l ON l.source_id = s.source_id AND l.line = s.line AND l.seq = s.seq
            JOIN requests r ON r.source_id = l.req_source_id AND r.line = l.req_line
                           AND r.seq = l.req_seq
            WHERE r.route = ?
            GROUP BY ALL
        )
        SELECT repeats, parent_rows, count(*) AS requests FROM req
        WHERE repeats > 0 GROUP BY ALL
        """,
        [child_template_id, parent_template_id, route],
    ).df()
    _need(df, f"requests of {route} running template {child_template_id}")
    fig, ax = _figure(width, height)
    known = df.dropna(subset=["parent_rows"])
    if known.empty:
        ax.bar(df["repeats"], df["requests"], color=PALETTE[0], width=0.8)
        ax.set_xlabel("repeats of the child template per request", color=_INK)
        ax.set_ylabel("requests", color=_INK)
        subtitle = "the statement log has no row counts: repeats only"
    else:
        sizes = 20 + 180 * known["requests"] / known["requests"].max()
        ax.scatter(
            known["parent_rows"],
            known["repeats"],
            s=sizes,
            color=PALETTE[0],
            alpha=0.75,
            edgecolors=_INK,
            linewidths=0.5,
        )
        top = float(max(known["parent_rows"].max(), known["repeats"].max())) + 1
        ax.plot(
            [0, top],
            [0, top],
            color=PALETTE[5],
            linestyle="--",
            linewidth=1,
            label="one query per parent row",
        )
        ax.legend(fontsize=8, frameon=False)
        ax.set_xlabel("rows returned by the parent template", color=_INK)
        ax.set_ylabel("repeats of the child template per request", color=_INK)
        subtitle = "marker area ~ number of requests"
    _title(
        fig,
        ax,
        f"Loop evidence on {_short(route, 50)}",
        f"child {child_template_id[:8]}, parent {parent_template_id[:8]}; {subtitle}",
    )
    fig.tight_layout()
    return fig


def ecdf_pair(
    before: np.ndarray,
    after: np.ndarray,
    *,
    title: str,
    xlabel: str,
    labels: tuple[str, str] = ("before", "after"),
    log: bool = False,
    width: int = 900,
    height: int = 560,
) -> Figure:
    """Two empirical CDFs on one axis (queries per request before/after, or elapsed now/projected)."""
    if len(before) == 0 and len(after) == 0:
        raise ChartError("both samples are empty; nothing to plot")
    fig, ax = _figure(width, height)
    for values, label, colour, style in (
        (before, labels[0], PALETTE[0], "-"),
        (after, labels[1], PALETTE[1], "--"),
    ):
        if len(values) == 0:
            continue
        xs = np.sort(np.asarray(values, dtype=float))
        ys = np.arange(1, len(xs) + 1) / len(xs)
        ax.step(
            xs,
            ys,
            where="post",
            color=colour,
            linestyle=style,
            linewidth=1.8,
            label=f"{label} (n={len(xs):,})",
        )
    if log:
        ax.set_xscale("log")
    ax.set_ylim(0, 1.02)
    ax.yaxis.set_major_formatter(matplotlib.ticker.PercentFormatter(1.0))
    ax.set_xlabel(xlabel, color=_INK)
    ax.set_ylabel("share of requests at or below", color=_INK)
    ax.legend(fontsize=8, frameon=False, loc="lower right")
    _title(fig, ax, title)
    fig.tight_layout()
    return fig


def draw(
    store: Store,
    kind: str,
    *,
    since: datetime | None = None,
    until: datetime | None = None,
    route: str | None = None,
    top: int = 5,
    by_route: bool = False,
    interval: str = "1 minute",
    markers: Sequence[tuple[datetime, str]] = (),
    child: str | None = None,
    before: str | None = None,
    after: str | None = None,
    tz: str | None = None,
    scenario: Sequence[str] | None = None,
    width: int | None = None,
    height: int | None = None,
) -> Figure:
    """Draw chart ``kind`` (one of :data:`KINDS`) for a store; the options each kind uses are named
    after the functions above. ``nplus1`` draws the top finding, or the one whose repeated template
    is ``child``."""
    con = store.con
    size = {k: v for k, v in (("width", width), ("height", height)) if v}
    window = {"since": since, "until": until}
    if kind == "fraction":
        return db_fraction(con, top=top, route=route, **window, **size)
    if kind == "histogram":
        return elapsed_histogram(con, by_route=by_route, top=top, route=route, **window, **size)
    if kind == "timeline":
        return timeline(con, interval=interval, markers=markers, route=route, **window, **size)
    if kind == "heatmap":
        return template_heatmap(con, routes=max(top, 12), templates=max(top, 12), **window, **size)
    if kind == "nplus1":
        loops = store.nplus1(route=route, **window)
        if child is not None:
            loops = loops[loops["child_template_id"].str.startswith(child)]
        loops = loops[loops["parent_template_id"].notna()]
        if loops.empty:
            raise ChartError(
                "no N+1 finding with a parent template for this selection; nothing to plot"
            )
        row = loops.iloc[0]
        return nplus1_evidence(
            con,
            route=row["route"],
            parent_template_id=row["parent_template_id"],
            child_template_id=row["child_template_id"],
            **size,
        )
    if kind == "compare":
        return compare_queries(con, before=before, after=after, tz=tz or "UTC", route=route, **size)
    if kind == "whatif":
        return whatif_elapsed(store, scenario=scenario or [], route=route, **window, **size)
    raise ChartError(f"unknown chart kind {kind!r}; use one of {', '.join(KINDS)}")


def compare_queries(
    con: duckdb.DuckDBPyConnection,
    *,
    before: str | None,
    after: str | None,
    tz: str = "UTC",
    route: str | None = None,
    other: duckdb.DuckDBPyConnection | None = None,
    width: int = 900,
    height: int = 560,
) -> Figure:
    """Empirical CDFs of queries per request in a 'before' and an 'after' window (or store)."""
    from attrib.compare import request_totals
    from attrib.windows import resolve

    if other is None and (before is None or after is None):
        raise ChartError("the compare chart needs --before and --after windows (START/END)")
    w_before, w_after = resolve(before, after, tz=tz)
    sides = [request_totals(con, w_before), request_totals(other or con, w_after)]
    if route is not None:
        sides = [df[df["route"] == route] for df in sides]
    where = f" on {_short(route, 40)}" if route else ""
    return ecdf_pair(
        sides[0]["queries"].to_numpy(),
        sides[1]["queries"].to_numpy(),
        title=f"Queries per request before and after{where}",
        xlabel="queries per request",
        width=width,
        height=height,
    )


def whatif_elapsed(
    store: Store,
    *,
    scenario: Sequence[str],
    route: str | None = None,
    since: datetime | None = None,
    until: datetime | None = None,
    width: int = 900,
    height: int = 560,
) -> Figure:
    """Empirical CDFs of request elapsed time now and projected under a what-if scenario.

    ``scenario`` items are ``OP=TEMPLATE_ID[=FACTOR]`` with OP one of faster, batch, cache, remove.
    """
    from attrib import whatif

    changes: dict[str, list[str]] = {"faster": [], "batch": [], "cache": [], "remove": []}
    for item in scenario:
        op, _, rest = item.partition("=")
        if op not in changes or not rest:
            raise ChartError(
                f"bad --scenario {item!r}; use e.g. batch=3f2a9c1e or faster=3f2a9c1e=3x"
            )
        changes[op].append(rest)
    if not any(changes.values()):
        raise ChartError("the whatif chart needs at least one --scenario, e.g. batch=TEMPLATE_ID")
    per = whatif.per_request(store.con, whatif.Scenario.parse(**changes), since=since, until=until)
    if route is not None:
        per = per[per["route"] == route]
    _need(per, "requests affected by the scenario")
    where = f" on {_short(route, 40)}" if route else " (affected requests)"
    return ecdf_pair(
        per["elapsed_ms_before"].to_numpy(),
        per["elapsed_ms_after"].to_numpy(),
        title=f"Elapsed time now and projected{where}",
        xlabel="request elapsed time (ms, log scale)",
        labels=("now", "projected"),
        log=True,
        width=width,
        height=height,
    )


def save(fig: Figure, path: str | Path, *, dpi: int = 100) -> Path:
    """Write ``fig`` as PNG or SVG, chosen by the file suffix."""
    target = Path(path)
    suffix = target.suffix.lower()
    if suffix not in (".png", ".svg"):
        raise ChartError(f"{target}: charts are written as .png or .svg")
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": "attrib"}):
        fig.savefig(
            target,
            format=suffix[1:],
            dpi=dpi,
            facecolor=fig.get_facecolor(),
            metadata={"Date": None} if suffix == ".svg" else None,
        )
    return target


def _interval(text: str) -> str:
    cleaned = text.strip().lower()
    if not cleaned or any(ch not in "0123456789 abcdefghijklmnopqrstuvwxyz" for ch in cleaned):
        raise ChartError(f"bad interval {text!r}; use e.g. '1 minute', '5 minutes', '1 hour'")
    return cleaned


def _ms_axis(axis: matplotlib.axis.Axis) -> None:
    """Log-scaled milliseconds with 1-2-5 ticks labelled '20 ms', '1 s' (no powers of ten)."""
    axis.set_major_locator(matplotlib.ticker.LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(matplotlib.ticker.FuncFormatter(_ms_label))
    axis.set_minor_formatter(matplotlib.ticker.NullFormatter())


def _ms_label(value: float, _pos: int) -> str:
    if value >= 1000:
        return f"{value / 1000:g} s"
    return f"{value:g} ms" if value >= 1 else f"{value:.2g} ms"


def _short(text: str, limit: int = 32) -> str:
    """Shorten a string from the logs and stop matplotlib reading ``$...$`` in it as math."""
    text = text if len(text) <= limit else text[: limit - 1] + "…"
    return text.replace("$", r"\$")
