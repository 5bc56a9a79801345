"""``attrib demo``: generate the Ridgeline demo logs, ingest them and show what to look at first."""

from __future__ import annotations

import click

from attrib.cli import _COMMANDS
from attrib.cli.options import format_option
from attrib.demo import format_summary, run


@click.command("demo")
@click.option(
    "--out",
    "out_dir",
    default="attrib-demo",
    show_default=True,
    type=click.Path(file_okay=False),
    help="Folder for the two logs and the store demo.duckdb (an old demo store is replaced).",
)
@click.option(
    "--seed", default=7, show_default=True, type=int, help="Random seed; same seed, same logs."
)
@click.option(
    "--requests",
    "n_requests",
    default=30_000,
    show_default=True,
    type=click.IntRange(min=1),
    help="Web requests to simulate (about 16 statements each).",
)
@format_option
def demo_cmd(out_dir: str, seed: int, n_requests: int, fmt: str) -> None:
    """Try attrib on invented logs of a mountain-hut booking site with planted N+1 loops.

    Writes requests.jsonl and postgresql.log into --out, ingests them into a fresh demo.duckdb
    there, then prints the top routes, templates and N+1 findings, what to look at first and the
    commands to try next. Progress goes to stderr.

    Example: attrib demo --out /tmp/ridgeline --requests 5000
    """
    result = run(
        out_dir,
        seed=seed,
        requests=n_requests,
        commands=tuple(_COMMANDS),
        progress=lambda message: click.echo(message, err=True),
    )
    click.echo(format_summary(result.summary, fmt), nl=False)
