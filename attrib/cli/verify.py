"""Commands that estimate and verify fixes: whatif, compare, check."""

from __future__ import annotations

import click

import attrib
from attrib import budgets, compare, windows
from attrib.cli.options import emit, format_option, parse_time, store_option, time_range_options
from attrib.whatif import TABLE_COLUMNS, Scenario

resamples_option = click.option(
    "--resamples",
    type=click.IntRange(min=1),
    default=1000,
    show_default=True,
    metavar="N",
    help="Bootstrap resamples for the 95% confidence intervals.",
)
seed_option = click.option(
    "--seed", type=int, default=0, show_default=True, help="Seed of the bootstrap."
)


@click.command("whatif")
@store_option
@format_option
@time_range_options
@click.option(
    "--faster",
    multiple=True,
    metavar="TEMPLATE_ID=FACTOR",
    help="Make a template faster: 3x (a third of the time) or 40% (40% less time). Repeatable.",
)
@click.option(
    "--batch",
    multiple=True,
    metavar="TEMPLATE_ID",
    help="Batch the N+1 loop whose repeated child is this template. Repeatable.",
)
@click.option(
    "--cache",
    multiple=True,
    metavar="TEMPLATE_ID",
    help="Serve repeats of this template with the same parameters from a cache. Repeatable.",
)
@click.option(
    "--remove", multiple=True, metavar="TEMPLATE_ID", help="Drop this template. Repeatable."
)
@resamples_option
@seed_option
def whatif_cmd(
    store_path: str,
    fmt: str,
    since: str | None,
    until: str | None,
    faster: tuple[str, ...],
    batch: tuple[str, ...],
    cache: tuple[str, ...],
    remove: tuple[str, ...],
    resamples: int,
    seed: int,
) -> None:
    """Estimate what changing query templates would save, per affected route and overall.

    Scenarios combine per request in this order: remove, cache, batch, faster. Elapsed times assume
    a request's statements run one after another (docs/whatif-compare.md).

    Example: attrib whatif --store shop.duckdb --batch 3fa1c2 --faster 9b0e77=2x
    """
    scenario = Scenario.parse(faster=faster, batch=batch, cache=cache, remove=remove)
    with attrib.open(store_path, read_only=True) as s:
        df = s.whatif(
            scenario,
            since=parse_time(since, "--since"),
            until=parse_time(until, "--until"),
            resamples=resamples,
            seed=seed,
        )
    _emit(df, fmt, TABLE_COLUMNS)
    if (df["requests"] > df["bootstrap_requests"]).any():
        click.echo(
            "note: the bootstrap of routes above its cap ran on a deterministic subsample "
            "(bootstrap_requests in --format csv/json)",
            err=True,
        )


def _emit(df, fmt: str, table_columns: list[str]) -> None:
    """A compact set of columns for the aligned table; every column in csv and json."""
    if fmt == "table":
        emit(df[table_columns], fmt)
        click.echo("(--format csv or json for every column)", err=True)
    else:
        emit(df, fmt)


@click.command("compare")
@click.option(
    "--store", "store_path", type=click.Path(dir_okay=False), help="One store: compare two windows."
)
@click.option(
    "--before-store", type=click.Path(dir_okay=False), help="The store of the 'before' side."
)
@click.option(
    "--after-store", type=click.Path(dir_okay=False), help="The store of the 'after' side."
)
@click.option(
    "--before", metavar="START/END", help="'Before' window, e.g. 2026-11-23T09:00/2026-11-23T12:00."
)
@click.option("--after", metavar="START/END", help="'After' window, in the same form.")
@click.option(
    "--tz", default="UTC", show_default=True, help="IANA time zone of the windows and dates."
)
@click.option("--hours", metavar="HH:MM-HH:MM", help="Compare these hours of the day on two dates.")
@click.option("--before-date", metavar="YYYY-MM-DD", help="With --hours: the 'before' date.")
@click.option("--after-date", metavar="YYYY-MM-DD", help="With --hours: the 'after' date.")
@click.option(
    "--alpha",
    type=click.FloatRange(0, 1, min_open=True, max_open=True),
    default=0.05,
    show_default=True,
    help="Significance level for the verdicts, after the correction for many routes.",
)
@click.option(
    "--correction",
    type=click.Choice(compare.CORRECTIONS),
    default="holm",
    show_default=True,
    help="holm: family-wise error rate; bh: Benjamini-Hochberg false discovery rate.",
)
@click.option(
    "--by",
    type=click.Choice(["route", "template"]),
    default="route",
    show_default=True,
    help="One row per route, or per route and template (calls per request, appeared/disappeared).",
)
@resamples_option
@seed_option
@format_option
def compare_cmd(
    store_path: str | None,
    before_store: str | None,
    after_store: str | None,
    before: str | None,
    after: str | None,
    tz: str,
    hours: str | None,
    before_date: str | None,
    after_date: str | None,
    alpha: float,
    correction: str,
    by: str,
    resamples: int,
    seed: int,
    fmt: str,
) -> None:
    """Compare two windows (or two stores) route by route: queries, database time, elapsed time.

    Verdicts (fewer/unchanged/more queries, faster/unchanged/slower) come from two-sided
    Mann-Whitney tests corrected for the number of routes. Warnings go to stderr.

    Example: attrib compare --store shop.duckdb --tz Europe/Zurich --hours 09:00-12:00 --before-date 2026-11-23 --after-date 2026-11-30
    """
    if (store_path is None) == (before_store is None and after_store is None):
        raise click.UsageError("give either --store, or --before-store and --after-store")
    if store_path is None and (before_store is None or after_store is None):
        raise click.UsageError("--before-store and --after-store go together")
    w_before, w_after = windows.resolve(
        before, after, tz=tz, hours=hours, before_date=before_date, after_date=after_date
    )
    settings = dict(alpha=alpha, correction=correction, resamples=resamples, seed=seed, tz=tz)
    with attrib.open(store_path or before_store, read_only=True) as s:
        if store_path is not None:
            result = s.compare(w_before, w_after, **settings)
        else:
            with attrib.open(after_store, read_only=True) as other:
                result = s.compare(w_before, w_after, other=other, **settings)
    for warning in result.warnings:
        click.echo(f"warning: {warning}", err=True)
    if by == "route":
        _emit(result.routes, fmt, compare.ROUTE_TABLE_COLUMNS)
    else:
        emit(result.templates, fmt)


@click.command("check")
@store_option
@click.option(
    "--budgets",
    "budgets_path",
    required=True,
    type=click.Path(dir_okay=False),
    help="TOML file of per-route limits (docs/whatif-compare.md).",
)
@time_range_options
@format_option
def check_cmd(
    store_path: str, budgets_path: str, since: str | None, until: str | None, fmt: str
) -> None:
    """Check per-route query budgets; exit status 1 when any is exceeded.

    Example: attrib check --store shop.duckdb --budgets budgets.toml
    """
    limits = budgets.load_budgets(budgets_path)
    with attrib.open(store_path, read_only=True) as s:
        df = s.check(limits, since=parse_time(since, "--since"), until=parse_time(until, "--until"))
    emit(df, fmt)
    budgets.raise_if_over(df)
