"""Web server access logs: NCSA Common/Combined Log Format and user-described extensions of it.

The NCSA formats have no request duration, and a request without one cannot be given its share of
database time, so this reader needs a format that adds one (``--access-format``). The format language
is attrib's own: literal text with ``{field}`` placeholders. Fields:

==================  =============================================================================
``{time}``          CLF time ``[05/Mar/2024:14:02:11 +0000]``, request **start** (Apache ``%t``)
``{time_end}``      CLF time at log write, request **end** (nginx ``$time_local``)
``{iso}``           ISO 8601 time, start; ``{iso_end}``: at end (nginx ``$time_iso8601``)
``{epoch}``         epoch seconds with fraction, start; ``{epoch_end}``: at end (nginx ``$msec``)
``{request}``       request line ``GET /orders/9051 HTTP/1.1`` (or ``{method}``, ``{path}``)
``{status}``        final status (Apache ``%>s``, nginx ``$status``)
``{elapsed_s}``     duration in seconds (nginx ``$request_time``)
``{elapsed_ms}``    duration in milliseconds (Apache ``%{ms}T``)
``{elapsed_us}``    duration in microseconds (Apache ``%D``)
``{request_id}``    request id (nginx ``$request_id``, Apache ``%{X-Request-ID}i``)
``{traceparent}``   W3C ``traceparent`` header (nginx ``$http_traceparent``); ``{trace_id}``: bare id
``{route}``         route template, when the application logs one
``{remote}``, ``{ident}``, ``{user}``, ``{bytes}``, ``{referer}``, ``{agent}``, ``{_}``: read, not kept
==================  =============================================================================

A placeholder between double quotes in the format matches a quoted value with ``\\"`` escapes, one
between ``[`` and ``]`` matches up to ``]``; any other matches a run of non-space characters. Spaces in
the format match one or more spaces. ``{_}`` outside quotes skips any text, spaces included, up to
what follows it (nginx ``$upstream_response_time`` can be ``0.002, 0.009``). Named formats expand at the start of a format string:

- ``common``: ``{remote} {ident} {user} [{time}] "{request}" {status} {bytes}``
- ``combined``: ``common`` plus ``"{referer}" "{agent}"`` (Apache's, ``%t`` = start time)
- ``nginx``: nginx's predefined ``combined`` (``$time_local`` = end time):
  ``{remote} - {user} [{time_end}] "{request}" {status} {bytes} "{referer}" "{agent}"``

so ``nginx {request_id} {elapsed_s}`` reads a log written with
``log_format ... '... "$http_user_agent" $request_id $request_time'`` and ``combined {elapsed_us}``
one written with Apache ``LogFormat "%h %l %u %t \\"%r\\" %>s %b \\"%{Referer}i\\" \\"%{User-agent}i\\" %D"``.

Start time: a start field is used as is; an end field gives start = end − elapsed. With several time
fields the most precise wins (epoch, then ISO, then CLF). CLF and nginx ISO times have whole seconds, so
start times derived from them are only as good as a second; add ``{epoch_end}`` (``$msec``) for ms.

Lines whose request line is not ``METHOD target [protocol]`` with a path or absolute URL target
(``"-"`` after a timeout, TLS bytes sent to a plain-HTTP port) are skipped as ``invalid request line``:
the server logged them correctly, but they name no route.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Iterator

from attrib.comments import trace_id as traceparent_trace_id
from attrib.errors import MappingError
from attrib.readers.requests_jsonl import (
    EXCERPT,
    MAX_LINE,
    BadValue,
    to_elapsed_ms,
    to_status,
    to_text,
    to_trace_id,
)
from attrib.records import ReadOptions, Record, Reject, Request, Skip
from attrib.routes import derive_route, url_path
from attrib.timeparse import check_range, epoch_us, iso_us, ncsa_us

NAME = "access-log"
KIND = "requests"

PROBE = 100
PRESETS = {
    "common": '{remote} {ident} {user} [{time}] "{request}" {status} {bytes}',
    "combined": '{remote} {ident} {user} [{time}] "{request}" {status} {bytes} "{referer}" "{agent}"',
    "nginx": '{remote} - {user} [{time_end}] "{request}" {status} {bytes} "{referer}" "{agent}"',
}
FIELDS = frozenset(
    {
        "time",
        "time_end",
        "iso",
        "iso_end",
        "epoch",
        "epoch_end",
        "request",
        "method",
        "path",
        "status",
        "elapsed_s",
        "elapsed_ms",
        "elapsed_us",
        "request_id",
        "traceparent",
        "trace_id",
        "route",
        "remote",
        "ident",
        "user",
        "bytes",
        "referer",
        "agent",
        "_",
    }
)
# Time fields from most to least precise; the flag says whether the field is the request's end.
_TIMES = (
    ("epoch", False),
    ("epoch_end", True),
    ("iso", False),
    ("iso_end", True),
    ("time", False),
    ("time_end", True),
)
_UNITS = {"elapsed_s": "s", "elapsed_ms": "ms", "elapsed_us": "us"}
_PLACEHOLDER = re.compile(r"\{([A-Za-z_]*)\}")
_CLF_HEAD = re.compile(r'\S+ \S+ .*?\[\d{1,2}/[A-Za-z]{3}/\d{4}:\d{2}:\d{2}:\d{2} [+-]\d{4}\] "')
_METHOD = re.compile(r"[A-Z][A-Z0-9_-]{0,31}\Z")
_QUOTED = r'([^"\\]*(?:\\.[^"\\]*)*)'
_BRACKETED = r"([^\]]*)"
_BARE = r"(\S+)"
_ANY = r"(.*?)"


def sniff(head: list[str]) -> bool:
    """True when most non-blank first lines start like NCSA CLF (``host ident user [time] "``)."""
    lines = [text for text in head if text.strip()]
    if not lines:
        return False
    hits = sum(1 for text in lines if _CLF_HEAD.match(text))
    return hits * 2 > len(lines)


class AccessFormat:
    """A compiled access-log format: a regex and the field name of each group."""

    def __init__(self, spec: str | None) -> None:
        if not spec or not spec.strip():
            raise MappingError(
                "NCSA Common/Combined access logs carry no request duration, which attribution needs; "
                "log one and describe the format with --access-format, e.g. "
                "'nginx {request_id} {elapsed_s}' for nginx ... $request_id $request_time, or "
                "'combined {elapsed_us}' for Apache ... %D"
            )
        self.spec = _expand(spec.strip())
        pattern, self.fields = _compile(self.spec)
        self.regex = re.compile(pattern)
        unknown = [name for name in self.fields if name not in FIELDS]
        if unknown:
            raise MappingError(
                f"unknown field {{{unknown[0]}}} in --access-format; known: "
                + ", ".join("{" + f + "}" for f in sorted(FIELDS))
            )
        self.elapsed = next((f for f in self.fields if f in _UNITS), None)
        if self.elapsed is None:
            raise MappingError(
                "--access-format has no duration field; add {elapsed_s}, {elapsed_ms} or "
                "{elapsed_us} (attribution needs each request's duration)"
            )
        self.time = next(((f, end) for f, end in _TIMES if f in self.fields), None)
        if self.time is None:
            raise MappingError(
                "--access-format has no time field; add {time}, {time_end}, {iso}, {iso_end}, "
                "{epoch} or {epoch_end}"
            )
        if not {"request", "path", "route"} & set(self.fields):
            raise MappingError("--access-format has no {request}, {path} or {route} field")
        repeated = sorted({f for f in self.fields if f != "_" and self.fields.count(f) > 1})
        if repeated:
            raise MappingError(f"field {{{repeated[0]}}} appears twice in --access-format")
        self.unit = _UNITS[self.elapsed]
        self.parse_time = _time_parser(self.time[0])


def read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]:
    """Read an access log described by ``options.access_format``; see the module docstring."""
    fmt = AccessFormat(options.access_format)
    it = iter(lines)
    probe = []
    for item in it:
        probe.append(item)
        if len(probe) >= PROBE:
            break
    texts = [text for _, text in probe if text.strip() and len(text) <= MAX_LINE]
    if texts and not any(fmt.regex.match(text) for text in texts):
        raise MappingError(
            f"--access-format {fmt.spec!r} matches none of the first {len(texts)} lines of the "
            f"access log; first line: {texts[0][:EXCERPT]!r}"
        )
    for number, text in probe:
        yield _record(number, text, fmt)
    for number, text in it:
        yield _record(number, text, fmt)


def _record(number: int, text: str, fmt: AccessFormat) -> Record:
    if not text or text.isspace():
        return Skip(number, "blank")
    if len(text) > MAX_LINE:
        return Reject(number, "line longer than 1 MiB", text[:EXCERPT])
    match = fmt.regex.match(text)
    if match is None:
        return Reject(number, "line does not match the access format", text[:EXCERPT])
    values = dict(zip(fmt.fields, match.groups(), strict=True))
    get = values.get
    try:
        method = get("method")
        target = get("path")
        request = get("request")
        if request is not None:
            parts = request.split(" ")
            if len(parts) not in (2, 3) or not _METHOD.match(parts[0]):
                return Skip(number, "invalid request line")
            method, target = parts[0], parts[1]
        path = url_path(target) if target and target != "-" else None
        if path is not None and not path.startswith("/"):
            return Skip(number, "invalid request line")
        route = to_text(get("route")) or (derive_route(path) if path else None)
        if route is None:
            raise BadValue("no route or path")
        if method is not None and not _METHOD.match(method):
            method = None if method == "-" else _bad("bad method")
        elapsed_ms = to_elapsed_ms(get(fmt.elapsed), fmt.unit)
        start_us = fmt.parse_time(get(fmt.time[0]))
        if fmt.time[1]:
            start_us = _checked(start_us - round(elapsed_ms * 1000))
        trace = to_trace_id(get("trace_id")) or traceparent_trace_id(to_text(get("traceparent")))
        return Request(
            number,
            start_us,
            elapsed_ms,
            to_text(get("request_id")),
            trace,
            method,
            route,
            path,
            to_status(get("status")),
        )
    except BadValue as exc:
        return Reject(number, str(exc), text[:EXCERPT])


def _time_parser(field: str) -> Callable[[str | None], int]:
    parse: Callable[[str], int]
    if field.startswith("epoch"):
        parse = _epoch_seconds
    elif field.startswith("iso"):
        parse = _iso_with_offset
    else:
        parse = ncsa_us

    def parse_time(value: str | None) -> int:
        if value is None or value in ("", "-"):
            raise BadValue("no timestamp")
        try:
            return parse(value)
        except ValueError as exc:
            raise BadValue(str(exc)) from None

    return parse_time


def _epoch_seconds(value: str) -> int:
    return epoch_us(value, "s")


def _iso_with_offset(value: str) -> int:
    return iso_us(value, None)


def _checked(us: int) -> int:
    try:
        return check_range(us)
    except ValueError as exc:
        raise BadValue(str(exc)) from None


def _bad(reason: str) -> str:
    raise BadValue(reason)


def _expand(spec: str) -> str:
    name, _, rest = spec.partition(" ")
    if name in PRESETS:
        return PRESETS[name] + (" " + rest.strip() if rest.strip() else "")
    return spec


def _compile(spec: str) -> tuple[str, list[str]]:
    fields: list[str] = []
    parts = [r"\A"]
    pos = 0
    for match in _PLACEHOLDER.finditer(spec):
        parts.append(_literal(spec[pos : match.start()]))
        before = spec[match.start() - 1] if match.start() > 0 else ""
        after = spec[match.end()] if match.end() < len(spec) else ""
        if before == '"' and after == '"':
            parts.append(_QUOTED)
        elif before == "[" and after == "]":
            parts.append(_BRACKETED)
        elif match.group(1) == "_":
            parts.append(_ANY)
        else:
            parts.append(_BARE)
        fields.append(match.group(1))
        pos = match.end()
    parts.append(_literal(spec[pos:]))
    parts.append(r"\s*\Z")
    return "".join(parts), fields


def _literal(text: str) -> str:
    return " +".join(re.escape(piece) for piece in text.split(" "))
