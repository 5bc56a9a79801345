"""A self-contained HTML report: findings in plain words, rankings, charts and methods in one file.

:func:`render_html` is pure (data in, a string out); :func:`collect` gathers the data from a store.
The page has inline CSS and PNG images as data URIs, no scripts and no network references, so it opens
offline in any browser. Every string that comes from the logs is HTML-escaped (OWASP Cross Site
Scripting Prevention Cheat Sheet, "Output Encoding for HTML Contexts"), and no statement text beyond
literal-free templates is ever included.
"""

from __future__ import annotations

import base64
import html
import io
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

import pandas as pd

from attrib import charts
from attrib.present import to_records

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from attrib.api import Store


@dataclass
class ReportData:
    """Everything the report shows. Frames may be empty; optional sections may be None."""

    title: str
    generated_at: str
    sources: pd.DataFrame
    coverage: pd.DataFrame
    time_range: tuple[str, str] | None
    findings: list[str]
    routes: pd.DataFrame
    templates: pd.DataFrame
    nplus1: pd.DataFrame
    figures: dict[str, Figure] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    whatif: pd.DataFrame | None = None
    compare: pd.DataFrame | None = None


# Columns shown in the report's tables (a readable subset; the CLI's JSON has them all).
ROUTE_COLUMNS = {
    "route": "route",
    "requests": "requests",
    "queries_per_request_p50": "queries/req p50",
    "queries_per_request_p95": "queries/req p95",
    "db_share": "share of db time",
    "db_fraction_p50": "db part of elapsed p50",
    "elapsed_ms_p50": "elapsed p50 ms",
    "elapsed_ms_p95": "elapsed p95 ms",
    "elapsed_ms_p99": "elapsed p99 ms",
}
TEMPLATE_COLUMNS = {
    "template_id": "id",
    "template": "template",
    "calls": "calls",
    "share": "share of db time",
    "p50_ms": "p50 ms",
    "p95_ms": "p95 ms",
    "routes": "routes (share of its time)",
}
NPLUS1_COLUMNS = {
    "route": "route",
    "kind": "kind",
    "child_template_id": "repeated template",
    "parent_template_id": "after template",
    "requests": "requests",
    "repeats_mean": "repeats mean",
    "repeats_max": "repeats max",
    "saving_ms_estimate": "estimated saving ms",
}
_PERCENT = {"db_share", "db_fraction_p50", "share"}


def render_html(data: ReportData) -> str:
    """Render the report as one HTML document (a string)."""
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        # Defence in depth beside escaping: the page may load nothing and run nothing.
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        "img-src data:; style-src 'unsafe-inline'\">",
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(data.title)}</title>",
        f"<style>{_CSS}</style></head><body><main>",
        f"<header><h1>{_e(data.title)}</h1>",
        f'<p class="meta">Generated {_e(data.generated_at)} by attrib.</p></header>',
        _analysed(data),
        _section("First things to look at", _findings(data.findings), "findings"),
    ]
    if data.figures:
        parts.append(_section("Pictures", _figures(data.figures), "charts"))
    parts.append(
        _section("Routes by share of database time", _table(data.routes, ROUTE_COLUMNS), "routes")
    )
    parts.append(
        _section(
            "Query templates by total time", _table(data.templates, TEMPLATE_COLUMNS), "templates"
        )
    )
    parts.append(
        _section("Loops and repeats inside requests", _table(data.nplus1, NPLUS1_COLUMNS), "nplus1")
    )
    if data.whatif is not None:
        parts.append(_section("What-if projection", _table(data.whatif, None), "whatif"))
    if data.compare is not None:
        parts.append(_section("Before and after", _table(data.compare, None), "compare"))
    parts.append(_section("How these numbers are made", _METHODS, "methods"))
    parts.append("</main></body></html>")
    return "\n".join(parts)


def collect(
    store: Store,
    *,
    top: int = 20,
    whatif: pd.DataFrame | None = None,
    compare: pd.DataFrame | None = None,
    progress: Callable[[str], None] | None = None,
) -> ReportData:
    """Gather the report's data from a store.

    Args:
        store: an open :class:`attrib.api.Store`.
        top: rows per ranking table.
        whatif, compare: optional results of :meth:`Store.whatif` / :meth:`Store.compare`.
        progress: called with a short message before each slow step.
    """
    step = progress or (lambda _msg: None)
    con = store.con
    step("rankings")
    routes = store.routes()
    templates = store.templates()
    loops = store.nplus1()
    cov = store.coverage()
    sources = con.execute(
        "SELECT path, format, lines_read, requests, statements, lines_skipped, lines_rejected "
        "FROM sources ORDER BY source_id"
    ).df()
    first, last = con.execute("SELECT min(started_at), max(started_at) FROM requests").fetchone()
    figures: dict[str, Figure] = {}
    notes: list[str] = list(getattr(cov, "warnings", []))
    step("charts")
    for name, draw in (
        ("Database share of each request's time", lambda: charts.db_fraction(con)),
        ("Elapsed time, power-of-two bins", lambda: charts.elapsed_histogram(con, by_route=True)),
        ("Percentiles over time", lambda: charts.timeline(con, interval=_interval(first, last))),
        ("Routes and templates", lambda: charts.template_heatmap(con)),
    ):
        try:
            figures[name] = draw()
        except charts.ChartError as exc:
            notes.append(f"{name}: {exc}")
    if not loops.empty:
        row = loops.iloc[0]
        if row.get("parent_template_id"):
            try:
                figures[f"Loop evidence on {row['route']}"] = charts.nplus1_evidence(
                    con,
                    route=row["route"],
                    parent_template_id=row["parent_template_id"],
                    child_template_id=row["child_template_id"],
                )
            except charts.ChartError as exc:
                notes.append(str(exc))
    return ReportData(
        title=f"Database time by route: {store.path}",
        generated_at=datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC"),
        sources=sources,
        coverage=getattr(cov, "summary", pd.DataFrame()),
        time_range=(str(first), str(last)) if first is not None else None,
        findings=findings(routes, templates, loops),
        routes=routes.head(top),
        templates=templates.head(top),
        nplus1=loops.head(top),
        figures=figures,
        notes=notes,
        whatif=whatif,
        compare=compare,
    )


def findings(
    routes: pd.DataFrame, templates: pd.DataFrame, loops: pd.DataFrame, n: int = 5
) -> list[str]:
    """Plain-language sentences about the biggest items, most valuable first.

    >>> loops = pd.DataFrame([{"route": "GET /huts/{id}/bunks", "kind": "n_plus_one",
    ...     "child_template_id": "3f2a9c1e0b7d4a55", "parent_template_id": "9c1e00aa11bb22cc",
    ...     "requests": 40, "repeats_mean": 12.5, "saving_ms_estimate": 800.0}])
    >>> findings(pd.DataFrame(), pd.DataFrame(), loops)[0]
    'GET /huts/{id}/bunks runs template 3f2a9c1e 12.5 times per request, in a loop after template 9c1e00aa; batching it would save about 20.0 ms per request (800 ms over 40 requests).'
    """
    out: list[str] = []
    for row in to_records(loops.head(n)) if not loops.empty else []:
        per_request = (row.get("saving_ms_estimate") or 0) / max(row.get("requests") or 1, 1)
        if row.get("kind") == "redundant":
            out.append(
                f"{row['route']} repeats template {row['child_template_id'][:8]} with the same "
                f"parameters {row['repeats_mean']:.1f} times per request; caching it would save about "
                f"{per_request:.1f} ms per request ({row['saving_ms_estimate']:.0f} ms over "
                f"{row['requests']} requests)."
            )
        else:
            parent = row.get("parent_template_id")
            after = f", in a loop after template {parent[:8]}" if parent else ""
            out.append(
                f"{row['route']} runs template {row['child_template_id'][:8]} "
                f"{row['repeats_mean']:.1f} times per request{after}; batching it would save about "
                f"{per_request:.1f} ms per request ({row['saving_ms_estimate']:.0f} ms over "
                f"{row['requests']} requests)."
            )
    if not routes.empty:
        top = to_records(routes.head(1))[0]
        if top.get("db_share") is not None:
            out.append(
                f"{top['route']} takes {top['db_share']:.0%} of all database time; at the median its "
                f"requests spend {(top.get('db_fraction_p50') or 0):.0%} of their elapsed time in the "
                f"database and run {top.get('queries_per_request_p50') or 0:g} queries."
            )
    if not templates.empty:
        top = to_records(templates.head(1))[0]
        if top.get("share") is not None:
            out.append(
                f"Template {top['template_id'][:8]} accounts for {top['share']:.0%} of all database "
                f"time over {top['calls']:,} calls (p95 {top.get('p95_ms') or 0:.2f} ms per call)."
            )
    return out


def _interval(first: Any, last: Any) -> str:
    if first is None or last is None:
        return "1 minute"
    span = (pd.Timestamp(last) - pd.Timestamp(first)).total_seconds()
    for seconds, text in ((3 * 3600, "1 minute"), (24 * 3600, "10 minutes"), (7 * 86400, "1 hour")):
        if span <= seconds:
            return text
    return "1 day"


def _e(value: Any) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def _section(title: str, body: str, anchor: str) -> str:
    return f'<section id="{anchor}"><h2>{_e(title)}</h2>{body}</section>'


def _analysed(data: ReportData) -> str:
    rows = []
    if data.time_range:
        rows.append(
            f"<p>Requests from <b>{_e(data.time_range[0])}</b> to <b>{_e(data.time_range[1])}</b> (UTC).</p>"
        )
    rows.append(_table(data.sources, None))
    if not data.coverage.empty:
        rows.append("<h3>How completely statements were linked to requests</h3>")
        rows.append(_table(data.coverage, None))
    for note in data.notes:
        rows.append(f'<p class="note">{_e(note)}</p>')
    return _section("What was analysed", "".join(rows), "analysed")


def _findings(items: list[str]) -> str:
    if not items:
        return "<p>No findings: the store has no linked statements yet.</p>"
    return '<ol class="findings">' + "".join(f"<li>{_e(item)}</li>" for item in items) + "</ol>"


def _figures(figures: dict[str, Figure]) -> str:
    out = []
    for caption, fig in figures.items():
        buffer = io.BytesIO()
        fig.savefig(buffer, format="png", dpi=100, facecolor=fig.get_facecolor())
        data = base64.b64encode(buffer.getvalue()).decode("ascii")
        out.append(
            f'<figure><img alt="{_e(caption)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{_e(caption)}</figcaption></figure>"
        )
    return "".join(out)


def _table(df: pd.DataFrame | None, columns: dict[str, str] | None) -> str:
    if df is None or df.empty:
        return '<p class="empty">Nothing to show.</p>'
    if columns is not None:
        keys = [c for c in columns if c in df.columns]
        labels = [columns[c] for c in keys]
        df = df[keys]
    else:
        keys = labels = [str(c) for c in df.columns]
    head = "".join(f"<th>{_e(label)}</th>" for label in labels)
    body = []
    for record in to_records(df):
        cells = []
        for key in keys:
            value = record[key]
            numeric = isinstance(value, int | float) and not isinstance(value, bool)
            cells.append(f'<td class="{"num" if numeric else "txt"}">{_e(_fmt(key, value))}</td>')
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (
        f'<div class="scroll"><table><thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table></div>"
    )


def _fmt(key: str, value: Any) -> str:
    if value is None:
        return ""
    if key in _PERCENT and isinstance(value, float):
        return f"{value:.1%}"
    if isinstance(value, float):
        return f"{value:,.2f}"
    if isinstance(value, int) and not isinstance(value, bool):
        return f"{value:,}"
    if isinstance(value, list):
        return ", ".join(
            f"{v.get('route')} {v.get('share', 0):.0%}" if isinstance(v, dict) else str(v)
            for v in value
        )
    return str(value)


_CSS = """
:root{--ink:#22303c;--muted:#5b6770;--paper:#fbfaf7;--rule:#d9dee3;--accent:#0072B2;--warm:#E69F00}
*{box-sizing:border-box}
body{margin:0;background:#eef1f3;color:var(--ink);font:15px/1.5 system-ui,-apple-system,"Segoe UI",sans-serif}
main{max-width:1180px;margin:0 auto;padding:24px 28px 60px;background:var(--paper)}
header{border-bottom:4px solid var(--accent);margin-bottom:8px}
h1{font-size:26px;margin:8px 0 4px;word-break:break-all}
h2{font-size:19px;margin:36px 0 10px;padding-left:10px;border-left:6px solid var(--warm)}
h3{font-size:15px;margin:18px 0 6px}
.meta,.note,.empty,figcaption{color:var(--muted);font-size:13px}
.note{border-left:3px solid var(--warm);padding-left:8px}
ol.findings li{margin:6px 0;padding:6px 10px;background:#fff;border:1px solid var(--rule);border-radius:4px}
.scroll{overflow-x:auto}
table{border-collapse:collapse;font-size:13px;margin:6px 0;min-width:60%}
th{background:var(--ink);color:#fff;text-align:left;padding:5px 8px;font-weight:600;white-space:nowrap}
td{padding:4px 8px;border-bottom:1px solid var(--rule);vertical-align:top}
td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
td.txt{font-family:ui-monospace,Menlo,Consolas,monospace;font-size:12px;max-width:520px;overflow-wrap:anywhere}
tbody tr:nth-child(even){background:#f3f5f6}
figure{margin:18px 0;background:#fff;border:1px solid var(--rule);padding:8px}
figure img{max-width:100%;height:auto;display:block}
dl dt{font-weight:600;margin-top:10px}
dl dd{margin:2px 0 0 18px}
"""

_METHODS = """
<dl>
<dt>Linking</dt>
<dd>A statement belongs to the request whose id it carries in a trailing sqlcommenter comment
(opentelemetry-sqlcommenter specification), in a log field, or whose OpenTelemetry trace it is part of.
Unlinked statements count in template totals under "(no request)".</dd>
<dt>Templates</dt>
<dd>Statements that differ only in literal values, bind parameters, IN-list length, VALUES row count,
comments, whitespace, keyword case or folded identifier case share one template. Templates carry no
literal values.</dd>
<dt>Percentiles</dt>
<dd>Every percentile is linear interpolation between order statistics (Hyndman and Fan 1996,
definition 7; numpy's default and DuckDB's quantile_cont).</dd>
<dt>Database time and share</dt>
<dd>A request's database time is the sum of the durations of its statements; its database part of
elapsed is that sum divided by its elapsed time (above 100% means statements overlapped or clocks
differ). A route's share is its database time divided by all database time in the store.</dd>
<dt>Loops and repeats</dt>
<dd>A template run at least three times in one request is a loop (n_plus_one) when the calls carry
different parameters, and a redundant repeat when they carry the same ones (compared by a salted hash;
the values are never stored). The loop's parent is the template that most often runs immediately
before its first call.</dd>
<dt>Estimated saving</dt>
<dd>Batching a loop keeps one call: it saves (repeats - 1) times the template's fixed cost per call (the
intercept of a Theil-Sen fit of duration against rows, or the median duration when rows are unknown)
plus (repeats - 1) times the median gap between consecutive calls (the application's round trip). A
cache saves the repeats' full durations and gaps. Statements are assumed to run one after another on
the request's critical path; parallel queries, lock waits and cache effects can make real savings
smaller or larger.</dd>
</dl>
"""
