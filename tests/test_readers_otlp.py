"""OTLP JSON trace reader.

Fixtures follow opentelemetry-proto docs/specification.md ("OTLP Specification", JSON Protobuf Encoding:
lowerCamelCase keys, hex ids, 64-bit integers as decimal strings that decoders must also accept as
numbers, enums as integers) and the OpenTelemetry Specification "OpenTelemetry Protocol File Exporter"
(one TracesData object per line). Attribute names: semantic-conventions HTTP migration guide (current and
older names) and "Semantic conventions for database client spans". See log-formats.md §5.
"""

from __future__ import annotations

import base64
import json
from pathlib import Path

import pytest

from attrib.readers import otlp
from attrib.records import ReadOptions, Reject, Request, Skip, Statement

LOGS = Path(__file__).resolve().parent.parent / "fixtures" / "logs" / "otlp-json"
BASE_NS = 1709647331506000000  # the start time of the example in log-formats.md §5.4
BASE_US = BASE_NS // 1000
T1 = "3f9a1c27d45e4b08a6c2e19b7d05f3a1"
T2 = "5b8efff798038103d269b633813fc60c"


def read(name: str, options: ReadOptions | None = None) -> list:
    text = (LOGS / name).read_bytes().decode("utf-8", errors="replace")
    lines = text.split("\n")
    if lines[-1] == "":
        lines.pop()
    return list(otlp.read(enumerate(lines, 1), options or ReadOptions()))


def test_read_current_semconv_gives_requests_and_statements_per_line():
    records = read("001_current_semconv.log")
    assert [(type(r).__name__, r.line, r.lines) for r in records] == [
        ("Request", 1, 1),
        ("Statement", 1, 0),
        ("Statement", 1, 0),
        ("Skip", 2, 1),
        ("Request", 3, 1),
        ("Statement", 3, 0),
        ("Skip", 4, 1),
    ]
    request, select, insert, blank, purge, delete, internal = records
    assert (request.start_us, request.elapsed_ms, request.trace_id) == (BASE_US, 34.0, T1)
    assert (request.method, request.route, request.path, request.status) == (
        "GET",
        "/orders/{id}",
        "/orders/9051",
        200,
    )
    # http.request.header.<name> attributes are string arrays (semconv; from memory, unchecked);
    # the first value is taken.
    assert request.request_id == "5f0c9a3e7b2d41c88e6a0b1d2c3f4e5a"
    assert (select.start_us, select.duration_ms, select.trace_id) == (BASE_US + 4200, 0.9, T1)
    assert (select.sql, select.rows, select.database, select.error) == (
        "SELECT id, status FROM orders WHERE id = $1",
        1,
        "bakery",
        None,
    )
    assert (select.session, select.request_id) == (None, None)
    # db.response.status_code carries the SQLSTATE; the status message (it quotes values) is not kept.
    assert insert.error == "23505"
    assert blank.category == "blank"
    # _OTHER is replaced by http.request.method_original; no http.route: derived from url.path.
    assert (purge.method, purge.route, purge.status, purge.elapsed_ms) == (
        "PURGE",
        "/cache/{hex}",
        204,
        0.25,
    )
    assert (delete.error, delete.trace_id, delete.database) == ("error", T2, None)
    assert internal.category == "no http server or db span"


def test_read_older_semconv_names_and_encodings():
    records = read("002_older_semconv.log")
    request, statement, post = records
    assert isinstance(request, Request) and isinstance(statement, Statement)
    # traceId written in upper case is normalised; start given as a JSON number is accepted.
    assert (request.trace_id, request.start_us, request.elapsed_ms) == (T2, BASE_US, 20.0)
    assert (request.method, request.route, request.path, request.status) == (
        "GET",
        "/orders/:id",
        "/orders/77",
        200,
    )
    assert (statement.sql, statement.database, statement.user, statement.lines) == (
        "SELECT * FROM orders WHERE id = ?",
        "bakery",
        "shop_app",
        0,
    )
    # http.target holds path and query together; the query is dropped.
    assert (post.method, post.route, post.path, post.status, post.line) == (
        "POST",
        "/loaves",
        "/loaves",
        201,
        2,
    )


def test_read_hostile_lines_are_rejected_or_skipped_and_accounted():
    records = read("900_hostile.log")
    summary = [
        (type(r).__name__, r.line, r.lines, getattr(r, "reason", getattr(r, "category", "")))
        for r in records
        if not isinstance(r, Request | Statement)
    ]
    assert summary == [
        ("Reject", 1, 1, "invalid JSON"),
        ("Reject", 2, 1, "not an OTLP traces object"),
        ("Reject", 3, 1, "not an OTLP traces object"),
        ("Skip", 4, 1, "no statement text"),
        ("Reject", 5, 1, "span ends before it starts"),
        ("Reject", 6, 1, "span without valid start or end time"),
        ("Reject", 7, 1, "timestamp out of range"),
        ("Reject", 8, 1, "bad status"),
        ("Skip", 11, 1, "no http server or db span"),
        ("Reject", 12, 1, "invalid JSON"),
    ]
    other = [r for r in records if isinstance(r, Request | Statement)]
    assert [(type(r).__name__, r.line, r.lines) for r in other] == [
        ("Statement", 8, 0),
        ("Request", 9, 1),
        ("Request", 10, 1),
    ]
    statement, b64, nul = other
    assert statement.trace_id == T1
    # An all-zero trace id is invalid (W3C Trace Context) and becomes None; base64 ids are decoded.
    assert b64.trace_id == base64.b64decode("P5r/95gDgQPSabYzgT/GDA==").hex()
    assert b64.route == "/orders/{id}"
    assert nul.path == "/n\x00ul"
    assert sum(r.lines for r in records) == 12


def test_read_request_id_attribute_named_by_the_user():
    span = {
        "traceId": T1,
        "spanId": "9c4e2a7b1d3f5e60",
        "kind": 2,
        "startTimeUnixNano": str(BASE_NS),
        "endTimeUnixNano": str(BASE_NS + 1_000_000),
        "attributes": [
            {"key": "http.route", "value": {"stringValue": "/a"}},
            {"key": "app.rid", "value": {"stringValue": "rid-9"}},
        ],
    }
    line = json.dumps({"resourceSpans": [{"scopeSpans": [{"spans": [span]}]}]})
    (plain,) = otlp.read([(1, line)], ReadOptions())
    (mapped,) = otlp.read([(1, line)], ReadOptions(request_fields={"request_id": "app.rid"}))
    assert (plain.request_id, mapped.request_id) == (None, "rid-9")


def test_read_ten_megabyte_statement_line_is_read_whole():
    sql = "INSERT INTO loaves VALUES " + ",".join(["($1)"] * 2_000_000)
    span = {
        "traceId": T1,
        "spanId": "b71d08e3c2a94f15",
        "kind": 3,
        "startTimeUnixNano": str(BASE_NS),
        "endTimeUnixNano": str(BASE_NS + 5_000_000),
        "attributes": [{"key": "db.query.text", "value": {"stringValue": sql}}],
    }
    line = json.dumps({"resourceSpans": [{"scopeSpans": [{"spans": [span]}]}]})
    assert len(line) > 10_000_000
    (statement,) = otlp.read([(1, line)], ReadOptions())
    assert statement.sql == sql and statement.duration_ms == 5.0


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        ({"stringValue": "x"}, "x"),
        ({"intValue": "200"}, 200),
        ({"intValue": 200}, 200),
        ({"intValue": "abc"}, None),
        ({"boolValue": True}, True),
        ({"doubleValue": 1.5}, 1.5),
        ({"arrayValue": {"values": [{"stringValue": "a"}, {"intValue": "2"}]}}, ["a", 2]),
        ({"kvlistValue": {"values": [{"key": "k", "value": {"stringValue": "v"}}]}}, {"k": "v"}),
        ({}, None),
        ("oops", None),
    ],
)
def test_any_value_decodes_each_otlp_value_kind(value, expected):
    assert otlp.any_value(value) == expected


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (T1, T1),
        (T1.upper(), T1),
        ("0" * 32, None),
        ("xyz", None),
        (None, None),
        (base64.b64encode(bytes.fromhex(T1)).decode(), T1),
    ],
)
def test_hex_id_normalises_trace_ids(value, expected):
    assert otlp.hex_id(value, 16) == expected


def test_sniff_refuses_other_json_lines():
    assert otlp.sniff(['{"resourceSpans":[]}'])
    assert not otlp.sniff(['{"time":"2024-03-05T14:02:11Z","path":"/a","duration_ms":3}'])
    assert not otlp.sniff(["", "   "])
    assert isinstance(next(otlp.read([(1, "")], ReadOptions())), Skip)
    assert isinstance(next(otlp.read([(1, "{}")], ReadOptions())), Reject)


def test_read_db_span_without_text_is_dropped_when_the_line_has_other_records():
    def span(kind: int, attrs: dict[str, str], sid: str) -> dict:
        return {
            "traceId": T1,
            "spanId": sid,
            "kind": kind,
            "startTimeUnixNano": str(BASE_NS),
            "endTimeUnixNano": str(BASE_NS + 2_000_000),
            "attributes": [{"key": k, "value": {"stringValue": v}} for k, v in attrs.items()],
        }

    spans = [
        span(3, {"db.system.name": "postgresql"}, "1111111111111111"),
        span(2, {"http.request.method": "GET", "http.route": "/a"}, "2222222222222222"),
    ]
    line = json.dumps({"resourceSpans": [{"scopeSpans": [{"spans": spans}]}]})
    records = list(otlp.read([(1, line)], ReadOptions()))
    assert [(type(r).__name__, r.lines) for r in records] == [("Request", 1)]
