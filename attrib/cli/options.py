"""Options shared by several commands, as decorators."""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, datetime
from typing import Any

import click
import pandas as pd

from attrib.present import FORMATS, render

store_option = click.option(
    "--store",
    "store_path",
    required=True,
    type=click.Path(dir_okay=False),
    help="The attrib store (a DuckDB file).",
)

format_option = click.option(
    "--format",
    "fmt",
    type=click.Choice(FORMATS),
    default="table",
    show_default=True,
    help="Output as an aligned table, CSV or JSON.",
)


def time_range_options(f: Callable[..., Any]) -> Callable[..., Any]:
    """--since/--until: ISO 8601 times (UTC unless they carry an offset)."""
    f = click.option(
        "--until",
        type=str,
        default=None,
        help="Only data before this time (ISO 8601, UTC unless an offset is given).",
    )(f)
    f = click.option(
        "--since",
        type=str,
        default=None,
        help="Only data from this time on (ISO 8601, UTC unless an offset is given).",
    )(f)
    return f


def parse_time(value: str | None, name: str) -> datetime | None:
    """Parse a --since/--until value into a naive UTC datetime."""
    if value is None:
        return None
    try:
        ts = pd.Timestamp(value)
    except (ValueError, TypeError):
        raise click.BadParameter(f"{value!r} is not an ISO 8601 time", param_hint=name) from None
    if ts.tzinfo is not None:
        ts = ts.tz_convert(UTC).tz_localize(None)
    return ts.to_pydatetime()


def emit(df: pd.DataFrame, fmt: str) -> None:
    """Write a listing to stdout."""
    click.echo(render(df, fmt), nl=False)
