"""Request ids carried inside SQL text: sqlcommenter comments and W3C ``traceparent`` values.

Sources: opentelemetry-sqlcommenter "Specifications" page (format, escaping, parsing) and W3C Trace
Context, "Traceparent Header". Both are summarised in docs/input-formats.md.
"""

from __future__ import annotations

import re
from urllib.parse import unquote

_PAIR = re.compile(r"([A-Za-z0-9_.%~-]+)='((?:\\.|[^'\\])*)'")
_TRACEPARENT = re.compile(r"([0-9a-f]{2})-([0-9a-f]{32})-([0-9a-f]{16})-([0-9a-f]{2})(-.*)?\Z")
_UNESCAPE = re.compile(r"\\(.)")


def comment_tags(sql: str) -> dict[str, str]:
    """Return the key/value pairs of a trailing sqlcommenter comment (empty when there is none).

    >>> comment_tags("SELECT 1 /*request_id='r%2F1',route='%2Fhuts%2F%7Bid%7D'*/")
    {'request_id': 'r/1', 'route': '/huts/{id}'}
    """
    tail = sql.rstrip(" \t\r\n;")
    if not tail.endswith("*/"):
        return {}
    start = tail.rfind("/*", 0, len(tail) - 2)
    if start < 0:
        return {}
    body = tail[start + 2 : -2]
    return {_decode(key): _decode(value) for key, value in _PAIR.findall(body)}


def trace_id(traceparent: str | None) -> str | None:
    """The trace id of a valid ``traceparent`` value, else None (W3C Trace Context, Traceparent Header).

    >>> trace_id("00-4bf92f3577b34da6a3ce929d0e0e4736-00f067aa0ba902b7-01")
    '4bf92f3577b34da6a3ce929d0e0e4736'
    >>> trace_id("00-00000000000000000000000000000000-00f067aa0ba902b7-01") is None
    True
    """
    if not traceparent:
        return None
    match = _TRACEPARENT.match(traceparent.strip())
    if match is None:
        return None
    version, trace, parent, _flags, rest = match.groups()
    if version == "ff" or (version == "00" and rest):
        return None
    if set(trace) == {"0"} or set(parent) == {"0"}:
        return None
    return trace


def request_keys(sql: str, key: str = "request_id") -> tuple[str | None, str | None]:
    """Return ``(request_id, trace_id)`` carried by the statement's trailing comment.

    >>> request_keys("SELECT 1 /*request_id='abc'*/")
    ('abc', None)
    """
    tags = comment_tags(sql)
    return tags.get(key) or None, trace_id(tags.get("traceparent"))


def _decode(text: str) -> str:
    return unquote(_UNESCAPE.sub(r"\1", text))
