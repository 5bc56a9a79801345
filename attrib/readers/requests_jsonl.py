"""Request log as JSON lines: one JSON object per request, fields named by the application.

Fields are found by name. ``ReadOptions.request_fields`` maps our names to the log's names (dotted names
reach into nested objects, ``http.route`` is tried as a flat key first); unmapped fields try the usual
names in :data:`DEFAULTS`. Which name is used is decided once per file, on the first :data:`PROBE`
records (looked for in the first :data:`PROBE_LINES` lines); a mapped name that none of them has raises
:class:`~attrib.errors.MappingError`, and so does a log in which no name for a required field (a time,
a duration, a route or path) appears.

Time: ``timestamp`` is read as the time the line was written, i.e. the request's **end** (loggers write
the line when the response is done), so start = timestamp − elapsed. A ``start`` field (``start_time``,
``started_at``, ...) is taken as the start as is; map ``start=NAME`` to declare that a log's time field
is the start.

Duration units follow the log's field name: ``*_ms`` milliseconds, ``*_us`` microseconds, ``*_ns``
nanoseconds, ``*_s`` and ``request_time`` seconds; the bare names ``duration``, ``elapsed``,
``response_time`` and ``latency`` are read as **milliseconds**. A string value with a unit suffix
(``"34ms"``, ``"0.034s"``, ``"34120us"``) overrides the name. Users name the unit in the mapping key:
``elapsed_ms=NAME``, ``elapsed_s=NAME``, ``elapsed_us=NAME`` or ``elapsed_ns=NAME``.

The shared helpers here (field resolution, value checks) are also used by the CSV reader.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Callable, Iterable, Iterator
from functools import lru_cache
from zoneinfo import ZoneInfo

from attrib.comments import trace_id as traceparent_trace_id
from attrib.errors import MappingError
from attrib.records import ReadOptions, Record, Reject, Request, Skip
from attrib.routes import derive_route, url_path
from attrib.timeparse import MAX_US, MIN_US, timestamp_us

NAME = "requests-jsonl"
KIND = "requests"

PROBE = 100  # records that decide the field names
PROBE_LINES = 10_000  # lines searched for those records before giving up
MAX_LINE = 1 << 20  # a request log line over 1 MiB is not a request (common practice, no source)
EXCERPT = 200

#: Our field names and the log names tried when the user maps none (in order of preference).
DEFAULTS: dict[str, tuple[str, ...]] = {
    "timestamp": ("timestamp", "time", "ts", "@timestamp", "datetime", "end_time"),
    "start": ("start", "start_time", "started_at", "startTime", "request_start"),
    "request_id": ("request_id", "requestId", "req_id", "reqId", "x_request_id", "request.id"),
    "trace_id": ("trace_id", "traceId", "trace.id"),
    "traceparent": ("traceparent",),
    "method": ("method", "http_method", "request_method", "http.request.method", "verb"),
    "route": ("route", "http.route", "http_route"),
    "path": ("path", "url", "uri", "request_uri", "url.path", "target"),
    "status": ("status", "status_code", "statusCode", "http_status", "http.response.status_code"),
}
#: Duration fields tried by default, with the unit their value is in.
ELAPSED_DEFAULTS: tuple[tuple[str, str], ...] = (
    ("elapsed_ms", "ms"),
    ("duration_ms", "ms"),
    ("response_time_ms", "ms"),
    ("latency_ms", "ms"),
    ("elapsed_us", "us"),
    ("duration_us", "us"),
    ("elapsed_ns", "ns"),
    ("duration_ns", "ns"),
    ("elapsed_s", "s"),
    ("duration_s", "s"),
    ("request_time", "s"),
    ("elapsed", "ms"),
    ("duration", "ms"),
    ("response_time", "ms"),
    ("responseTime", "ms"),
    ("latency", "ms"),
)
ELAPSED_KEYS = {"elapsed_ms": "ms", "elapsed_s": "s", "elapsed_us": "us", "elapsed_ns": "ns"}
_TO_MS = {"s": 1000.0, "ms": 1.0, "us": 0.001, "µs": 0.001, "μs": 0.001, "ns": 0.000001}
_DURATION = re.compile(r"\s*([0-9]*\.?[0-9]+(?:[eE][+-]?\d+)?)\s*(ns|us|µs|μs|ms|s)?\s*\Z")
_METHOD = re.compile(r"[A-Z_][A-Z0-9_-]{0,31}\Z")
_TRACE = re.compile(r"[0-9a-f]{32}\Z")


class BadValue(ValueError):
    """A field value that makes the line a Reject; the message is the reason."""


def sniff(head: list[str]) -> bool:
    """True when most non-blank first lines are JSON objects with a time, a duration and a path/route."""
    objects = []
    nonblank = 0
    for text in head:
        if not text.strip():
            continue
        nonblank += 1
        obj = _parse(text) if text.lstrip().startswith("{") else None
        if isinstance(obj, dict):
            if "resourceSpans" in obj or "resource_spans" in obj:
                return False
            objects.append(obj)
    if not objects or len(objects) * 2 < nonblank:
        return False
    try:
        plan = FieldPlan.resolve(objects, {}, "request log")
    except MappingError:
        return False
    return plan.complete


class FieldPlan:
    """Which log field feeds each of our fields, decided once per file."""

    def __init__(self, names: dict[str, str], elapsed: tuple[str, str] | None) -> None:
        self.names = names
        self.elapsed = elapsed
        self.complete = (
            elapsed is not None
            and ("timestamp" in names or "start" in names)
            and ("route" in names or "path" in names)
        )

    @classmethod
    def resolve(
        cls, records: list[dict[str, object]], mapping: dict[str, str], source: str
    ) -> FieldPlan:
        """Pick field names from the user's mapping or the defaults, checked on ``records``.

        Raises MappingError when a mapped name appears in none of ``records`` or when a required field
        has no name at all (only if ``records`` is not empty).
        """
        unknown = sorted(set(mapping) - set(DEFAULTS) - set(ELAPSED_KEYS))
        if unknown:
            known = ", ".join([*DEFAULTS, *ELAPSED_KEYS])
            raise MappingError(f"unknown request field {unknown[0]!r}; known fields: {known}")
        units = [key for key in ELAPSED_KEYS if key in mapping]
        if len(units) > 1:
            raise MappingError(f"map only one duration field, not {' and '.join(units)}")
        seen = _keys_seen(records)

        def present(name: str) -> bool:
            return name in seen or any(lookup(r, name) is not None for r in records)

        names: dict[str, str] = {}
        for ours, candidates in DEFAULTS.items():
            if ours in mapping:
                if records and not present(mapping[ours]):
                    raise MappingError(
                        f"no field {mapping[ours]!r} in the {source}; "
                        f"pass --request-field {ours}=NAME with one of its field names"
                    )
                names[ours] = mapping[ours]
                continue
            for name in candidates:
                if name in seen or ("." in name and present(name)):
                    names[ours] = name
                    break
        elapsed = None
        for key, unit in ELAPSED_KEYS.items():
            if key in mapping:
                if records and not present(mapping[key]):
                    raise MappingError(
                        f"no field {mapping[key]!r} in the {source}; "
                        f"pass --request-field {key}=NAME with one of its field names"
                    )
                elapsed = (mapping[key], unit)
        if elapsed is None:
            elapsed = next(((n, u) for n, u in ELAPSED_DEFAULTS if n in seen), None)
        plan = cls(names, elapsed)
        if records and not plan.complete:
            if elapsed is None:
                missing, hint = "duration", "elapsed_ms=NAME (or elapsed_s/elapsed_us/elapsed_ns)"
            elif "route" not in names and "path" not in names:
                missing, hint = "route or path", "route=NAME or path=NAME"
            else:
                missing, hint = "time", "timestamp=NAME (end time) or start=NAME"
            raise MappingError(
                f"found no {missing} field in the first {len(records)} records of the {source}; "
                f"pass --request-field {hint}"
            )
        return plan

    def getter(self) -> Callable[[dict[str, object]], dict[str, object]]:
        """A function from one parsed record to our field values (None when absent)."""
        pairs = list(self.names.items())
        if self.elapsed is not None:
            pairs.append(("elapsed", self.elapsed[0]))

        if any("." in name for _, name in pairs):

            def get(record: dict[str, object]) -> dict[str, object]:
                return {ours: lookup(record, name) for ours, name in pairs}

        else:

            def get(record: dict[str, object]) -> dict[str, object]:
                return {ours: record.get(name) for ours, name in pairs}

        return get


def lookup(record: dict[str, object], name: str) -> object:
    """The value of ``name`` in ``record``: a flat key first, then a dotted path into nested objects."""
    value = record.get(name)
    if value is not None or "." not in name:
        return value
    node: object = record
    for part in name.split("."):
        if not isinstance(node, dict):
            return None
        node = node.get(part)
    return node


def build_request(
    line: int, values: dict[str, object], unit: str, tz: ZoneInfo | None
) -> Request | Reject:
    """Turn one record's field values into a Request, or a Reject naming the first bad value."""
    get = values.get
    try:
        elapsed_ms = to_elapsed_ms(get("elapsed"), unit)
        start = get("start")
        if start is not None and start != "":
            start_us = _time(start, tz)
        else:
            end = get("timestamp")
            if end is None or end == "":
                raise BadValue("no timestamp")
            start_us = _time(end, tz) - round(elapsed_ms * 1000)
            if not MIN_US <= start_us < MAX_US:
                raise BadValue("timestamp out of range")
        path = to_text(get("path"))
        if path is not None and (path[0] != "/" or "?" in path or "#" in path):
            path = url_path(path)
        route = to_text(get("route")) or (derive_route(path) if path else None)
        if route is None:
            raise BadValue("no route or path")
        trace = get("trace_id")
        if trace is not None:
            trace = to_trace_id(trace)
        if trace is None:
            parent = get("traceparent")
            if parent is not None:
                trace = traceparent_trace_id(to_text(parent))
        return Request(
            line,
            start_us,
            elapsed_ms,
            to_text(get("request_id")),
            trace,
            to_method(get("method")),
            route,
            path,
            to_status(get("status")),
        )
    except BadValue as exc:
        return Reject(line, str(exc))


def to_elapsed_ms(value: object, unit: str) -> float:
    """A duration value in ``unit`` (or with its own unit suffix) as milliseconds.

    >>> to_elapsed_ms("0.034", "s"), to_elapsed_ms("34120us", "ms"), to_elapsed_ms(12, "ms")
    (34.0, 34.12, 12.0)
    """
    kind = type(value)
    if kind is int or kind is float:
        ms = value * _TO_MS[unit]  # type: ignore[operator]
    elif kind is str:
        text = value.strip()  # type: ignore[union-attr]
        if text in ("", "-"):
            raise BadValue("no elapsed time")
        if text[0] == "-":
            raise BadValue("negative elapsed time")
        try:
            ms = float(text) * _TO_MS[unit]
        except ValueError:
            match = _DURATION.match(text)
            if match is None:
                raise BadValue("bad elapsed time") from None
            ms = float(match.group(1)) * _TO_MS[match.group(2) or unit]
    elif value is None:
        raise BadValue("no elapsed time")
    else:
        raise BadValue("bad elapsed time")
    if not math.isfinite(ms):
        raise BadValue("bad elapsed time")
    if ms < 0:
        raise BadValue("negative elapsed time")
    return ms


def to_status(value: object) -> int | None:
    """An HTTP status code (100-599), None when absent; anything else is a BadValue."""
    if type(value) is int and 100 <= value <= 599:  # type: ignore[operator]
        return value  # type: ignore[return-value]
    if value is None or value == "" or value == "-":
        return None
    if isinstance(value, str) and value.strip().isdigit() and value.isascii():
        value = int(value)
    if isinstance(value, int) and not isinstance(value, bool) and 100 <= value <= 599:
        return value
    raise BadValue("bad status")


def to_method(value: object) -> str | None:
    """An HTTP method token in upper case, None when absent."""
    if value is None or value == "" or value == "-":
        return None
    if type(value) is str:
        method = _method(value)
        if method is not None:
            return method
    raise BadValue("bad method")


@lru_cache(maxsize=1024)
def _method(text: str) -> str | None:
    method = text.strip().upper()
    return method if _METHOD.match(method) else None


def to_text(value: object) -> str | None:
    """A string field (numbers are written out), None when absent or "-"."""
    if isinstance(value, str):
        text = value.strip()
        return text if text and text != "-" else None
    if value is None:
        return None
    if isinstance(value, int | float) and not isinstance(value, bool):
        return str(value)
    raise BadValue("bad field value")


def to_trace_id(value: object) -> str | None:
    """A W3C trace id (32 hex digits, not all zero) in lower case, else None."""
    if not isinstance(value, str):
        return None
    trace = value.strip().lower()
    if _TRACE.match(trace) and trace != "0" * 32:
        return trace
    return None


def read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]:
    """Read a JSON-lines request log; see the module docstring for field names and units."""
    it = iter(lines)
    parsed: list[tuple[int, str, object]] = []
    objects: list[dict[str, object]] = []
    for number, text in it:
        obj = _parse(text)
        parsed.append((number, text[:EXCERPT], obj))
        if isinstance(obj, dict):
            objects.append(obj)
        if len(objects) >= PROBE or len(parsed) >= PROBE_LINES:
            break
    plan = FieldPlan.resolve(objects, options.request_fields, "request log")
    get = plan.getter()
    unit = plan.elapsed[1] if plan.elapsed else "ms"
    tz = options.tz
    for number, text, obj in parsed:
        yield _record(number, text, obj, get, unit, tz)
    for number, text in it:
        yield _record(number, text, _parse(text), get, unit, tz)


def _record(
    number: int,
    text: str,
    obj: object,
    get: Callable[[dict[str, object]], dict[str, object]],
    unit: str,
    tz: ZoneInfo | None,
) -> Record:
    if isinstance(obj, dict):
        record = build_request(number, get(obj), unit, tz)
        if type(record) is Reject:
            record.excerpt = text[:EXCERPT]
        return record
    if obj is _BLANK:
        return Skip(number, "blank")
    if obj is _LONG:
        return Reject(number, "line longer than 1 MiB", text[:EXCERPT])
    if obj is _INVALID:
        return Reject(number, "invalid JSON", text[:EXCERPT])
    return Reject(number, "not a JSON object", text[:EXCERPT])


_BLANK, _LONG, _INVALID = object(), object(), object()


def _parse(text: str) -> object:
    if not text or text.isspace():
        return _BLANK
    if len(text) > MAX_LINE:
        return _LONG
    try:
        return json.loads(text)
    except ValueError:
        return _INVALID
    except RecursionError:
        return _INVALID


def _time(value: object, tz: ZoneInfo | None) -> int:
    try:
        return timestamp_us(value, tz)
    except ValueError as exc:
        raise BadValue(str(exc)) from None


def _keys_seen(records: list[dict[str, object]]) -> set[str]:
    seen: set[str] = set()
    for record in records:
        seen.update(key for key, value in record.items() if value is not None)
    return seen
