"""PostgreSQL csvlog (``log_destination = 'csvlog'``), server versions 12 to 17.

Column sets (PostgreSQL docs, 20.8.4 "Using CSV-Format Log Output"; commit "Add backend type to csvlog"):
23 columns up to 12, 24 in 13 (``backend_type``), 26 from 14 (``leader_pid``, ``query_id``). The first 23
keep their positions. A quoted field may contain newlines, so one record can span several physical lines;
the record's ``lines`` count says how many. Pairing and classification:
:mod:`attrib.readers.pg_common`.

``application_name`` (or any other column, by name) becomes ``Statement.request_id`` only when asked for
with ``statement_fields={"request_id": "application_name"}``.
"""

from __future__ import annotations

import csv
import re
from collections.abc import Iterable, Iterator

from attrib.errors import MappingError
from attrib.readers.pg_common import SEVERITIES, Assembler, Entry, clean_name, time_parser
from attrib.records import ReadOptions, Record

NAME = "pg-csvlog"
KIND = "statements"

COLUMNS = (
    "log_time",
    "user_name",
    "database_name",
    "process_id",
    "connection_from",
    "session_id",
    "session_line_num",
    "command_tag",
    "session_start_time",
    "virtual_transaction_id",
    "transaction_id",
    "error_severity",
    "sql_state_code",
    "message",
    "detail",
    "hint",
    "internal_query",
    "internal_query_pos",
    "context",
    "query",
    "query_pos",
    "location",
    "application_name",
    "backend_type",
    "leader_pid",
    "query_id",
)
WIDTHS = (23, 24, 26)
_FIELD_LIMIT = 1 << 30
_START = re.compile(r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d\.\d{3}(?: [A-Za-z0-9+:-]+)?,")
_SEVERITIES = frozenset(SEVERITIES)


def sniff(head: list[str]) -> bool:
    """True when the first record has a csvlog timestamp, 23/24/26 columns and a severity column."""
    if not head or not _START.match(head[0]):
        return False
    try:
        row = next(csv.reader(iter(head)))
    except (csv.Error, StopIteration):
        return False
    return len(row) in WIDTHS and row[11] in _SEVERITIES


def read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]:
    """Yield the records of a csvlog file, in file order; see :mod:`attrib.records`."""
    wanted = options.statement_fields.get("request_id")
    request_col = None
    if wanted is not None:
        if wanted not in COLUMNS[:26]:
            raise MappingError(f"request_id field {wanted!r} is not a csvlog column")
        request_col = COLUMNS.index(wanted)
    if csv.field_size_limit() < _FIELD_LIMIT:
        csv.field_size_limit(_FIELD_LIMIT)
    parse_time = time_parser(options.tz)
    last = 0

    def texts() -> Iterator[str]:
        nonlocal last
        for number, text in lines:
            last = number
            yield text + "\n"

    reader = csv.reader(texts())
    asm = Assembler()
    seen = 0
    while True:
        try:
            row = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            count = reader.line_num - seen
            seen = reader.line_num
            if count:
                yield from asm.reject(last - count + 1, f"unreadable CSV: {exc}", "", count)
            continue
        count = reader.line_num - seen
        seen = reader.line_num
        first = last - count + 1
        if not row:
            yield from asm.reject(first, "empty line", "", count)
            continue
        if len(row) not in WIDTHS:
            yield from asm.reject(
                first, f"expected 23, 24 or 26 columns, got {len(row)}", ",".join(row), count
            )
            continue
        severity = row[11]
        if severity not in _SEVERITIES:
            yield from asm.reject(first, "unknown severity", severity, count)
            continue
        try:
            time_us = parse_time(row[0])
        except ValueError:
            yield from asm.reject(first, "unreadable timestamp", row[0], count)
            continue
        session = row[5] or row[3]
        request_id = None
        if request_col is not None and request_col < len(row):
            request_id = clean_name(row[request_col])
        entry = Entry(
            line=first,
            lines=count,
            time_us=time_us,
            session=session,
            label=session or None,
            user=clean_name(row[1]),
            database=clean_name(row[2]),
            request_id=request_id,
            severity=severity,
            sqlstate=row[12] or None,
            message=row[13],
            detail=row[14] or None,
            query=row[19] or None,
        )
        yield from asm.feed(entry)
    yield from asm.finish()
