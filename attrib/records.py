"""What log readers produce: one record per request, statement, skipped or rejected line.

A reader is a generator over ``(line_number, text)`` pairs of one file. It yields records in file order.
Every physical line of the file is covered by exactly one record's ``lines`` count, so that
``requests + statements + skipped + rejected`` line counts add up to the lines read (a record that a
multi-line entry produced carries the number of lines it consumed; a record that shares a line with an
earlier record carries 0).

Times are integers: microseconds since the Unix epoch, UTC. Readers convert offsets and apply the
user's ``tz`` to naive timestamps; with no ``tz`` they raise :class:`attrib.errors.TimezoneError`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from zoneinfo import ZoneInfo


@dataclass(slots=True)
class Request:
    """One HTTP request of the web tier."""

    line: int
    start_us: int
    elapsed_ms: float
    request_id: str | None = None
    trace_id: str | None = None
    method: str | None = None
    route: str | None = None
    path: str | None = None
    status: int | None = None
    lines: int = 1


@dataclass(slots=True)
class Statement:
    """One executed SQL statement.

    ``start_us`` is when the statement began (log time minus duration when the log stamps the end).
    ``sql`` is the statement text as logged, comments included; it is fingerprinted and hashed during
    ingest and kept only with --keep-raw. ``params`` are bind parameter values (PostgreSQL
    ``DETAIL: parameters:``), hashed and then dropped. ``request_id`` is set when the log line itself
    carries one (a JSON field, csvlog application_name, a prefix escape); the comment in ``sql`` is read
    later by the ingest stage. ``error`` is a SQLSTATE or a short error class, never message text
    (messages quote values).
    """

    line: int
    start_us: int
    duration_ms: float | None
    sql: str
    rows: int | None = None
    params: tuple[str, ...] | None = None
    request_id: str | None = None
    trace_id: str | None = None
    session: str | None = None
    user: str | None = None
    database: str | None = None
    error: str | None = None
    lines: int = 1


@dataclass(slots=True)
class Skip:
    """Lines that are valid log output but not a request or statement (connection, checkpoint, ...)."""

    line: int
    category: str
    lines: int = 1


@dataclass(slots=True)
class Reject:
    """Lines that could not be read. ``excerpt`` is only stored with --keep-rejected-text."""

    line: int
    reason: str
    excerpt: str = ""
    lines: int = 1


Record = Request | Statement | Skip | Reject


@dataclass(slots=True)
class ReadOptions:
    """Settings that readers need. Field maps translate our names to the log's names."""

    tz: ZoneInfo | None = None
    log_line_prefix: str = "%m [%p] %q%u@%d "
    request_fields: dict[str, str] = field(default_factory=dict)
    statement_fields: dict[str, str] = field(default_factory=dict)
    access_format: str | None = None
    dialect: str = "postgres"
