"""``attrib fingerprint``: the template of each statement given on the command line's input."""

from __future__ import annotations

import click

from attrib.cli.options import emit, format_option
from attrib.fingerprint import fingerprint_statements, split_statements, statements_from_lines
from attrib.ingest import DIALECTS


@click.command("fingerprint")
@click.argument("source", type=click.File("r", encoding="utf-8", errors="replace"), default="-")
@click.option(
    "--dialect",
    type=click.Choice(DIALECTS),
    default="postgres",
    show_default=True,
    help="SQL dialect of the statements.",
)
@click.option("--split", is_flag=True, help="Statements end with ';' (else one per line).")
@format_option
def fingerprint_command(source: click.utils.LazyFile, dialect: str, split: bool, fmt: str) -> None:
    """Print id, command, parsed and template of each statement in FILE (or standard input).

    Example: echo "SELECT * FROM loaves WHERE id = 7" | attrib fingerprint
    """
    if split:
        statements = split_statements(source.read())
    else:
        statements = statements_from_lines(source)
    emit(fingerprint_statements(statements, dialect), fmt)
