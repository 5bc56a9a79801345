"""``attrib ingest``: read request and statement logs into a store."""

from __future__ import annotations

import sys
import time

import click

from attrib import api
from attrib.cli.options import emit, format_option, store_option
from attrib.errors import UsageError
from attrib.ingest import DIALECTS, IngestOptions, Progress, parse_mapping


class _ProgressLine:
    """Lines per second of the file being read, redrawn on one stderr line (only on a terminal)."""

    def __init__(self, every: float = 0.5) -> None:
        self.every = every
        self.last = 0.0
        self.shown = False

    def __call__(self, p: Progress) -> None:
        now = time.monotonic()
        if not p.done and now - self.last < self.every:
            return
        self.last = now
        rate = p.lines / p.seconds if p.seconds > 0 else 0.0
        share = f" {p.bytes_done / p.bytes_total:4.0%}" if p.bytes_total and not p.done else ""
        text = f"{p.path}:{share} {p.lines:,} lines, {rate:,.0f} lines/s"
        click.echo(f"\r\x1b[K{text}", nl=p.done, err=True)
        self.shown = not p.done


@click.command("ingest")
@store_option
@click.option(
    "--requests",
    "requests",
    multiple=True,
    metavar="FILE_OR_GLOB",
    help="Request log of the web tier (repeatable; gzip is read as is).",
)
@click.option(
    "--queries",
    "queries",
    multiple=True,
    metavar="FILE_OR_GLOB",
    help="Statement log of the database (repeatable; gzip is read as is).",
)
@click.option("--requests-format", default=None, help="Format of the request logs (else detected).")
@click.option(
    "--queries-format", default=None, help="Format of the statement logs (else detected)."
)
@click.option("--tz", default=None, metavar="ZONE", help="IANA zone of timestamps without offset.")
@click.option("--log-line-prefix", default=None, help="PostgreSQL log_line_prefix of stderr logs.")
@click.option(
    "--request-field",
    multiple=True,
    metavar="OURS=THEIRS",
    help="Name of a request field in the log, e.g. route=handler (repeatable).",
)
@click.option(
    "--query-field",
    multiple=True,
    metavar="OURS=THEIRS",
    help="Name of a statement field in the log, e.g. request_id=req (repeatable).",
)
@click.option("--access-format", default=None, help="Layout of web server access logs.")
@click.option(
    "--dialect",
    type=click.Choice(DIALECTS),
    default=None,
    help="SQL dialect of the statements [default: mysql for mysql-slow, else postgres].",
)
@click.option(
    "--comment-key",
    default="request_id",
    show_default=True,
    help="sqlcommenter key that carries the request id.",
)
@click.option(
    "--id-sources",
    default="comment,field,trace",
    show_default=True,
    help="Where a statement's request id comes from, first match wins.",
)
@click.option("--keep-raw", is_flag=True, help="Store statement text (holds literal values).")
@click.option(
    "--keep-rejected-text",
    is_flag=True,
    help="Store the first 200 characters of rejected lines (may hold literal values).",
)
@click.option(
    "--workers",
    type=click.IntRange(0, 64),
    default=0,
    show_default=True,
    help="Extra processes that fingerprint statements (0: none).",
)
@format_option
def ingest_command(
    store_path: str,
    requests: tuple[str, ...],
    queries: tuple[str, ...],
    requests_format: str | None,
    queries_format: str | None,
    tz: str | None,
    log_line_prefix: str | None,
    request_field: tuple[str, ...],
    query_field: tuple[str, ...],
    access_format: str | None,
    dialect: str | None,
    comment_key: str,
    id_sources: str,
    keep_raw: bool,
    keep_rejected_text: bool,
    workers: int,
    fmt: str,
) -> None:
    """Read request and statement logs into the store and link statements to requests.

    Each file is stored in one transaction; a file already in the store (same SHA-256) is not read
    again.

    Example: attrib ingest --store shop.duckdb --requests 'web/*.jsonl.gz' --queries pg.log
    """
    if not requests and not queries:
        raise UsageError("give at least one --requests or --queries file")
    options = IngestOptions(
        tz=tz,
        log_line_prefix=log_line_prefix,
        request_fields=parse_mapping(request_field, "--request-field"),
        query_fields=parse_mapping(query_field, "--query-field"),
        access_format=access_format,
        dialect=dialect,
        comment_key=comment_key,
        id_sources=id_sources,
        keep_raw=keep_raw,
        keep_rejected_text=keep_rejected_text,
        requests_format=requests_format,
        queries_format=queries_format,
        workers=workers,
    )
    progress = _ProgressLine() if sys.stderr.isatty() else None
    with api.open(store_path) as store:
        result = store.ingest(
            requests=requests, queries=queries, options=options, progress=progress
        )
    emit(result.summary(), fmt)
    click.echo(f"{result.links_added:,} statements newly linked to requests", err=True)
