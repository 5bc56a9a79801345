"""Commands that draw: ``attrib chart`` and ``attrib report``."""

from __future__ import annotations

import json
from pathlib import Path

import click
import pandas as pd

import attrib
from attrib.charts import KINDS, save
from attrib.cli.options import parse_time, store_option, time_range_options


def _marker(value: str) -> tuple:
    when, _, label = value.partition("=")
    parsed = parse_time(when, "--marker")
    return parsed, label or when


@click.command("chart")
@click.argument("kind", type=click.Choice(KINDS))
@store_option
@click.option(
    "--out",
    "out",
    required=True,
    type=click.Path(dir_okay=False),
    help="Output file: .png or .svg.",
)
@time_range_options
@click.option("--route", default=None, help="Only this route.")
@click.option(
    "--top",
    type=click.IntRange(min=1),
    default=5,
    show_default=True,
    help="Routes drawn in their own colour.",
)
@click.option("--by-route", is_flag=True, help="histogram: one series per top route.")
@click.option(
    "--interval",
    default="1 minute",
    show_default=True,
    help="timeline: bucket width, e.g. '5 minutes'.",
)
@click.option(
    "--marker",
    "markers",
    multiple=True,
    metavar="TIME[=LABEL]",
    help="timeline: a vertical line, e.g. a deploy (repeatable).",
)
@click.option(
    "--child",
    default=None,
    metavar="TEMPLATE_ID",
    help="nplus1: the repeated template (default: the top finding).",
)
@click.option("--before", default=None, help="compare: window before (see attrib compare).")
@click.option("--after", default=None, help="compare: window after.")
@click.option("--tz", default=None, help="compare: IANA zone of the windows.")
@click.option(
    "--scenario",
    "scenario",
    multiple=True,
    metavar="OP=TEMPLATE_ID[=FACTOR]",
    help="whatif: e.g. batch=3f2a..., faster=3f2a...=3x (repeatable).",
)
@click.option("--width", type=click.IntRange(min=200, max=4000), default=None, help="Pixels.")
@click.option("--height", type=click.IntRange(min=150, max=4000), default=None, help="Pixels.")
def chart_cmd(
    store_path: str,
    kind: str,
    out: str,
    since: str | None,
    until: str | None,
    route: str | None,
    top: int,
    by_route: bool,
    interval: str,
    markers: tuple[str, ...],
    child: str | None,
    before: str | None,
    after: str | None,
    tz: str | None,
    scenario: tuple[str, ...],
    width: int | None,
    height: int | None,
) -> None:
    """Draw one chart of the store into a PNG or SVG file.

    Kinds: fraction (database share of each request against its elapsed time), histogram (elapsed
    time on power-of-two bins), timeline (p50/p95/p99 per interval), heatmap (route x template share
    of database time), nplus1 (loop repeats against the parent's rows), compare (queries per request
    before/after, needs --before/--after), whatif (elapsed now and projected, needs --scenario).

    Example: attrib chart fraction --store shop.duckdb --out fraction.png
    """
    size = {k: v for k, v in (("width", width), ("height", height)) if v}
    with attrib.open(store_path, read_only=True) as s:
        fig = s.chart(
            kind,
            since=parse_time(since, "--since"),
            until=parse_time(until, "--until"),
            route=route,
            top=top,
            by_route=by_route,
            interval=interval,
            markers=[_marker(m) for m in markers],
            child=child,
            before=before,
            after=after,
            tz=tz,
            scenario=list(scenario),
            **size,
        )
    path = save(fig, out)
    click.echo(f"wrote {path}", err=True)


@click.command("report")
@store_option
@click.option(
    "--out", "out", required=True, type=click.Path(dir_okay=False), help="The HTML file to write."
)
@click.option(
    "--top",
    type=click.IntRange(min=1),
    default=20,
    show_default=True,
    help="Rows per ranking table.",
)
@click.option(
    "--whatif-json",
    type=click.Path(exists=True, dir_okay=False),
    default=None,
    help="Add a what-if section from `attrib whatif --format json` output.",
)
@click.option(
    "--compare-json",
    type=click.Path(exists=True, dir_okay=False),
    default=None,
    help="Add a before/after section from `attrib compare --format json` output.",
)
def report_cmd(
    store_path: str, out: str, top: int, whatif_json: str | None, compare_json: str | None
) -> None:
    """Write a self-contained HTML report (no scripts, no network, no literal values).

    Example: attrib report --store shop.duckdb --out report.html
    """
    extra = {
        "whatif": _json_frame(whatif_json, "--whatif-json"),
        "compare": _json_frame(compare_json, "--compare-json"),
    }
    with attrib.open(store_path, read_only=True) as s:
        page = s.report_html(
            top=top, progress=lambda m: click.echo(f"report: {m}", err=True), **extra
        )
    Path(out).write_text(page, encoding="utf-8")
    click.echo(f"wrote {out} ({len(page) / 1024:.0f} KB)", err=True)


def _json_frame(path: str | None, option: str) -> pd.DataFrame | None:
    if path is None:
        return None
    try:
        rows = json.loads(Path(path).read_text(encoding="utf-8"))
        return pd.DataFrame(rows)
    except (ValueError, TypeError) as exc:
        raise click.BadParameter(
            f"{path}: not the JSON list that --format json writes ({exc})", param_hint=option
        ) from None
