"""PostgreSQL jsonlog (``log_destination = 'jsonlog'``, PostgreSQL 15 and later).

One JSON object per line (PostgreSQL docs, 20.8.5 "Using JSON-Format Log Output"): keys whose value is
absent are omitted (``state_code`` for 00000, ``statement`` when there is no query), unknown keys are
ignored. Pairing and classification: :mod:`attrib.readers.pg_common`.

``application_name`` (or any other key) becomes ``Statement.request_id`` only when asked for with
``statement_fields={"request_id": "application_name"}``.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Iterator

from attrib.readers.pg_common import SEVERITIES, Assembler, Entry, clean_name, time_parser
from attrib.records import ReadOptions, Record

NAME = "pg-jsonlog"
KIND = "statements"

_SEVERITIES = frozenset(SEVERITIES)


def sniff(head: list[str]) -> bool:
    """True when the first non-empty line is a JSON object with PostgreSQL's jsonlog keys."""
    for line in head:
        if not line.strip():
            continue
        try:
            obj = json.loads(line)
        except ValueError:
            return False
        return (
            isinstance(obj, dict)
            and {"timestamp", "error_severity", "message"} <= obj.keys()
            and ("pid" in obj or "session_id" in obj)
        )
    return False


def read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]:
    """Yield the records of a jsonlog file, in file order; see :mod:`attrib.records`."""
    request_key = options.statement_fields.get("request_id")
    parse_time = time_parser(options.tz)
    asm = Assembler()
    loads = json.loads
    for number, text in lines:
        try:
            obj = loads(text)
        except ValueError:
            reason = "empty line" if not text.strip() else "not a JSON object (truncated line?)"
            yield from asm.reject(number, reason, text)
            continue
        if not isinstance(obj, dict):
            yield from asm.reject(number, "not a JSON object", text)
            continue
        severity = obj.get("error_severity")
        stamp = obj.get("timestamp")
        message = obj.get("message")
        if (
            severity not in _SEVERITIES
            or not isinstance(stamp, str)
            or not isinstance(message, str)
        ):
            yield from asm.reject(number, "missing timestamp, error_severity or message", text)
            continue
        try:
            time_us = parse_time(stamp)
        except ValueError:
            yield from asm.reject(number, "unreadable timestamp", text)
            continue
        pid = obj.get("pid")
        session = str(obj.get("session_id") or pid or "")
        request_id = None
        if request_key is not None:
            value = obj.get(request_key)
            request_id = clean_name(str(value)) if value is not None else None
        yield from asm.feed(
            Entry(
                line=number,
                lines=1,
                time_us=time_us,
                session=session,
                label=session or None,
                user=clean_name(_text(obj.get("user"))),
                database=clean_name(_text(obj.get("dbname"))),
                request_id=request_id,
                severity=severity,
                sqlstate=_text(obj.get("state_code")),
                message=message,
                detail=_text(obj.get("detail")),
                query=_text(obj.get("statement")),
            )
        )
    yield from asm.finish()


def _text(value: object) -> str | None:
    return value if isinstance(value, str) and value else None
