"""Commands that rank: routes, templates, one route's drill-down, N+1 loops and repeats."""

from __future__ import annotations

import json

import click

import attrib
from attrib.attribute import RouteDetail, templates_as_text
from attrib.cli.options import emit, format_option, parse_time, store_option, time_range_options
from attrib.nplus1 import MIN_REPEATS
from attrib.present import render, to_records

sort_option = click.option(
    "--sort",
    "sort",
    default=None,
    metavar="COLUMN",
    help="Sort by this column: numbers largest first, text A-Z.",
)
top_option = click.option(
    "--top", type=click.IntRange(min=0), default=None, metavar="N", help="Show the first N rows."
)
reverse_option = click.option("--reverse", is_flag=True, help="Flip the sort direction.")
min_repeats_option = click.option(
    "--min-repeats",
    type=click.IntRange(min=2),
    default=MIN_REPEATS,
    show_default=True,
    metavar="K",
    help="Calls of one template in one request that count as a loop or a repeat.",
)


@click.command("routes")
@store_option
@format_option
@time_range_options
@click.option(
    "--route", "route", default=None, help="Only this route (exact, or a glob: '/huts/*')."
)
@sort_option
@top_option
@reverse_option
def routes_cmd(
    store_path: str,
    fmt: str,
    since: str | None,
    until: str | None,
    route: str | None,
    sort: str | None,
    top: int | None,
    reverse: bool,
) -> None:
    """Routes ranked by their share of all database time (requests filtered on their start).

    Example: attrib routes --store shop.duckdb --top 10
    """
    with attrib.open(store_path, read_only=True) as s:
        df = s.routes(
            since=parse_time(since, "--since"),
            until=parse_time(until, "--until"),
            route=route,
            sort=sort or "db_share",
            top=top,
            reverse=reverse,
        )
    emit(df, fmt)


@click.command("templates")
@store_option
@format_option
@time_range_options
@sort_option
@top_option
@reverse_option
def templates_cmd(
    store_path: str,
    fmt: str,
    since: str | None,
    until: str | None,
    sort: str | None,
    top: int | None,
    reverse: bool,
) -> None:
    """Query templates ranked by total time, with the routes that run them.

    Example: attrib templates --store shop.duckdb --top 20
    """
    with attrib.open(store_path, read_only=True) as s:
        df = s.templates(
            since=parse_time(since, "--since"),
            until=parse_time(until, "--until"),
            sort=sort or "total_ms",
            top=top,
            reverse=reverse,
        )
    emit(df if fmt == "json" else templates_as_text(df), fmt)


@click.command("route")
@click.argument("name")
@store_option
@format_option
@time_range_options
@min_repeats_option
@click.option(
    "--only",
    type=click.Choice(["templates", "nplus1"]),
    default=None,
    help="Show one of the two listings (needed with --format csv).",
)
def route_cmd(
    name: str,
    store_path: str,
    fmt: str,
    since: str | None,
    until: str | None,
    min_repeats: int,
    only: str | None,
) -> None:
    """One route: the templates it runs and its N+1 loops and repeats.

    Example: attrib route '/huts/{id}' --store shop.duckdb
    """
    if fmt == "csv" and only is None:
        raise click.UsageError("CSV holds one listing: add --only templates or --only nplus1")
    with attrib.open(store_path, read_only=True) as s:
        detail = s.route(
            name,
            since=parse_time(since, "--since"),
            until=parse_time(until, "--until"),
            min_repeats=min_repeats,
        )
    click.echo(_render_detail(detail, fmt, only), nl=False)


@click.command("nplus1")
@store_option
@format_option
@time_range_options
@min_repeats_option
@click.option(
    "--route", "route", default=None, help="Only this route (exact, or a glob: '/huts/*')."
)
@top_option
def nplus1_cmd(
    store_path: str,
    fmt: str,
    since: str | None,
    until: str | None,
    min_repeats: int,
    route: str | None,
    top: int | None,
) -> None:
    """N+1 loops and redundant repeats inside requests, largest estimated saving first.

    Example: attrib nplus1 --store shop.duckdb --min-repeats 5
    """
    with attrib.open(store_path, read_only=True) as s:
        df = s.nplus1(
            min_repeats=min_repeats,
            since=parse_time(since, "--since"),
            until=parse_time(until, "--until"),
            route=route,
            top=top,
        )
    emit(df, fmt)


def _render_detail(detail: RouteDetail, fmt: str, only: str | None) -> str:
    parts = {"templates": detail.templates, "nplus1": detail.nplus1}
    if only is not None:
        parts = {only: parts[only]}
    if fmt == "json":
        doc = {"route": detail.route, "requests": detail.requests}
        doc |= {k: to_records(v) for k, v in parts.items()}
        return json.dumps(doc, indent=2, ensure_ascii=False) + "\n"
    if fmt == "csv":
        return render(next(iter(parts.values())), "csv")
    titles = {"templates": "Templates", "nplus1": "N+1 loops and redundant repeats"}
    out = [f"Route {detail.route}: {detail.requests} requests\n"]
    for key, df in parts.items():
        out.append(f"\n{titles[key]}\n{render(df, 'table')}")
    return "".join(out)
