"""OpenTelemetry traces as OTLP JSON lines, as the OpenTelemetry file exporter writes them.

Sources: opentelemetry-proto ``docs/specification.md`` ("OTLP Specification", JSON Protobuf Encoding:
lowerCamelCase keys, hex trace/span ids, 64-bit integers as decimal strings, enums as integers);
OpenTelemetry Specification, "OpenTelemetry Protocol File Exporter" (one ``TracesData`` object per line);
``trace.proto`` (``SpanKind`` 2 = SERVER, 3 = CLIENT; ``Status.code`` 2 = ERROR); semantic conventions
(HTTP migration guide, database client spans). Summarised in log-formats.md §5.

Each line holds ``resourceSpans`` → ``scopeSpans`` (older producers: ``instrumentationLibrarySpans``)
→ ``spans``. Of those spans:

- an HTTP **server** span (kind SERVER, with an HTTP method, route or path attribute) becomes a
  :class:`~attrib.records.Request`: start and duration from ``startTimeUnixNano``/``endTimeUnixNano``,
  ``trace_id`` = ``traceId``; method from ``http.request.method`` (older ``http.method``; ``_OTHER`` is
  replaced by ``http.request.method_original``), route ``http.route`` (else derived from the path), path
  from ``url.path`` (older ``http.target``, query dropped), status from ``http.response.status_code``
  (older ``http.status_code``); request id from a request-id attribute when one is present (see
  :data:`REQUEST_ID_KEYS`; a ``request_id`` entry of ``--request-field`` names another one);
- a **database client** span (kind CLIENT with ``db.system.name``/``db.system`` or statement text)
  becomes a :class:`~attrib.records.Statement`: ``sql`` from ``db.query.text`` (older ``db.statement``),
  rows from ``db.response.returned_rows``, error from ``db.response.status_code`` (a SQLSTATE for
  PostgreSQL), else ``error.type``, else ``"error"`` when the span status is ERROR (never the status
  message: messages quote values); database from ``db.namespace`` (the part before the first ``.``)
  or older ``db.name``; ``session`` and ``request_id`` are None, the ingest stage links by trace id;
- every other span is no record. A line with no record is skipped (``no http server or db span``; or
  ``no statement text`` when its only database spans carry no text).

Ids are read as hex (normalised to lower case); a 24-character base64 id, as some early exporters
wrote (from memory, unchecked: the proto3 JSON default for bytes), is decoded to hex. A span whose times are missing, out of range or end before they start is
rejected; the first record of a line carries ``lines=1``, the others ``lines=0``.
"""

from __future__ import annotations

import base64
import binascii
import json
import re
from collections.abc import Iterable, Iterator

from attrib.readers.requests_jsonl import EXCERPT, BadValue, to_method, to_status
from attrib.records import ReadOptions, Record, Reject, Request, Skip, Statement
from attrib.routes import derive_route, url_path
from attrib.timeparse import check_range

NAME = "otlp-json"
KIND = "both"

SERVER, CLIENT = 2, 3
_KINDS = {
    "SPAN_KIND_UNSPECIFIED": 0,
    "SPAN_KIND_INTERNAL": 1,
    "SPAN_KIND_SERVER": 2,
    "SPAN_KIND_CLIENT": 3,
    "SPAN_KIND_PRODUCER": 4,
    "SPAN_KIND_CONSUMER": 5,
}
REQUEST_ID_KEYS = (
    "request_id",
    "request.id",
    "http.request_id",
    "http.request.header.x-request-id",
    "http.request.header.x_request_id",
)
_HTTP_KEYS = ("http.request.method", "http.method", "http.route", "url.path", "http.target")
_DB_KEYS = ("db.system.name", "db.system", "db.query.text", "db.statement")
_HEX = re.compile(r"[0-9a-f]+\Z")
_SCOPE_LISTS = ("scopeSpans", "instrumentationLibrarySpans")


def sniff(head: list[str]) -> bool:
    """True when the first non-blank line is a JSON object holding ``resourceSpans``."""
    for text in head:
        stripped = text.lstrip()
        if not stripped:
            continue
        return stripped.startswith("{") and '"resourceSpans"' in stripped[:4096]
    return False


def read(lines: Iterable[tuple[int, str]], options: ReadOptions) -> Iterator[Record]:
    """Read OTLP JSON trace lines into requests and statements; see the module docstring."""
    extra = options.request_fields.get("request_id")
    id_keys = (extra, *REQUEST_ID_KEYS) if extra else REQUEST_ID_KEYS
    for number, text in lines:
        if not text or text.isspace():
            yield Skip(number, "blank")
            continue
        try:
            doc = json.loads(text)
        except (ValueError, RecursionError):
            yield Reject(number, "invalid JSON", text[:EXCERPT])
            continue
        if not isinstance(doc, dict) or not isinstance(doc.get("resourceSpans"), list):
            yield Reject(number, "not an OTLP traces object", text[:EXCERPT])
            continue
        records: list[Record] = []
        textless = False
        for span in _spans(doc):
            record = _span_record(number, span, id_keys)
            if record is None:
                continue
            if record is _NO_TEXT:
                textless = True
                continue
            records.append(record)
        if not records:
            yield Skip(number, "no statement text" if textless else "no http server or db span")
            continue
        for i, record in enumerate(records):
            record.lines = 1 if i == 0 else 0
            yield record


_NO_TEXT = Skip(0, "no statement text")


def _spans(doc: dict) -> Iterator[dict]:
    for resource_spans in doc["resourceSpans"]:
        if not isinstance(resource_spans, dict):
            continue
        for key in _SCOPE_LISTS:
            scopes = resource_spans.get(key)
            if not isinstance(scopes, list):
                continue
            for scope in scopes:
                spans = scope.get("spans") if isinstance(scope, dict) else None
                if isinstance(spans, list):
                    yield from (span for span in spans if isinstance(span, dict))


def _span_record(number: int, span: dict, id_keys: tuple[str, ...]) -> Record | None:
    kind = _kind(span.get("kind"))
    if kind not in (SERVER, CLIENT):
        return None
    attrs = attributes(span.get("attributes"))
    if kind == SERVER and not any(key in attrs for key in _HTTP_KEYS):
        return None
    if kind == CLIENT and not any(key in attrs for key in _DB_KEYS):
        return None
    if kind == CLIENT:
        sql = attrs.get("db.query.text", attrs.get("db.statement"))
        if not isinstance(sql, str) or not sql.strip():
            return _NO_TEXT
    try:
        start_ns = _nanos(span.get("startTimeUnixNano"))
        end_ns = _nanos(span.get("endTimeUnixNano"))
        if end_ns < start_ns:
            raise BadValue("span ends before it starts")
        start_us = check_range(start_ns // 1000)
        elapsed_ms = (end_ns - start_ns) / 1e6
        trace = hex_id(span.get("traceId"), 16)
        if kind == SERVER:
            return _request(number, start_us, elapsed_ms, trace, attrs, id_keys)
        return _statement(number, start_us, elapsed_ms, trace, sql, attrs, span)
    except ValueError as exc:
        return Reject(number, str(exc))


def _request(
    number: int,
    start_us: int,
    elapsed_ms: float,
    trace: str | None,
    attrs: dict[str, object],
    id_keys: tuple[str, ...],
) -> Request:
    method = attrs.get("http.request.method", attrs.get("http.method"))
    if method == "_OTHER":
        method = attrs.get("http.request.method_original", method)
    target = attrs.get("url.path", attrs.get("http.target"))
    if not isinstance(target, str) or not target:
        full = attrs.get("url.full", attrs.get("http.url"))
        target = full if isinstance(full, str) and full else None
    path = url_path(target) if target else None
    route = attrs.get("http.route")
    if not isinstance(route, str) or not route:
        route = derive_route(path) if path else None
    if route is None:
        raise BadValue("no route or path")
    status = attrs.get("http.response.status_code", attrs.get("http.status_code"))
    request_id = None
    for key in id_keys:
        value = attrs.get(key)
        if isinstance(value, list):
            value = value[0] if value else None
        if isinstance(value, str | int) and not isinstance(value, bool) and str(value):
            request_id = str(value)
            break
    return Request(
        number,
        start_us,
        elapsed_ms,
        request_id,
        trace,
        to_method(method.upper() if isinstance(method, str) else method),
        route,
        path,
        to_status(status),
    )


def _statement(
    number: int,
    start_us: int,
    elapsed_ms: float,
    trace: str | None,
    sql: str,
    attrs: dict[str, object],
    span: dict,
) -> Statement:
    rows = attrs.get("db.response.returned_rows")
    if not isinstance(rows, int) or isinstance(rows, bool) or not 0 <= rows < 1 << 63:
        rows = None
    error = attrs.get("db.response.status_code") or attrs.get("error.type")
    if not isinstance(error, str | int) or isinstance(error, bool):
        error = None
    if error is None:
        status = span.get("status")
        code = status.get("code") if isinstance(status, dict) else None
        if code in (2, "2", "STATUS_CODE_ERROR"):
            error = "error"
    database = None
    namespace = attrs.get("db.namespace")
    if isinstance(namespace, str) and namespace:
        database = namespace.split(".", 1)[0]
    elif isinstance(attrs.get("db.name"), str):
        database = attrs["db.name"]
    user = attrs.get("db.user")
    return Statement(
        number,
        start_us,
        elapsed_ms,
        sql,
        rows=rows,
        trace_id=trace,
        database=database or None,
        user=user if isinstance(user, str) and user else None,
        error=str(error) if error is not None else None,
    )


def attributes(items: object) -> dict[str, object]:
    """Flatten OTLP ``KeyValue`` attributes into a dict of Python values.

    >>> attributes([{"key": "http.status_code", "value": {"intValue": "200"}},
    ...             {"key": "http.route", "value": {"stringValue": "/orders/{id}"}}])
    {'http.status_code': 200, 'http.route': '/orders/{id}'}
    """
    out: dict[str, object] = {}
    if type(items) is not list:
        return out
    for item in items:
        if type(item) is dict:
            key = item.get("key")
            if type(key) is str:
                out[key] = any_value(item.get("value"))
    return out


def any_value(value: object) -> object:
    """The Python value of an OTLP ``AnyValue`` (int64 may come as a string or a number)."""
    if type(value) is not dict:
        return None
    text = value.get("stringValue")
    if text is not None:
        return text
    if "intValue" in value:
        raw = value["intValue"]
        try:
            return int(raw) if not isinstance(raw, bool) else None
        except (TypeError, ValueError):
            return None
    if "boolValue" in value:
        return value["boolValue"]
    if "doubleValue" in value:
        return value["doubleValue"]
    if "arrayValue" in value:
        array = value["arrayValue"]
        values = array.get("values") if isinstance(array, dict) else None
        return [any_value(v) for v in values] if isinstance(values, list) else []
    if "kvlistValue" in value:
        kvlist = value["kvlistValue"]
        return attributes(kvlist.get("values") if isinstance(kvlist, dict) else None)
    return None


def hex_id(value: object, size: int) -> str | None:
    """A trace/span id of ``size`` bytes as lower-case hex; base64 is decoded; all-zero is None.

    >>> hex_id("3F9A1C27D45E4B08A6C2E19B7D05F3A1", 16)
    '3f9a1c27d45e4b08a6c2e19b7d05f3a1'
    """
    if not isinstance(value, str) or not value:
        return None
    text = value.strip().lower()
    if len(text) != 2 * size or not _HEX.match(text):
        try:
            raw = base64.b64decode(value, validate=True)
        except (binascii.Error, ValueError):
            return None
        if len(raw) != size:
            return None
        text = raw.hex()
    return None if text == "0" * (2 * size) else text


def _kind(value: object) -> int:
    if isinstance(value, int) and not isinstance(value, bool):
        return value
    if isinstance(value, str):
        if value.isdigit():
            return int(value)
        return _KINDS.get(value, 0)
    return 0


def _nanos(value: object) -> int:
    if isinstance(value, int) and not isinstance(value, bool):
        return value
    if isinstance(value, str) and value.isdigit():
        return int(value)
    if isinstance(value, float) and value.is_integer():
        return int(value)
    raise BadValue("span without valid start or end time")
