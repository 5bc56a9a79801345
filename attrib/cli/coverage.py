"""``attrib coverage``: how many statements were linked to requests, and the clock check."""

from __future__ import annotations

import json

import click

from attrib import api
from attrib.cli.options import format_option, store_option
from attrib.present import render, to_records

SECTIONS = ("summary", "templates", "no-id", "missing-ids")


@click.command("coverage")
@store_option
@format_option
@click.option(
    "--section",
    type=click.Choice(("all", *SECTIONS)),
    default="all",
    show_default=True,
    help="Which listing to print (CSV prints one listing: summary unless chosen).",
)
@click.option(
    "--top",
    type=click.IntRange(1),
    default=10,
    show_default=True,
    help="Templates listed among statements with no request id.",
)
def coverage_command(store_path: str, fmt: str, section: str, top: int) -> None:
    """Show how statements were linked to requests and whether the logs' clocks agree.

    Example: attrib coverage --store shop.duckdb
    """
    with api.open(store_path, read_only=True) as store:
        cov = store.coverage(top=top)
    frames = {
        "summary": cov.summary,
        "templates": cov.templates,
        "no-id": cov.no_id,
        "missing-ids": cov.missing_ids,
    }
    chosen = list(SECTIONS) if section == "all" else [section]
    if fmt == "csv" and section == "all":
        chosen = ["summary"]
    if fmt == "json":
        payload = {name: to_records(frames[name]) for name in chosen}
        payload["warnings"] = cov.warnings
        click.echo(json.dumps(payload if section == "all" else payload[section], indent=2))
    elif fmt == "csv":
        click.echo(render(frames[chosen[0]], "csv"), nl=False)
    else:
        for i, name in enumerate(chosen):
            click.echo(("\n" if i else "") + f"{name}:")
            click.echo(render(frames[name], "table"), nl=False)
    for warning in cov.warnings:
        click.echo(f"Warning: {warning}", err=True)
